"""Orientation map pictures: inverse pole figure (IPF) colouring, the colour key, boundaries.

IPF colouring is a trade convention: each point is coloured by the crystal direction that lies
parallel to a chosen sample direction, reduced into the standard triangle of cubic symmetry
(corners 001, 101, 111), with red at 001, green at 101 and blue at 111.

Our colour rule: write the reduced direction ``h`` (unit, ``z ≥ x ≥ y ≥ 0``) as a non-negative
combination of the three corner directions, ``h = a·[001] + b·[101]/√2 + c·[111]/√3``, which
gives ``a = z − x``, ``b = √2 (x − y)``, ``c = √3 y``; the colour is ``(a, b, c) / max(a, b, c)``
raised to the power 0.75 to lift the mid-tones. Corners come out pure red, green and blue.
"""

from __future__ import annotations

import math
from collections.abc import Iterable, Mapping

import matplotlib.pyplot as plt
import numpy as np
from matplotlib.axes import Axes
from matplotlib.collections import LineCollection
from matplotlib.patches import Patch

from slipnet._checks import check_positive
from slipnet.crystal.orientation import quat_rotate
from slipnet.errors import ParameterError
from slipnet.figures._common import SCALAR_CMAP, add_scale_bar, label_map_axes, map_extent

__all__ = ["add_ipf_key", "ipf_colors", "ipf_direction", "plot_ipf_map", "plot_scalar_map"]

#: Colour of unindexed points on maps.
UNINDEXED_COLOR = (0.55, 0.55, 0.55)
#: Exponent applied to the normalised colour (1 = linear).
_GAMMA = 0.75


def _sample_direction(direction) -> np.ndarray:
    d = np.asarray(direction, dtype=np.float64).reshape(-1)
    n = np.linalg.norm(d) if d.size == 3 and np.all(np.isfinite(d)) else 0.0
    if n == 0.0:
        raise ParameterError(
            f"direction should be a non-zero sample-frame 3-vector such as (0, 0, 1); got {direction!r}"
        )
    return d / n


def ipf_direction(quats, direction=(0.0, 0.0, 1.0)) -> np.ndarray:
    """Crystal direction parallel to a sample direction, reduced into the cubic standard triangle.

    Parameters
    ----------
    quats : (..., 4) array_like
        Orientations (sample → crystal); NaN rows give NaN.
    direction : (3,) array_like
        Sample direction in the map frame (x right, y down, z into the specimen).

    Returns
    -------
    (..., 3) ndarray
        Unit vectors with ``z ≥ x ≥ y ≥ 0`` (the triangle 001–101–111 under the cubic Laue group).
    """
    d = _sample_direction(direction)
    q = np.asarray(quats, dtype=np.float64)
    if q.ndim == 0 or q.shape[-1] != 4:
        raise ParameterError(f"quats should have 4 components on the last axis; got shape {q.shape}")
    good = np.all(np.isfinite(q), axis=-1)
    h = np.full((*q.shape[:-1], 3), np.nan)
    if good.any():
        v = quat_rotate(q[good], np.broadcast_to(d, (int(good.sum()), 3)))
        v = np.sort(np.abs(v), axis=-1)  # ascending: (smallest, middle, largest)
        h[good] = v[:, [1, 0, 2]]
    return h


def _triangle_rgb(h: np.ndarray) -> np.ndarray:
    """Colour of directions already in the standard triangle (``z ≥ x ≥ y ≥ 0``)."""
    x, y, z = h[..., 0], h[..., 1], h[..., 2]
    w = np.stack([z - x, math.sqrt(2.0) * (x - y), math.sqrt(3.0) * y], axis=-1)
    w = np.clip(w, 0.0, None)
    m = w.max(axis=-1, keepdims=True)
    with np.errstate(invalid="ignore", divide="ignore"):
        rgb = w / m
    return np.clip(rgb, 0.0, 1.0) ** _GAMMA


def ipf_colors(quats, direction=(0.0, 0.0, 1.0)) -> np.ndarray:
    """IPF colours of orientations for one sample direction (cubic symmetry).

    Parameters
    ----------
    quats : (..., 4) array_like
        Orientations (sample → crystal), e.g. ``omap.quats``; NaN rows give NaN colours.
    direction : (3,) array_like
        Sample direction in the map frame; ``(0, 0, 1)`` (the specimen normal) by default.

    Returns
    -------
    (..., 3) ndarray
        RGB in [0, 1]: red for ⟨001⟩, green for ⟨101⟩, blue for ⟨111⟩ parallel to ``direction``.
    """
    return _triangle_rgb(ipf_direction(quats, direction))


def _direction_label(direction) -> str:
    d = _sample_direction(direction)
    for name, axis in (("x", (1, 0, 0)), ("y", (0, 1, 0)), ("z", (0, 0, 1))):
        if np.allclose(np.abs(d), axis):
            return name
    return "(" + ", ".join(f"{v:.2g}" for v in d) + ")"


def add_ipf_key(ax: Axes, direction=(0.0, 0.0, 1.0), *, bounds=(1.03, 0.55, 0.32, 0.42), resolution: int = 160) -> Axes:
    """Draw the colour key (the standard triangle in stereographic projection) as an inset.

    Parameters
    ----------
    ax
        The map axes; the key goes at ``bounds`` (axes fraction: left, bottom, width, height).
    direction
        The sample direction the map was coloured for (used in the key's title).
    resolution
        Raster points along x of the key.

    Returns
    -------
    Axes
        The inset axes.
    """
    key = ax.inset_axes(list(bounds))
    xmax = math.tan(math.pi / 8)  # [101] projects to (tan 22.5°, 0)
    ymax = 1.0 / (math.sqrt(3.0) + 1.0)  # [111] projects to (1/(√3+1), same)
    X, Y = np.meshgrid(np.linspace(0, xmax, resolution), np.linspace(0, ymax, int(resolution * ymax / xmax)))
    r2 = X**2 + Y**2
    h = np.stack([2 * X, 2 * Y, 1 - r2], axis=-1) / (1 + r2)[..., None]  # inverse stereographic projection
    inside = (Y <= X + 1e-12) & (h[..., 0] <= h[..., 2] + 1e-12)
    rgba = np.zeros((*X.shape, 4))
    rgba[..., :3] = np.nan_to_num(_triangle_rgb(h))
    rgba[..., 3] = inside
    key.imshow(rgba, origin="lower", extent=(0, xmax, 0, ymax), interpolation="bilinear")
    # outline: two straight edges through 001 and the great-circle arc 101–111
    t = np.linspace(0.0, 1.0, 50)[:, None]
    a, b = np.array([1, 0, 1]) / math.sqrt(2), np.array([1, 1, 1]) / math.sqrt(3)
    ang = math.acos(float(a @ b))
    arc = (np.sin((1 - t) * ang) * a + np.sin(t * ang) * b) / math.sin(ang)
    px, py = arc[:, 0] / (1 + arc[:, 2]), arc[:, 1] / (1 + arc[:, 2])
    key.plot(np.r_[0, px, 0], np.r_[0, py, 0], color="black", lw=0.8)
    for txt, (kx, ky), ha in (("001", (0, 0), "right"), ("101", (xmax, 0), "left"), ("111", (ymax, ymax), "left")):
        key.text(kx, ky, txt, ha=ha, va="top" if ky == 0 else "bottom", fontsize=8)
    key.set_xlim(-0.08, xmax + 0.1)
    key.set_ylim(-0.06, ymax + 0.08)
    key.set_aspect("equal")
    key.axis("off")
    key.set_title(f"crystal direction ∥ {_direction_label(direction)}", fontsize=8)
    return key


def _display_raster(omap, values: np.ndarray) -> tuple[np.ndarray, tuple[float, float, float, float]]:
    """Image and extent that place each point where it sits (hex rows drawn half-step shifted)."""
    if omap.grid == "square":
        return values, map_extent(omap)
    ny, nx = omap.shape
    # each point becomes two half-step pixels; odd rows start one half-step later: exact hex layout
    img = np.zeros((ny, 2 * nx + 1, *values.shape[2:]), dtype=values.dtype)
    if values.dtype.kind == "f":
        img[:] = np.nan
    else:
        img[:] = -1
    rep = np.repeat(values, 2, axis=1)
    img[0::2, : 2 * nx] = rep[0::2]
    img[1::2, 1:] = rep[1::2]
    x0, _, y0, y1 = omap.extent
    left = x0 - 0.5 * omap.step
    dy = omap.row_spacing
    return img, (left, left + (2 * nx + 1) * 0.5 * omap.step, y1 + 0.5 * dy, y0 - 0.5 * dy)


def _label_edges(labels: np.ndarray) -> np.ndarray:
    """One-pixel-wide grain boundaries of a label raster (both sides must be grains)."""
    edge = np.zeros(labels.shape, dtype=bool)
    both = (labels[:, 1:] >= 0) & (labels[:, :-1] >= 0)
    edge[:, :-1] |= (labels[:, 1:] != labels[:, :-1]) & both
    both = (labels[1:] >= 0) & (labels[:-1] >= 0)
    edge[:-1] |= (labels[1:] != labels[:-1]) & both
    return edge


def _new_map_axes(omap, figsize_in: float) -> Axes:
    x0, x1, y0, y1 = omap.extent
    aspect = (y1 - y0 + omap.row_spacing) / max(x1 - x0 + omap.step, 1e-9)
    fig, ax = plt.subplots(figsize=(figsize_in, max(2.5, figsize_in * 0.72 * aspect)))
    fig.subplots_adjust(right=0.72)
    return ax


def _draw_overlays(ax: Axes, omap, extent, labels, boundaries) -> None:
    """Grain boundaries from a label raster and/or polylines (µm), in black."""
    if labels is not None:
        lab = np.asarray(labels)
        if lab.shape != omap.shape:
            raise ParameterError(f"labels should have the map's shape {omap.shape}; got {lab.shape}")
        lab_img, _ = _display_raster(omap, lab.astype(np.int64))
        edge = _label_edges(lab_img)
        overlay = np.zeros((*edge.shape, 4))
        overlay[..., 3] = edge
        ax.imshow(overlay, extent=extent, origin="upper", interpolation="nearest")
    if boundaries is not None:
        items = boundaries.values() if isinstance(boundaries, Mapping) else boundaries
        segs = []
        for item in items:
            for line in ([item] if isinstance(item, np.ndarray) else item):
                arr = np.asarray(line, dtype=np.float64)
                if arr.ndim == 2 and arr.shape[1] == 2 and arr.shape[0] >= 2:
                    segs.append(arr)
        ax.add_collection(LineCollection(segs, colors="black", linewidths=0.7))


def plot_scalar_map(
    omap,
    values,
    label: str,
    ax: Axes | None = None,
    labels=None,
    boundaries: Mapping | Iterable | None = None,
    *,
    cmap: str = SCALAR_CMAP,
    vmin: float | None = None,
    vmax: float | None = None,
    title: str | None = None,
    figsize_in: float = 7.0,
) -> Axes:
    """Draw a per-point scalar (KAM, quality, strain, ...) on the map grid, with a colour bar.

    Parameters
    ----------
    omap : OrientationMap
        The map whose grid the values live on (square or hexagonal).
    values : (ny, nx) array_like
        One number per point; NaN and unindexed points are drawn grey.
    label
        Colour-bar label with units, e.g. ``"KAM (°)"``.
    ax, labels, boundaries, title, figsize_in
        As in :func:`plot_ipf_map`.
    cmap
        A perceptually uniform, colour-blind-safe map (viridis by default; cividis also fits).
    vmin, vmax
        Colour limits (default: data range).

    Returns
    -------
    Axes
        The map axes.
    """
    check_positive(figsize_in, "figsize_in")
    v = np.asarray(values, dtype=np.float64)
    if v.shape != omap.shape:
        raise ParameterError(f"values should have the map's shape {omap.shape}; got {v.shape}")
    if ax is None:
        ax = _new_map_axes(omap, figsize_in)
    v = np.where(omap.indexed, v, np.nan)
    img, extent = _display_raster(omap, v)
    cm = plt.get_cmap(cmap).with_extremes(bad=UNINDEXED_COLOR)
    im = ax.imshow(np.ma.masked_invalid(img), extent=extent, origin="upper", interpolation="nearest", cmap=cm,
                   vmin=vmin, vmax=vmax)
    _draw_overlays(ax, omap, extent, labels, boundaries)
    label_map_axes(ax)
    ax.set_xlim(extent[0], extent[1])
    ax.set_ylim(extent[2], extent[3])
    add_scale_bar(ax)
    ax.figure.colorbar(im, ax=ax, label=label, shrink=0.8)
    if title is not None:
        ax.set_title(title)
    return ax


def plot_ipf_map(
    omap,
    direction=(0.0, 0.0, 1.0),
    ax: Axes | None = None,
    labels=None,
    boundaries: Mapping | Iterable | None = None,
    *,
    key: bool = True,
    title: str | None = None,
    figsize_in: float = 7.0,
) -> Axes:
    """Draw an orientation map in IPF colours, with axes in µm and a scale bar.

    Parameters
    ----------
    omap : OrientationMap
        The map (square or hexagonal grid).
    direction : (3,) array_like
        Sample direction (map frame) whose crystal direction sets the colour.
    ax
        Axes to draw into; a new figure if None (save it with
        :func:`slipnet.figures._common.save_figure`).
    labels : (ny, nx) int array_like, optional
        Grain labels (−1 none); their boundaries are drawn as thin black lines.
    boundaries
        Boundary polylines in µm: a mapping ``id → list of (k, 2) arrays`` (as
        ``GrainGraph.boundary_polylines``) or an iterable of ``(k, 2)`` arrays.
    key
        Draw the colour-key triangle and the unindexed legend beside the map.
    title
        Axes title (default names the direction).
    figsize_in
        Width of a new figure, inches.

    Returns
    -------
    Axes
        The map axes (``ax.figure`` is the figure).
    """
    check_positive(figsize_in, "figsize_in")
    if ax is None:
        ax = _new_map_axes(omap, figsize_in)
    rgb = ipf_colors(omap.quats, direction)
    rgb[~omap.indexed] = UNINDEXED_COLOR
    img, extent = _display_raster(omap, rgb)
    if omap.grid == "hex":
        img = np.where(np.isnan(img), 1.0, img)  # the half-pixel margins of the shifted rows: white
    ax.imshow(img, extent=extent, origin="upper", interpolation="nearest")
    _draw_overlays(ax, omap, extent, labels, boundaries)
    label_map_axes(ax)
    ax.set_xlim(extent[0], extent[1])
    ax.set_ylim(extent[2], extent[3])
    add_scale_bar(ax)
    ax.set_title(title if title is not None else f"IPF colouring, crystal direction ∥ {_direction_label(direction)}")
    if key:
        add_ipf_key(ax, direction)
        if not omap.indexed.all():
            # added as an artist so that a later ax.legend() call (e.g. for markers) keeps it
            ax.add_artist(ax.legend(handles=[Patch(color=UNINDEXED_COLOR, label="unindexed")], loc="upper left",
                                    bbox_to_anchor=(1.03, 0.5), frameon=False, fontsize=8))
    return ax

"""Pictures of the grain graph: grain map with boundaries by class, misorientation histogram.

Boundary colours are this project's own choice, picked to stay distinguishable under the common
forms of colour-vision deficiency (light/dark contrast differs between neighbouring entries, and
low-angle boundaries are also dashed, so nothing relies on hue alone).
"""

from __future__ import annotations

import numpy as np
from matplotlib.axes import Axes
from matplotlib.collections import LineCollection
from matplotlib.figure import Figure
from matplotlib.lines import Line2D

from slipnet._checks import check_choice
from slipnet.errors import ParameterError
from slipnet.figures._common import add_scale_bar, label_map_axes, map_extent

__all__ = ["BOUNDARY_STYLE", "grain_colours", "plot_grain_map", "plot_misorientation_histogram"]

#: class → (colour, line width, dash style); CSL classes beyond the first three share one style.
BOUNDARY_STYLE: dict[str, tuple[str, float, str]] = {
    "high_angle": ("#14213d", 1.0, "solid"),      # deep navy
    "low_angle": ("#f4f1de", 0.8, "dashed"),      # ivory, dashed
    "subgrain": ("#9a9a9a", 0.6, "dotted"),       # mid grey, dotted
    "sigma3": ("#e07a1f", 1.4, "solid"),          # amber
    "sigma5": ("#5fb3d9", 1.4, "solid"),          # sky
    "sigma9": ("#c2185b", 1.4, "solid"),          # raspberry
    "csl_other": ("#ffd23f", 1.2, "solid"),       # sun yellow
    "phase_boundary": ("#2a9d8f", 1.6, "solid"),  # teal
}

# qualitative fill colours for grains when IPF colouring is not available (own pastel set)
_FILL = np.array([
    [0.88, 0.72, 0.55], [0.60, 0.77, 0.89], [0.80, 0.86, 0.62], [0.85, 0.66, 0.76],
    [0.70, 0.70, 0.88], [0.93, 0.85, 0.55], [0.62, 0.84, 0.78], [0.78, 0.78, 0.78],
])


def _style_key(cls: str) -> str:
    if cls in BOUNDARY_STYLE:
        return cls
    return "csl_other" if cls.startswith("sigma") else "high_angle"


def grain_colours(gg, colour_by: str = "ipf") -> np.ndarray:
    """RGB colour per grain, shape (n_grains, 3).

    ``"ipf"`` colours each grain's mean orientation by the crystal direction along the map normal
    (:func:`slipnet.figures.maps.ipf_colors`); ``"qualitative"`` colours the grain adjacency
    graph greedily so that neighbours never share a colour.
    """
    colour_by = check_choice(colour_by, "colour_by", ("ipf", "qualitative"))
    if colour_by == "ipf":
        try:
            from slipnet.figures.maps import ipf_colors
        except ImportError:  # pragma: no cover - the IPF module is part of the package
            colour_by = "qualitative"
        else:
            return np.asarray(ipf_colors(gg.mean_quats), dtype=float)[:, :3]
    import networkx as nx

    col = nx.greedy_color(gg.graph, strategy="largest_first")
    idx = np.array([col.get(g, 0) for g in range(gg.n_grains)], dtype=np.int64)
    return _FILL[idx % len(_FILL)]


def _raster(omap, values):
    try:
        from slipnet.figures.maps import _display_raster

        return _display_raster(omap, values)
    except ImportError:  # pragma: no cover
        return values, map_extent(omap)


def plot_grain_map(gg, ax: Axes | None = None, *, colour_by: str = "ipf", classes=None,
                   legend: bool = True, figsize_in: float = 7.0) -> Figure:
    """Grains coloured by mean orientation (or qualitatively), boundaries drawn by class.

    Parameters
    ----------
    gg : GrainGraph
    ax
        Axes to draw into (a new figure if None).
    colour_by
        ``"ipf"`` or ``"qualitative"`` (see :func:`grain_colours`).
    classes
        Boundary classes to draw (default: all).
    legend
        Add a legend of the boundary classes present.
    figsize_in
        Width of a new figure, inches.

    Returns
    -------
    Figure
    """
    import matplotlib.pyplot as plt

    om = gg.omap
    if ax is None:
        x0, x1, y0, y1 = om.extent
        aspect = (y1 - y0 + om.row_spacing) / max(x1 - x0 + om.step, 1e-9)
        fig, ax = plt.subplots(figsize=(figsize_in, max(2.5, figsize_in * 0.8 * aspect)))
    fig = ax.figure
    cols = grain_colours(gg, colour_by)
    rgb = np.ones((*om.shape, 3))
    lab = gg.labels
    rgb[lab >= 0] = cols[lab[lab >= 0]]
    img, extent = _raster(om, rgb)
    img = np.where(np.isnan(img), 1.0, img) if img.dtype.kind == "f" else img
    ax.imshow(img, extent=extent, origin="upper", interpolation="nearest")
    b = gg.boundaries
    keep = np.ones(len(b), dtype=bool) if classes is None else b["boundary_class"].isin(list(classes)).to_numpy()
    present: dict[str, int] = {}
    groups: dict[str, list[np.ndarray]] = {}
    for bid, cls in zip(b["boundary_id"].to_numpy()[keep], b["boundary_class"].to_numpy()[keep], strict=True):
        key = _style_key(str(cls))
        groups.setdefault(key, []).extend(gg.boundary_polylines[int(bid)])
        present[key] = present.get(key, 0) + 1
    order = [k for k in BOUNDARY_STYLE if k in groups]
    for key in order:
        colour, lw, ls = BOUNDARY_STYLE[key]
        ax.add_collection(LineCollection(groups[key], colors=colour, linewidths=lw, linestyles=ls))
    label_map_axes(ax)
    ax.set_xlim(extent[0], extent[1])
    ax.set_ylim(extent[2], extent[3])
    add_scale_bar(ax)
    ax.set_title(f"{gg.n_grains} grains, threshold {gg.settings.get('threshold_deg', float('nan')):g}°"
                 + (" (IPF colours of grain means, map normal)" if colour_by == "ipf" else ""))
    if legend and order:
        handles = [Line2D([], [], color=BOUNDARY_STYLE[k][0], lw=2, ls=BOUNDARY_STYLE[k][2]) for k in order]
        names = [f"{k.replace('_', ' ')} ({present[k]})" for k in order]
        leg = ax.legend(handles, names, title="boundaries (count)", loc="upper left", bbox_to_anchor=(1.01, 1.0),
                        fontsize=8, title_fontsize=8, facecolor="#b0b0b0")
        leg.get_frame().set_alpha(1.0)
    return fig


def plot_misorientation_histogram(gg, ax: Axes | None = None, *, weight: str = "length",
                                  bin_deg: float = 2.5) -> Figure:
    """Histogram of boundary misorientation angles against the Mackenzie (1958) curve (cubic).

    Parameters
    ----------
    gg : GrainGraph
    ax
        Axes to draw into (a new figure if None).
    weight
        ``"length"`` (each boundary weighted by its length in µm) or ``"number"``.
    bin_deg
        Bin width, degrees.

    Returns
    -------
    Figure
    """
    import matplotlib.pyplot as plt

    from slipnet.crystal.csl import mackenzie_density

    weight = check_choice(weight, "weight", ("length", "number"))
    if not 0.1 <= float(bin_deg) <= 15.0:
        raise ParameterError(f"bin_deg should lie in [0.1, 15]; got {bin_deg!r}")
    if ax is None:
        fig, ax = plt.subplots(figsize=(6.5, 4.0))
    fig = ax.figure
    b = gg.boundaries[gg.boundaries["boundary_class"] != "phase_boundary"]
    edges = np.arange(0.0, 62.8 + bin_deg, bin_deg)
    w = b["length_um"].to_numpy() if weight == "length" else np.ones(len(b))
    total = w.sum()
    hist, _ = np.histogram(b["misorientation_deg"].to_numpy(), bins=edges, weights=w)
    dens = hist / (total * np.diff(edges)) if total > 0 else hist.astype(float)
    ax.bar(edges[:-1], dens, width=np.diff(edges), align="edge", color="#5fb3d9", edgecolor="#14213d", lw=0.5,
           label=f"boundaries ({'length' if weight == 'length' else 'number'}-weighted, n = {len(b)})")
    fine = np.linspace(0.0, 63.0, 127)
    ax.plot(0.5 * (fine[1:] + fine[:-1]), mackenzie_density(fine), color="#e07a1f", lw=2,
            label="Mackenzie (1958), random cubic pairs")
    ax.set_xlabel("misorientation angle (°)")
    ax.set_ylabel("probability density (1/°)")
    ax.set_xlim(0, 63)
    ax.legend(fontsize=8)
    ax.set_title("Boundary misorientation distribution")
    return fig

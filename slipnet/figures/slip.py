"""Pictures of slip activity: per-grain Schmid factor map, boundaries coloured by transmission score,
surface slip-trace overlay. Plotting only (each function returns a Figure); the numbers come from
:mod:`slipnet.slip`, the files are written by :mod:`slipnet.reports.slip`.
"""

from __future__ import annotations

import matplotlib.pyplot as plt
import numpy as np
import pandas as pd
from matplotlib.collections import LineCollection
from matplotlib.lines import Line2D

from slipnet.figures._common import SCALAR_CMAP, add_scale_bar, label_map_axes, map_extent

__all__ = ["grain_image", "plot_schmid_map", "plot_slip_traces", "plot_transmission"]


def grain_image(gg, values) -> np.ndarray:
    """Paint one value per grain onto the map grid: ``(ny, nx)`` float, NaN where no grain."""
    labels = np.asarray(gg.labels)
    v = np.append(np.asarray(values, dtype=float), np.nan)
    return v[np.where(labels >= 0, labels, len(v) - 1)]


def _finish(fig, ax):
    label_map_axes(ax)
    add_scale_bar(ax)
    return fig


def _new_axes(gg):
    ny, nx = gg.labels.shape
    aspect = ny * gg.omap.row_spacing / max(nx * gg.omap.step, 1e-9)
    return plt.subplots(figsize=(7.0, max(2.5, min(9.0, 6.0 * aspect + 0.8))))


def plot_schmid_map(gg, values, *, label: str = "Schmid factor (–)",
                    title: str = "Largest Schmid factor per grain", vmax: float | None = 0.5):
    """Per-grain map of a Schmid factor (viridis) with a colour bar and a scale bar.

    Parameters
    ----------
    gg
        Grain graph (``labels``, ``omap``).
    values : (n_grains,) array_like
        One value per grain (e.g. ``grain_schmid_table(...)["schmid_max"]``).
    """
    fig, ax = _new_axes(gg)
    img = grain_image(gg, values)
    im = ax.imshow(img, extent=map_extent(gg.omap), origin="upper", cmap=SCALAR_CMAP, vmin=0.0, vmax=vmax,
                   interpolation="nearest")
    fig.colorbar(im, ax=ax, label=label, shrink=0.85)
    ax.set_title(title)
    return _finish(fig, ax)


def _boundary_segments(gg, boundary_ids):
    segs, owner = [], []
    for bid in boundary_ids:
        for line in gg.boundary_polylines.get(int(bid), []):
            pts = np.asarray(line, dtype=float)
            if pts.ndim == 2 and pts.shape[0] >= 2:
                segs.append(pts)
                owner.append(int(bid))
    return segs, np.array(owner, dtype=np.int64)


def plot_transmission(gg, table: pd.DataFrame, *,
                      title: str = "Slip transmission score (larger of the two directions)"):
    """Boundaries coloured by their transmission score (cividis) over a grey grain map.

    Parameters
    ----------
    table
        From :func:`slipnet.slip.transmission_table` (two rows per boundary); the
        larger of the two directional scores is drawn.
    """
    fig, ax = _new_axes(gg)
    # mid grey under the lines: both ends of cividis (dark blue, yellow) stand out against it
    grey = np.where(np.asarray(gg.labels) >= 0, 0.6, 1.0)
    ax.imshow(grey, extent=map_extent(gg.omap), origin="upper", cmap="gray", vmin=0, vmax=1,
              interpolation="nearest")
    score = table.groupby("boundary_id")["transmission_score"].max()
    segs, owner = _boundary_segments(gg, score.index.to_numpy())
    if segs:
        lc = LineCollection(segs, cmap="cividis", linewidths=2.5)
        lc.set_array(score.reindex(owner).to_numpy())
        lc.set_clim(0.0, 1.0)
        ax.add_collection(lc)
        fig.colorbar(lc, ax=ax, label="transmission score (–)", shrink=0.85)
    ax.set_title(title)
    return _finish(fig, ax)


def plot_slip_traces(gg, traces: pd.DataFrame, *, background=None,
                     title: str = "Surface traces of the most-stressed slip planes"):
    """Short line segments at grain centroids along the surface traces of the top slip planes.

    Parameters
    ----------
    traces
        From :func:`slipnet.slip.slip_trace_table` (``rank`` 1 solid, 2 dashed).
    background : (n_grains,) array_like, optional
        Per-grain values shown underneath (viridis, e.g. the effective Schmid factor).
    """
    fig, ax = _new_axes(gg)
    ext = map_extent(gg.omap)
    if background is not None:
        im = ax.imshow(grain_image(gg, background), extent=ext, origin="upper", cmap=SCALAR_CMAP, vmin=0.0,
                       vmax=max(0.5, float(np.nanmax(background)) if np.isfinite(background).any() else 0.5),
                       interpolation="nearest", alpha=0.75)
        fig.colorbar(im, ax=ax, label="effective Schmid factor (–)", shrink=0.85)
    node = dict(gg.graph.nodes(data=True))
    t = traces[np.isfinite(traces["trace_angle_deg"]) & np.isfinite(traces["centroid_x_um"])]
    size = np.array([float(node.get(int(g), {}).get("ecd_um", 4 * gg.omap.step)) for g in t["grain"]])
    half = 0.35 * np.maximum(size, 2 * gg.omap.step)
    th = np.deg2rad(t["trace_angle_deg"].to_numpy())
    cx, cy = t["centroid_x_um"].to_numpy(), t["centroid_y_um"].to_numpy()
    p0 = np.stack([cx - half * np.cos(th), cy - half * np.sin(th)], axis=1)
    p1 = np.stack([cx + half * np.cos(th), cy + half * np.sin(th)], axis=1)
    handles = []
    for rank, style in ((1, "solid"), (2, "dashed")):
        sel = (t["rank"] == rank).to_numpy()
        if sel.any():
            segs = np.stack([p0[sel], p1[sel]], axis=1)
            ax.add_collection(LineCollection(segs, colors="black", linewidths=1.6 if rank == 1 else 1.1,
                                             linestyles=style))
            handles.append(Line2D([], [], color="black", linestyle=style,
                                  label="most-stressed plane" if rank == 1 else "second plane"))
    ax.set_xlim(ext[0], ext[1])
    ax.set_ylim(ext[2], ext[3])
    if handles:
        ax.legend(handles=handles, loc="upper right", fontsize=8, framealpha=0.8)
    ax.set_title(title)
    return _finish(fig, ax)

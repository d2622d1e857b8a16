"""Pictures of a crack forecast: the map with path, alternatives, barriers and sites; score terms."""

from __future__ import annotations

import matplotlib.pyplot as plt
import numpy as np
from matplotlib.axes import Axes
from matplotlib.figure import Figure
from matplotlib.lines import Line2D

from slipnet.figures._common import SCALAR_CMAP, add_scale_bar, label_map_axes, map_extent
from slipnet.labels import boundary_label

__all__ = ["plot_forecast_map", "plot_score_terms"]

# Okabe–Ito colours (colour-blind safe) for the overlays
_PATH = "#D55E00"
_ALT = "#56B4E9"
_BARRIER = "#F0E442"
_SITE = "#CC79A7"


def _boundary_mask(labels: np.ndarray) -> np.ndarray:
    m = np.zeros(labels.shape, bool)
    m[:, :-1] |= labels[:, :-1] != labels[:, 1:]
    m[:-1, :] |= labels[:-1, :] != labels[1:, :]
    return m


def plot_forecast_map(fc, gg, *, ax: Axes | None = None, n_barriers: int = 8, n_sites: int = 8) -> Figure:
    """Map with the predicted localisation field, boundaries, path, alternatives, barriers and sites.

    Parameters
    ----------
    fc : CrackForecast
    gg : GrainGraph
        The graph the forecast was made on (labels and map geometry).
    ax
        Axis to draw on (a new figure otherwise).
    n_barriers, n_sites
        How many ranked barriers and sites to number.

    Returns
    -------
    Figure
    """
    if ax is None:
        fig, ax = plt.subplots(figsize=(7.5, 6.5))
    else:
        fig = ax.figure
    ext = map_extent(gg.omap)
    field = fc.field if fc.field is not None else np.zeros(gg.labels.shape)
    # the field is computed only in the window the forecast reads (0 elsewhere): leave the rest
    # blank, not dark, so that 'not forecast' never reads as 'no localisation'
    field = np.ma.masked_where(np.asarray(field) == 0.0, field)
    im = ax.imshow(field, extent=ext, origin="upper", cmap=SCALAR_CMAP, vmin=0, vmax=1, interpolation="nearest")
    bm = np.ma.masked_where(~_boundary_mask(np.asarray(gg.labels)), np.ones(gg.labels.shape))
    ax.imshow(bm, extent=ext, origin="upper", cmap="gray_r", vmin=0, vmax=1.5, alpha=0.8, interpolation="nearest")
    fig.colorbar(im, ax=ax, shrink=0.8, label="predicted localisation (normalised, 0–1; blank: not forecast)")
    handles = []
    alts = fc.alternatives
    if len(alts):
        for _b, seg in alts.groupby("branch"):
            for r in seg.itertuples():
                ax.plot([r.x0_um, r.x1_um], [r.y0_um, r.y1_um], color=_ALT, lw=1.2, ls="--")
        handles.append(Line2D([], [], color=_ALT, lw=1.2, ls="--", label="alternative paths"))
    p = fc.path
    if len(p):
        xs = np.r_[p["x0_um"].to_numpy()[:1], p["x1_um"].to_numpy()]
        ys = np.r_[p["y0_um"].to_numpy()[:1], p["y1_um"].to_numpy()]
        ax.plot(xs, ys, color="black", lw=5, solid_capstyle="round")
        ax.plot(xs, ys, color=_PATH, lw=3, solid_capstyle="round")
        handles.append(Line2D([], [], color=_PATH, lw=3, label=f"forecast path ({fc.length_um:.0f} µm)"))
    tip = fc.settings["tip_um"]
    ax.plot(*tip, marker="*", ms=14, color="white", mec="black")
    handles.append(Line2D([], [], marker="*", ms=12, color="white", mec="black", ls="", label="crack tip"))
    for r in fc.barriers.head(n_barriers).itertuples():
        ax.plot(r.x_um, r.y_um, "o", ms=13, color=_BARRIER, mec="black")
        ax.annotate(boundary_label(r.boundary_id), (r.x_um, r.y_um), xytext=(6, -11), textcoords="offset points",
                    fontsize=7, fontweight="bold")
    if len(fc.barriers):
        handles.append(Line2D([], [], marker="o", ms=10, color=_BARRIER, mec="black", ls="",
                              label="barrier (B = boundary id of the grain tables)"))
    for r in fc.sites.head(n_sites).itertuples():
        ax.plot(r.x_um, r.y_um, "s", ms=11, color=_SITE, mec="black")
        ax.text(r.x_um, r.y_um, f"S{int(r.rank)}", ha="center", va="center", fontsize=6, color="white",
                fontweight="bold")
    if len(fc.sites):
        handles.append(Line2D([], [], marker="s", ms=9, color=_SITE, mec="black", ls="",
                              label="localisation site (S = rank in the site table)"))
    ax.set_xlim(ext[0], ext[1])
    ax.set_ylim(ext[2], ext[3])
    label_map_axes(ax)
    add_scale_bar(ax)
    ax.legend(handles=handles, loc="best", fontsize=8, framealpha=0.85)
    ax.set_title("Crack forecast: path, barriers and localisation sites")
    return fig


def plot_score_terms(fc, *, ax: Axes | None = None) -> Figure:
    """Weighted barrier-score terms of every ranked boundary against distance along the path.

    Each boundary is a stacked bar at its distance from the tip (µm); the segments are
    ``weight × term / Σ weights`` (before the distance relevance), the dots the final score.
    """
    if ax is None:
        fig, ax = plt.subplots(figsize=(7.5, 4.0))
    else:
        fig = ax.figure
    b = fc.barriers.sort_values("distance_um")
    names = [("twist", "twist α/90°"), ("transmission", "1 − |m′|"), ("class", "boundary class"),
             ("schmid_drop", "Schmid drop")]
    colours = ["#0072B2", "#E69F00", "#009E73", "#CC79A7"]
    if len(b):
        wsum = sum(b[f"weight_{k}"].to_numpy() for k, _ in names)
        bottom = np.zeros(len(b))
        width = max(0.6 * float(np.ptp(b["distance_um"])) / max(len(b), 1), 1.0)
        for (k, lab), c in zip(names, colours, strict=True):
            h = b[f"weight_{k}"].to_numpy() * b[f"term_{k}"].to_numpy() / wsum
            ax.bar(b["distance_um"], h, bottom=bottom, width=width, color=c, label=lab,
                   alpha=np.where(b["on_path"], 1.0, 0.5).mean())
            bottom += h
        ax.plot(b["distance_um"], b["barrier_score"], "ko", label="score (× relevance)")
        for r in b.itertuples():
            ax.text(r.distance_um, bottom[list(b.index).index(r.Index)] + 0.02, boundary_label(r.boundary_id),
                    ha="center", fontsize=7)
    else:
        ax.text(0.5, 0.5, "no boundary met within the horizon", transform=ax.transAxes, ha="center")
    ax.set_xlabel("distance along the path from the tip (µm)")
    ax.set_ylabel("barrier score terms (0–1)")
    ax.set_ylim(0, 1.1)
    ax.legend(fontsize=8, loc="upper right")
    ax.set_title("Barrier score terms along the path")
    return fig

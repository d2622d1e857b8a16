"""Pictures of a whole study: the answer on the map, candidate notches, growth with Monte Carlo bands.

Every picture names grains, boundaries, notches and sites as the tables do (:mod:`slipnet.labels`):
``B143`` is boundary 143 everywhere, ``N1`` the best notch, ``N1-S2`` its second site. Colours are
Okabe–Ito (colour-blind safe) with a distinct marker or line style per kind, axes in µm with a
scale bar. The functions take the study result (``slipnet.study.StudyResult``) or its parts.
"""

from __future__ import annotations

import math

import matplotlib.pyplot as plt
import numpy as np
from matplotlib.axes import Axes
from matplotlib.figure import Figure
from matplotlib.lines import Line2D

from slipnet.figures._common import SCALAR_CMAP, add_scale_bar, label_map_axes, map_extent
from slipnet.labels import boundary_label, notch_label, site_label
from slipnet.maps.notch import NotchShape, notch_mask

__all__ = ["NOTCH_COLOURS", "plot_candidate_growth", "plot_candidate_map", "plot_notch_forecast",
           "plot_study_answer", "plot_study_growth"]

#: Okabe–Ito colours of the candidate notches N1, N2, ... (then repeated).
NOTCH_COLOURS = ("#D55E00", "#0072B2", "#009E73", "#CC79A7", "#E69F00", "#56B4E9")
_STYLES = ("-", "--", "-.", ":", (0, (5, 1)), (0, (3, 1, 1, 1)))
_BARRIER = "#F0E442"
_SITE = "#56B4E9"


def _colour(i: int) -> str:
    return NOTCH_COLOURS[i % len(NOTCH_COLOURS)]


def _grain_edges(labels: np.ndarray) -> np.ndarray:
    """Points on a boundary between two grains (specks of unindexed points are not outlined)."""
    edges = np.zeros(labels.shape, bool)
    h = (labels[:, :-1] != labels[:, 1:]) & (labels[:, :-1] >= 0) & (labels[:, 1:] >= 0)
    v = (labels[:-1, :] != labels[1:, :]) & (labels[:-1, :] >= 0) & (labels[1:, :] >= 0)
    edges[:, :-1] |= h
    edges[:-1, :] |= v
    return edges


def _background(ax: Axes, gg) -> tuple[float, float, float, float]:
    """Grains in light grey, unindexed points darker, boundaries black."""
    labels = np.asarray(gg.labels)
    edges = _grain_edges(labels)
    shade = np.where(labels >= 0, 0.93, 0.78) - 0.65 * edges
    ext = map_extent(gg.omap)
    ax.imshow(shade, extent=ext, origin="upper", cmap="gray", vmin=0, vmax=1, interpolation="nearest")
    return ext


def _notch_outline(ax: Axes, gg, row, shape: NotchShape, colour: str, lw: float) -> None:
    om = gg.omap
    x, y = om.coordinates()
    m = notch_mask(x, y, (float(row["edge_x_um"]), float(row["edge_y_um"])),
                   (float(row["normal_x"]), float(row["normal_y"])), shape, behind_um=om.step)
    if m.any():
        ax.contour(x, y, m.astype(float), levels=[0.5], colors=[colour], linewidths=lw)


def _path_xy(path) -> tuple[np.ndarray, np.ndarray]:
    xs = np.r_[path["x0_um"].to_numpy()[:1], path["x1_um"].to_numpy()]
    ys = np.r_[path["y0_um"].to_numpy()[:1], path["y1_um"].to_numpy()]
    return xs, ys


def _barriers_on_path(fc):
    b = fc.barriers
    return b[b["on_path"].astype(bool)].sort_values("distance_um") if len(b) else b


def _draw_outcome(ax: Axes, o, colour: str, style, *, main: bool, n_sites: int) -> list:
    handles = []
    fc = o.forecast
    if len(fc.path):
        xs, ys = _path_xy(fc.path)
        if main:
            ax.plot(xs, ys, color="black", lw=4.5, solid_capstyle="round")
        ax.plot(xs, ys, color=colour, lw=3.0 if main else 1.8, ls=style, solid_capstyle="round")
    handles.append(Line2D([], [], color=colour, lw=3.0 if main else 1.8, ls=style,
                          label=f"{notch_label(o.rank)}: forecast path ({fc.length_um:.0f} µm)"))
    if main:
        if fc.samples is not None and len(fc.samples) and {"end_x_um", "end_y_um"} <= set(fc.samples.columns):
            ax.plot(fc.samples["end_x_um"], fc.samples["end_y_um"], ".", ms=4, color=colour, mec="black", mew=0.3)
            handles.append(Line2D([], [], marker=".", ls="", color=colour, mec="black",
                                  label=f"path ends of {len(fc.samples)} Monte Carlo samples"))
        for r in _barriers_on_path(fc).itertuples():
            ax.plot(r.x_um, r.y_um, "o", ms=8, color=_BARRIER, mec="black", mew=0.8)
            ax.annotate(boundary_label(r.boundary_id), (r.x_um, r.y_um), xytext=(5, -10), textcoords="offset points",
                        fontsize=7.5, fontweight="bold",
                        bbox={"facecolor": "white", "alpha": 0.8, "pad": 0.8, "edgecolor": "none"})
        if len(_barriers_on_path(fc)):
            handles.append(Line2D([], [], marker="o", ls="", ms=7, color=_BARRIER, mec="black",
                                  label="barrier on the path (B = boundary id)"))
        for r in fc.sites.head(n_sites).itertuples():
            ax.plot(r.x_um, r.y_um, "s", ms=7, color=_SITE, mec="black", mew=0.8)
            ax.annotate(site_label(o.rank, r.rank), (r.x_um, r.y_um), xytext=(5, 4), textcoords="offset points",
                        fontsize=7, bbox={"facecolor": "white", "alpha": 0.7, "pad": 0.6, "edgecolor": "none"})
        if len(fc.sites):
            handles.append(Line2D([], [], marker="s", ls="", ms=6, color=_SITE, mec="black",
                                  label=f"localisation site (best {min(n_sites, len(fc.sites))})"))
    return handles


def plot_study_answer(result, *, n_sites: int = 5) -> Figure:
    """The answer in one picture: the candidate notches, the recommended one and what its crack does.

    Parameters
    ----------
    result : StudyResult
        The study (``gg``, ``plan``, ``outcomes``).
    n_sites
        How many localisation sites of the recommended notch to mark.

    Returns
    -------
    Figure
    """
    gg = result.gg
    fig, ax = plt.subplots(figsize=(8.0, 6.4))
    ext = _background(ax, gg)
    shape = result.plan.settings.notch
    handles = []
    for i, o in reversed(list(enumerate(result.outcomes))):
        _notch_outline(ax, gg, o.row, shape, _colour(i), 2.4 if i == 0 else 1.4)
        handles = _draw_outcome(ax, o, _colour(i), _STYLES[i % len(_STYLES)], main=i == 0, n_sites=n_sites) + handles
        ax.annotate(notch_label(o.rank), (float(o.row["edge_x_um"]), float(o.row["edge_y_um"])), xytext=(0, 8),
                    textcoords="offset points", ha="center", fontsize=10, fontweight="bold", color=_colour(i),
                    bbox={"facecolor": "white", "alpha": 0.85, "pad": 1, "edgecolor": _colour(i)})
    handles.insert(0, Line2D([], [], color=_colour(0), lw=2.4, label="candidate notch outline (N = rank)"))
    ax.set_xlim(ext[0], ext[1])
    ax.set_ylim(ext[2], ext[3])
    label_map_axes(ax)
    add_scale_bar(ax)
    ax.legend(handles=handles, loc="best", fontsize=7.5, framealpha=0.9)
    ax.set_title(f"Recommended notch {notch_label(result.outcomes[0].rank)} and the forecast from each candidate")
    return fig


def plot_notch_forecast(result, index: int, *, n_sites: int = 8, margin_um: float | None = None) -> Figure:
    """One candidate's forecast, zoomed on the region ahead of its root, over the localisation field.

    Parameters
    ----------
    result : StudyResult
    index
        Position of the candidate in ``result.outcomes`` (0 = recommended).
    n_sites
        Sites to mark.
    margin_um
        Margin around the path and sites, µm (default a fifth of the horizon).
    """
    o = result.outcomes[index]
    gg = result.gg
    fc = o.forecast
    fig, ax = plt.subplots(figsize=(7.2, 5.8))
    ext = map_extent(gg.omap)
    field = fc.field if fc.field is not None else np.zeros(np.asarray(gg.labels).shape)
    # the field is computed only in the window the forecast reads (0 elsewhere): leave the rest
    # blank, not dark, so that 'not forecast' never reads as 'no localisation'
    field = np.ma.masked_where(np.asarray(field) == 0.0, field)
    im = ax.imshow(field, extent=ext, origin="upper", cmap=SCALAR_CMAP, vmin=0, vmax=1, interpolation="nearest")
    labels = np.asarray(gg.labels)
    edges = _grain_edges(labels)
    ax.imshow(np.ma.masked_where(~edges, np.ones(labels.shape)), extent=ext, origin="upper", cmap="gray_r",
              vmin=0, vmax=1.2, alpha=0.9, interpolation="nearest")
    fig.colorbar(im, ax=ax, shrink=0.8, label="predicted localisation (normalised, 0–1; blank: not forecast)")
    _notch_outline(ax, gg, o.row, result.plan.settings.notch, "white", 2.0)
    handles = _draw_outcome(ax, o, _colour(index), "-", main=True, n_sites=n_sites)
    pts = [np.array([[float(o.row["edge_x_um"]), float(o.row["edge_y_um"])]])]
    if len(fc.path):
        xs, ys = _path_xy(fc.path)
        pts.append(np.c_[xs, ys])
    if len(fc.sites):
        pts.append(fc.sites.head(n_sites)[["x_um", "y_um"]].to_numpy())
    allp = np.vstack(pts)
    m = float(margin_um) if margin_um is not None else 0.2 * float(fc.settings.get("horizon_um", 200.0))
    ax.set_xlim(max(ext[0], allp[:, 0].min() - m), min(ext[1], allp[:, 0].max() + m))
    ax.set_ylim(min(ext[2], allp[:, 1].max() + m), max(ext[3], allp[:, 1].min() - m))
    label_map_axes(ax)
    add_scale_bar(ax)
    ax.legend(handles=handles, loc="best", fontsize=7.5, framealpha=0.9)
    ax.set_title(f"{notch_label(o.rank)}: path, barriers and localisation ahead of the root")
    return fig


def _barrier_lines(ax: Axes, o, *, label: bool = True) -> None:
    g = o.growth.barriers
    for r in g.itertuples():
        ax.axvline(r.position_um, color="0.45", lw=0.8, ls=":")
        if label and int(r.boundary_id) >= 0:
            ax.annotate(boundary_label(r.boundary_id), (r.position_um, 1.0), xycoords=("data", "axes fraction"),
                        xytext=(2, -10), textcoords="offset points", fontsize=7, rotation=90, va="top")


def plot_study_growth(result, index: int = 0) -> Figure:
    """Growth rate and crack length against cycles from one candidate, with the Monte Carlo bands.

    Parameters
    ----------
    result : StudyResult
    index
        Position of the candidate in ``result.outcomes`` (0 = recommended).
    """
    o = result.outcomes[index]
    res = o.growth
    prof, bands = res.profile, res.bands
    colour = _colour(index)
    fig, (a1, a2) = plt.subplots(1, 2, figsize=(10.0, 4.0))
    a = prof["crack_length_um"].to_numpy(float)
    rate = prof["dadn_um_per_cycle"].to_numpy(float)
    ok = np.isfinite(rate) & (rate > 0)
    floor = float(np.min(rate[ok])) / 30.0 if ok.any() else 1e-9
    if bands is not None:
        lo, hi = bands["dadn_um_per_cycle_p05"].to_numpy(float), bands["dadn_um_per_cycle_p95"].to_numpy(float)
        pos = np.isfinite(lo) & np.isfinite(hi) & (hi > 0)
        # arrested draws have no rate: their part of the band runs to the bottom of the axis
        a1.fill_between(bands["crack_length_um"].to_numpy(float)[pos], np.maximum(lo[pos], floor), hi[pos],
                        color=colour, alpha=0.25, lw=0, label="5–95 % Monte Carlo band")
    a1.plot(a[ok], rate[ok], color=colour, lw=1.8, label="model (central values)")
    d = res.dips
    if len(d):
        a1.plot(d["crack_length_um"], d["dadn_min_um_per_cycle"], "v", color="black", ms=6,
                label="predicted rate dip")
    _barrier_lines(a1, o)
    if math.isfinite(res.arrest_length_um):
        a1.axvline(res.arrest_length_um, color="black", lw=1.6, label=f"arrest at {res.arrest_length_um:.0f} µm")
    a1.set_yscale("log")
    a1.set_ylim(bottom=floor)
    a1.set_xlabel("crack length from the root (µm)")
    a1.set_ylabel("growth rate da/dN (µm/cycle)")
    a1.legend(fontsize=7.5, loc="lower right")
    cyc = prof["cycles"].to_numpy(float)
    fin = np.isfinite(cyc) & (cyc > 0)
    if bands is not None:
        ab = bands["crack_length_um"].to_numpy(float)
        lo, hi = bands["cycles_p05"].to_numpy(float), bands["cycles_p95"].to_numpy(float)
        top = np.nanmax(np.where(np.isfinite(hi), hi, np.nan)) if np.isfinite(hi).any() else np.nan
        # samples that arrest never reach the length: their band runs off the right of the plot
        hi = np.where(np.isfinite(hi), hi, 3.0 * top if np.isfinite(top) else np.nan)
        pos = np.isfinite(lo) & np.isfinite(hi) & (lo > 0)
        a2.fill_betweenx(ab[pos], lo[pos], hi[pos], color=colour, alpha=0.25, lw=0, label="5–95 % Monte Carlo band")
    a2.plot(cyc[fin], a[fin], color=colour, lw=1.8, label="model (central values)")
    a2.set_xscale("log")
    a2.set_xlabel("cycles (count)")
    a2.set_ylabel("crack length from the root (µm)")
    a2.legend(fontsize=7.5, loc="upper left")
    fig.suptitle(f"{notch_label(o.rank)}: growth at σ_a = {res.stress_amplitude:g} MPa", fontsize=11)
    fig.tight_layout()
    return fig


def plot_candidate_growth(result) -> Figure:
    """Growth rate against crack length from every forecast candidate, overlaid (one style each)."""
    fig, ax = plt.subplots(figsize=(8.0, 4.0))
    for i, o in enumerate(result.outcomes):
        prof = o.growth.profile
        rate = prof["dadn_um_per_cycle"].to_numpy(float)
        ok = np.isfinite(rate) & (rate > 0)
        ax.plot(prof["crack_length_um"].to_numpy(float)[ok], rate[ok], color=_colour(i), ls=_STYLES[i % len(_STYLES)],
                lw=1.8, label=notch_label(o.rank))
    ax.set_yscale("log")
    ax.set_xlabel("crack length from the root (µm)")
    ax.set_ylabel("growth rate da/dN (µm/cycle)")
    ax.legend(title="candidate notch", fontsize=8)
    ax.set_title("Growth rate from each candidate notch (central values)")
    fig.tight_layout()
    return fig


def plot_candidate_map(result) -> Figure:
    """Every candidate position on the map, coloured by plan score; the forecast ones named N1, N2, ..."""
    gg = result.gg
    t = result.plan.table
    fig, ax = plt.subplots(figsize=(7.6, 6.0))
    ext = _background(ax, gg)
    score = t["plan_score"].to_numpy(float)
    finite = np.isfinite(score)
    vmin, vmax = (float(score[finite].min()), float(score[finite].max())) if finite.any() else (0.0, 1.0)
    cmap = plt.get_cmap(SCALAR_CMAP)
    span = (vmax - vmin) or 1.0
    for i in range(len(t)):
        r = t.iloc[i]
        c = cmap((r["plan_score"] - vmin) / span) if finite[i] else (0.6, 0.6, 0.6, 1.0)
        ax.plot([r["edge_x_um"], r["root_x_um"]], [r["edge_y_um"], r["root_y_um"]], color=c, lw=3,
                solid_capstyle="round")
    for i, o in enumerate(result.outcomes):
        ax.plot(float(o.row["root_x_um"]), float(o.row["root_y_um"]), "*", ms=15, color=_colour(i), mec="black")
        ax.annotate(notch_label(o.rank), (float(o.row["root_x_um"]), float(o.row["root_y_um"])), xytext=(8, 6),
                    textcoords="offset points", fontsize=10, fontweight="bold",
                    bbox={"facecolor": "white", "alpha": 0.85, "pad": 1, "edgecolor": "none"})
    sm = plt.cm.ScalarMappable(cmap=cmap, norm=plt.Normalize(vmin, vmax))
    fig.colorbar(sm, ax=ax, shrink=0.8, label="plan score (dimensionless, higher is better)")
    ax.legend(handles=[Line2D([], [], color=cmap(0.7), lw=3, label="candidate notch (edge → root)"),
                       Line2D([], [], marker="*", ls="", ms=12, color=_colour(0), mec="black",
                              label="forecast candidates (N = rank)")], loc="best", fontsize=8, framealpha=0.9)
    ax.set_xlim(ext[0], ext[1])
    ax.set_ylim(ext[2], ext[3])
    label_map_axes(ax)
    add_scale_bar(ax)
    ax.set_title("Candidate notch positions ranked by the plan")
    return fig

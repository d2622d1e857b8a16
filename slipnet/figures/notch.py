"""Pictures of a notch plan: candidates on the map coloured by score, and score terms along the edge."""

from __future__ import annotations

import matplotlib.pyplot as plt
import numpy as np
import pandas as pd
from matplotlib.lines import Line2D

from slipnet.cautions import CAUTION
from slipnet.figures._common import SCALAR_CMAP, add_scale_bar, label_map_axes
from slipnet.figures.maps import _display_raster, _label_edges
from slipnet.labels import notch_label

__all__ = ["plot_plan_map", "plot_plan_terms"]

_BEST = "#D55E00"  # Okabe–Ito vermilion for the best candidates


def plot_plan_map(plan: pd.DataFrame, gg, *, n_best: int = 3):
    """Grain map (boundaries in grey) with each candidate notch drawn edge → root, coloured by score.

    The best ``n_best`` candidates are numbered by rank.
    """
    om = gg.omap
    labels = np.asarray(gg.labels)
    shade = np.where(labels >= 0, 0.92, 0.55) - 0.5 * _label_edges(labels)
    img, extent = _display_raster(om, shade)
    fig, ax = plt.subplots(figsize=(7.5, 6.0))
    ax.imshow(img, cmap="gray", vmin=0, vmax=1, extent=extent, origin="upper", interpolation="nearest")
    valid = plan["valid"].to_numpy(dtype=bool) if "valid" in plan else np.ones(len(plan), bool)
    score = plan["plan_score"].to_numpy(dtype=float)
    finite = valid & np.isfinite(score)
    vmin, vmax = (np.nanmin(score[finite]), np.nanmax(score[finite])) if finite.any() else (0.0, 1.0)
    cmap = plt.get_cmap(SCALAR_CMAP)
    for i in range(len(plan)):
        r = plan.iloc[i]
        c = cmap((r["plan_score"] - vmin) / (vmax - vmin)) if finite[i] and vmax > vmin else (0.6, 0.6, 0.6, 1.0)
        ax.plot([r["edge_x_um"], r["root_x_um"]], [r["edge_y_um"], r["root_y_um"]], color=c, lw=3,
                solid_capstyle="round")
        ax.plot(r["root_x_um"], r["root_y_um"], "o", ms=4, color=c, mec="black", mew=0.5)
    best = plan[finite].nsmallest(n_best, "rank")
    for _, r in best.iterrows():
        ax.plot(r["root_x_um"], r["root_y_um"], "*", ms=16, color=_BEST, mec="black", mew=0.8)
        ax.annotate(notch_label(r["rank"]), (r["root_x_um"], r["root_y_um"]), xytext=(7, 7), textcoords="offset points",
                    fontsize=11, fontweight="bold", color="black",
                    bbox={"facecolor": "white", "alpha": 0.8, "pad": 1, "edgecolor": "none"})
    sm = plt.cm.ScalarMappable(cmap=cmap, norm=plt.Normalize(vmin, vmax))
    fig.colorbar(sm, ax=ax, shrink=0.8, label="candidate score (0 worst – 1 best, dimensionless)")
    ax.legend(handles=[Line2D([], [], color=cmap(0.7), lw=3, label="candidate notch (edge → root)"),
                       Line2D([], [], marker="*", ls="", ms=12, color=_BEST, mec="black",
                              label=f"best {n_best} (numbered by rank)")],
              loc="upper right", fontsize=8, framealpha=0.85)
    label_map_axes(ax)
    add_scale_bar(ax)
    ax.set_title("Notch candidates ranked by score")
    fig.text(0.01, 0.005, CAUTION, fontsize=5.5, wrap=True, va="bottom")
    return fig


def plot_plan_terms(plan: pd.DataFrame, weights=None):
    """Score terms (normalised objectives, 1 = best) against position along the edge, with bands.

    Where the plan has Monte Carlo bands (``<objective>_p05`` / ``_p95``), each objective is also
    drawn in its own units in a lower panel with its 5–95 % band (only the weighted objectives when
    ``weights`` is given).
    """
    t = plan.copy()
    along = np.hypot(t["edge_x_um"] - t["edge_x_um"].min(), t["edge_y_um"] - t["edge_y_um"].min())
    t = t.assign(_s=along).sort_values("_s")
    terms = [c for c in t.columns if c.startswith("term_")]
    weights = dict(weights or {})
    banded = [c[:-4] for c in t.columns if c.endswith("_p05") and f"{c[:-4]}_p95" in t
              and (not weights or c[:-4] in weights) and np.isfinite(t[c].to_numpy(float)).any()]
    n_lower = len(banded)
    fig, axes = plt.subplots(1 + n_lower, 1, figsize=(7.5, 3.2 + 2.2 * n_lower), sharex=True, squeeze=False)
    ax = axes[0, 0]
    colors = plt.get_cmap("tab10")
    for k, c in enumerate(terms):
        ax.plot(t["_s"], t[c], "-o", ms=3, color=colors(k), label=c.removeprefix("term_").replace("_", " "))
    ax.plot(t["_s"], t["plan_score"], "-", lw=2.5, color="black", label="plan score")
    ax.set_ylabel("normalised term (–), 1 = best")
    ax.set_ylim(-0.05, 1.05)
    ax.legend(fontsize=7, ncol=2, loc="best")
    ax.set_title("Score terms along the edge")
    for j, name in enumerate(banded, start=1):
        a = axes[j, 0]
        lo, hi = t[f"{name}_p05"].to_numpy(float), t[f"{name}_p95"].to_numpy(float)
        ok = np.isfinite(lo) & np.isfinite(hi)
        a.fill_between(t["_s"][ok], lo[ok], hi[ok], color=colors(j), alpha=0.3, label="5–95 % of samples")
        if name in t:
            a.plot(t["_s"], t[name], "-o", ms=3, color=colors(j), label="nominal")
        unit = "µm" if name.endswith("_um") else "–"
        a.set_ylabel(f"{name.replace('_', ' ')} ({unit})", fontsize=8)
        a.legend(fontsize=7)
    axes[-1, 0].set_xlabel("position along the edge (µm)")
    return fig

"""Figures of the validation harness: scores per predictor, the reliability diagram, one case's fields."""

from __future__ import annotations

import matplotlib.pyplot as plt
import numpy as np
import pandas as pd
from matplotlib.figure import Figure

from slipnet.figures._common import SCALAR_CMAP

__all__ = ["plot_reliability", "plot_validation_scores"]

_METRICS = (("auc_slip", "field AUC (slip)"), ("auc_fip", "field AUC (FIP)"), ("grain_rho", "grain Spearman ρ"),
            ("site_hit_rate", "top-5 site hit rate"), ("barrier_rho", "barrier Spearman ρ"))


def plot_validation_scores(summary: pd.DataFrame, *, title: str = "Held-out scores against the reference") -> Figure:
    """Mean ± sd over specimens of each metric, one bar per predictor (forecast modes first)."""
    preds = list(dict.fromkeys(summary["predictor"]))
    preds.sort(key=lambda p: (not p.startswith("forecast"), p))
    fig, axes = plt.subplots(1, len(_METRICS), figsize=(3.2 * len(_METRICS), 4.2), sharey=False)
    cmap = plt.get_cmap(SCALAR_CMAP)
    colours = [cmap(0.15 + 0.7 * i / max(len(preds) - 1, 1)) for i in range(len(preds))]
    for ax, (m, label) in zip(axes, _METRICS, strict=True):
        rows = summary[summary["metric"] == m].set_index("predictor")
        mean = [float(rows["mean"].get(p, np.nan)) for p in preds]
        sd = [float(rows["sd"].get(p, np.nan)) for p in preds]
        ax.barh(range(len(preds)), mean, xerr=np.nan_to_num(sd), color=colours, capsize=2)
        ax.set_yticks(range(len(preds)))
        ax.set_yticklabels(preds if ax is axes[0] else [""] * len(preds), fontsize=8)
        ax.invert_yaxis()
        finite = np.asarray(mean, float)[np.isfinite(mean)]
        ax.set_xlim(min(0.0, float(finite.min()) - 0.1) if finite.size else 0.0, 1.0)
        ax.set_title(label, fontsize=9)
        if m.startswith("auc"):
            ax.axvline(0.5, color="0.6", lw=0.8, ls=":")
    fig.suptitle(title + " (slipnet's own cyclic model: a consistency test, not an experiment)", fontsize=9)
    fig.tight_layout()
    return fig


def plot_reliability(calibration: list[dict], *, title: str = "Reliability of the forecast probabilities") -> Figure:
    """Reliability diagrams (event rate against mean probability per bin), one panel per event kind."""
    kinds = sorted({c["kind"] for c in calibration})
    fig, axes = plt.subplots(1, max(len(kinds), 1), figsize=(3.6 * max(len(kinds), 1), 3.6), squeeze=False)
    for ax, kind in zip(axes[0], kinds, strict=False):
        ax.plot([0, 1], [0, 1], color="0.6", lw=0.8, ls=":")
        for c in calibration:
            if c["kind"] != kind or not c["bins"]:
                continue
            x = [b["mean_probability"] for b in c["bins"]]
            y = [b["event_rate"] for b in c["bins"]]
            n = np.array([b["n"] for b in c["bins"]], float)
            ax.scatter(x, y, s=10 + 60 * n / n.max(), alpha=0.8,
                       label=f"{c['predictor'].split(':')[1]} {c['source']} (Brier {c['brier']:.3f})")
            ax.plot(x, y, lw=0.8, alpha=0.6)
        ax.set_xlim(0, 1)
        ax.set_ylim(0, 1)
        ax.set_xlabel("forecast probability")
        ax.set_ylabel("observed frequency")
        ax.set_title(kind, fontsize=9)
        ax.legend(fontsize=6, loc="upper left")
    fig.suptitle(title, fontsize=9)
    fig.tight_layout()
    return fig

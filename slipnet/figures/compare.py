"""Figures of the forecast-versus-measurement comparison: strain map with overlays, scores, da/dN."""

from __future__ import annotations

import matplotlib.pyplot as plt
import numpy as np
import pandas as pd
from matplotlib.axes import Axes

from slipnet.figures._common import SCALAR_CMAP, add_scale_bar, label_map_axes

__all__ = [
    "comparison_figures",
    "plot_growth_rates",
    "plot_score_summary",
    "plot_shear_map",
]


def plot_shear_map(ax: Axes, shear_pct: np.ndarray, extent, *, sites_xy=None, path: pd.DataFrame | None = None,
                   peaks_xy=None, measured_path=None, title: str = "Measured maximum shear strain") -> None:
    """Draw γ_max (in %) with predicted sites and path and measured peaks and path overlaid.

    Parameters
    ----------
    ax : Axes
    shear_pct : (ny, nx) ndarray
        Maximum in-plane shear in %, NaN where missing (drawn blank).
    extent : (left, right, bottom, top)
        ``imshow`` extent in µm (y down).
    sites_xy, peaks_xy : (n, 2) ndarray, optional
        Predicted sites and measured peaks, µm.
    path : DataFrame with ``x0, y0, x1, y1``, optional
        Predicted path segments, µm.
    measured_path : (m, 2) ndarray, optional
        Measured crack path polyline, µm.
    """
    finite = shear_pct[np.isfinite(shear_pct)]
    vmax = float(np.quantile(finite, 0.995)) if finite.size else 1.0
    im = ax.imshow(shear_pct, extent=extent, origin="upper", cmap=SCALAR_CMAP, vmin=0.0, vmax=max(vmax, 1e-9),
                   interpolation="nearest")
    cb = ax.figure.colorbar(im, ax=ax, shrink=0.85)
    cb.set_label("γ_max (%)")
    if path is not None and len(path):
        for k, row in enumerate(path.itertuples(index=False)):
            ax.plot([row.x0_um, row.x1_um], [row.y0_um, row.y1_um], color="white", lw=2.2,
                    label="predicted path" if k == 0 else None)
    if measured_path is not None and len(measured_path):
        mp = np.asarray(measured_path)
        ax.plot(mp[:, 0], mp[:, 1], color="#d95f02", lw=1.5, ls="--", label="measured path")
    if peaks_xy is not None and len(peaks_xy):
        p = np.asarray(peaks_xy)
        ax.scatter(p[:, 0], p[:, 1], s=40, facecolors="none", edgecolors="#e7298a", linewidths=1.5,
                   label="measured peaks")
    if sites_xy is not None and len(sites_xy):
        s = np.asarray(sites_xy)
        ax.scatter(s[:, 0], s[:, 1], s=30, marker="x", color="white", linewidths=1.5, label="predicted sites")
    ax.set_xlim(extent[0], extent[1])
    ax.set_ylim(extent[2], extent[3])
    label_map_axes(ax)
    ax.set_title(title)
    add_scale_bar(ax)
    if ax.get_legend_handles_labels()[0]:
        ax.legend(loc="upper right", fontsize=7, framealpha=0.7)


_SCORE_LABELS = [
    ("sites_precision", "sites: precision"), ("sites_recall", "sites: recall"), ("sites_f1", "sites: F1"),
    ("grains_roc_auc", "grains: ROC AUC"), ("grains_spearman_rho", "grains: Spearman ρ"),
    ("boundaries_roc_auc", "boundaries: ROC AUC"), ("boundaries_spearman_rho", "boundaries: Spearman ρ"),
    ("barriers_spearman_rho", "barriers: Spearman ρ"),
    ("path_share_within_tol", "path: share within tol."), ("bands_fraction_matched", "bands: matched"),
    ("dips_recall", "dips: recall"), ("dips_precision", "dips: precision"),
]


def plot_score_summary(ax: Axes, scores: dict, *, title: str = "Forecast scores") -> None:
    """Horizontal bars of the unit-range scores (0–1; Spearman ρ in −1–1), with their values."""
    rows = [(lab, float(scores[k])) for k, lab in _SCORE_LABELS
            if k in scores and scores[k] is not None and np.isfinite(float(scores[k]))]
    if not rows:
        ax.text(0.5, 0.5, "no scores", ha="center", va="center", transform=ax.transAxes)
        ax.set_axis_off()
        return
    labels, vals = zip(*rows, strict=True)
    y = np.arange(len(vals))[::-1]
    colors = plt.get_cmap("cividis")(np.clip((np.asarray(vals) + 1) / 2, 0, 1))
    ax.barh(y, vals, color=colors, edgecolor="black", linewidth=0.5)
    for yy, v in zip(y, vals, strict=True):
        ax.text(v + 0.02 if v >= 0 else v - 0.02, yy, f"{v:.2f}", va="center", ha="left" if v >= 0 else "right",
                fontsize=8)
    ax.set_yticks(y, labels)
    ax.set_xlim(min(-0.05, min(vals) - 0.15), 1.15)
    ax.axvline(0.0, color="black", lw=0.8)
    ax.axvline(0.5, color="grey", lw=0.8, ls=":")
    ax.set_xlabel("score (dimensionless; dotted line: chance level of the AUC)")
    extra = []
    if "registration_rms_um" in scores and np.isfinite(scores["registration_rms_um"]):
        extra.append(f"registration RMS {scores['registration_rms_um']:.2f} µm")
    if "path_mean_distance_um" in scores:
        extra.append(f"path mean / max distance {scores['path_mean_distance_um']:.1f} / "
                     f"{scores['path_max_distance_um']:.1f} µm")
    ax.set_title(title + ("\n" + "; ".join(extra) if extra else ""), fontsize=10)


def plot_growth_rates(ax: Axes, rates: pd.DataFrame, *, predicted: pd.DataFrame | None = None,
                      dips: pd.DataFrame | None = None, title: str = "Crack growth rate") -> None:
    """Measured da/dN (secant and incremental polynomial) against crack length, predicted rate and dips.

    ``rates``: ``method``, ``crack_length_um``, ``dadn_um_per_cycle``; ``predicted``: ``crack_length``
    (µm), ``dadn`` (µm/cycle); ``dips``: ``crack_length_um``, ``source``, ``status``.
    """
    styles = {"secant": {"marker": ".", "ls": "none", "color": "#7570b3", "alpha": 0.6},
              "incremental_polynomial": {"marker": "o", "ms": 3, "ls": "-", "color": "#1b9e77"}}
    for method, grp in rates.groupby("method", sort=False):
        r = grp["dadn_um_per_cycle"].to_numpy(float)
        ok = r > 0
        ax.plot(grp["crack_length_um"].to_numpy()[ok], r[ok], label=f"measured, {method.replace('_', ' ')}",
                **styles.get(method, {}))
    if predicted is not None and len(predicted):
        r = predicted["dadn_um_per_cycle"].to_numpy(float)
        ok = np.isfinite(r) & (r > 0)
        ax.plot(predicted["crack_length_um"].to_numpy()[ok], r[ok], color="black", lw=1.2, label="predicted")
    if dips is not None and len(dips):
        marks = {("measured", "hit"): ("#1b9e77", "-"), ("measured", "miss"): ("#d95f02", "-"),
                 ("predicted", "hit"): ("black", ":"), ("predicted", "false_alarm"): ("#e7298a", ":")}
        seen = set()
        for row in dips.itertuples(index=False):
            col, ls = marks.get((row.source, row.status), ("grey", "-."))
            key = (row.source, row.status)
            ax.axvline(row.crack_length_um, color=col, ls=ls, lw=1.0,
                       label=f"{row.source} dip: {row.status.replace('_', ' ')}" if key not in seen else None)
            seen.add(key)
    ax.set_yscale("log")
    ax.set_xlabel("crack length (µm)")
    ax.set_ylabel("da/dN (µm/cycle)")
    ax.set_title(title)
    ax.legend(fontsize=7)


def comparison_figures(comp) -> dict:
    """The comparison figures of a :class:`~slipnet.compare.Comparison`: ``{file name: Figure}``."""
    figs = {}
    synthetic = " (SYNTHETIC)" if comp.settings.get("synthetic") else ""
    peaks = comp.peaks[["x_um", "y_um"]].to_numpy() if len(comp.peaks) else None
    fig, ax = plt.subplots(figsize=(8, 6))
    if comp.shear_on_map is not None and comp.map_extent is not None:
        # the map grid: the shear was resampled onto it, so the overlays need no transform
        plot_shear_map(ax, 100.0 * comp.shear_on_map, comp.map_extent, sites_xy=comp.predicted_sites,
                       path=comp.predicted_path, peaks_xy=peaks, measured_path=comp.measured_path,
                       title=f"Measured maximum shear strain on the map grid{synthetic}")
    else:
        s = comp.series
        x0, x1, y0, y1 = s.extent
        h = 0.5 * s.step
        plot_shear_map(ax, 100.0 * comp.shear, (x0 - h, x1 + h, y1 + h, y0 - h), sites_xy=comp.predicted_sites,
                       path=comp.predicted_path, peaks_xy=peaks, measured_path=comp.measured_path,
                       title=f"Measured maximum shear strain{synthetic}")
    figs["measured_shear.png"] = fig
    fig, ax = plt.subplots(figsize=(7, 4.5))
    plot_score_summary(ax, comp.scores, title=f"Forecast scores{synthetic}")
    figs["scores.png"] = fig
    if comp.growth_rates is not None:
        fig, ax = plt.subplots(figsize=(7, 4.5))
        plot_growth_rates(ax, comp.growth_rates, predicted=comp.predicted_profile, dips=comp.dips,
                          title=f"Crack growth rate, measured{synthetic} and predicted")
        figs["growth_rates.png"] = fig
    return figs

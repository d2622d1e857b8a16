"""Write a comparison of a forecast with measurements: tables, pictures and a summary."""

from __future__ import annotations

import os
from pathlib import Path

from slipnet.compare.comparison import Comparison
from slipnet.figures.compare import comparison_figures
from slipnet.reports.writer import Outputs

__all__ = ["write_comparison"]


def write_comparison(comp: Comparison, folder: str | os.PathLike, *, title: str = "Forecast against measurements",
                     figures: bool = True) -> dict[str, Path]:
    """Write tables, figures and a summary (with the caution) into ``folder``.

    Returns
    -------
    dict
        Name → path of every file written.
    """
    out = Outputs(folder)
    out.table("scores", comp.score_table(), "scores.csv")
    out.table("measured_peaks", comp.peaks, "measured_peaks.csv")
    if comp.transform is not None:
        out.table("control_points", comp.transform.table(), "control_points.csv")
    for name, table in (("grain_strain", comp.grain_stats), ("boundary_band_strain", comp.boundary_stats),
                        ("slip_bands", comp.bands), ("growth_rates", comp.growth_rates), ("dips", comp.dips)):
        if table is not None:
            out.table(name, table, f"{name}.csv")
    if figures:
        for filename, fig in comparison_figures(comp).items():
            out.figure(filename.removesuffix(".png") + "_png", fig, filename)
    lines = []
    if comp.settings.get("synthetic"):
        lines += ["**The measured strain field and growth record here are SYNTHETIC (invented by slipnet's demo), "
                  "not measurements.**", ""]
    if comp.transform is not None:
        lines.append(f"Registration: {comp.transform.kind}, {len(comp.transform.residuals)} control points, "
                     f"RMS residual {comp.transform.rms:.3g} µm, largest {comp.transform.residuals.max():.3g} µm.")
    if comp.transform is None:
        lines.append("Registration: none (no control points); the strain map's frame was taken as the orientation "
                     "map's.")
    if comp.warnings:
        lines += ["", "Warnings (check these before trusting the scores):", ""]
        lines += [f"- {w}" for w in comp.warnings]
    lines += ["", "| score | value |", "| --- | --- |"]
    for k, v in comp.scores.items():
        lines.append(f"| {k} | {v:.4g} |" if isinstance(v, float) else f"| {k} | {v} |")
    lines += ["", "Strain: γ_max = √(((ε_xx − ε_yy)/2)² + ε_xy²) (tensor shear) of load step "
              f"{comp.settings['step']} ({comp.settings['strain_method']} strain).",
              "Settings: " + ", ".join(f"{k}={v}" for k, v in comp.settings.items())]
    out.summary(title, lines)
    return out.files

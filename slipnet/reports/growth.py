"""Write a growth prediction: tables, settings, pictures and a summary carrying the caution."""

from __future__ import annotations

import math
import os
from dataclasses import asdict
from pathlib import Path

import numpy as np

from slipnet.figures.growth import plot_crack_length, plot_growth_on_map, plot_growth_rate
from slipnet.growth.calibration import CalibrationResult
from slipnet.growth.model import GrowthResult
from slipnet.reports.writer import Outputs

__all__ = ["write_growth"]


def write_growth(result: GrowthResult, folder: str | os.PathLike, gg=None, *, figures: bool = True,
                 calibration: CalibrationResult | None = None,
                 title: str = "Short-crack growth prediction") -> dict[str, Path]:
    """Write the growth tables (CSV), settings (JSON), pictures and a summary carrying the caution.

    Files: ``growth_profile.csv``, ``growth_barriers.csv``, ``growth_dips.csv``, ``growth_bands.csv``
    (with bands), ``growth_calibration.csv`` (with a calibration), ``growth_settings.json``, the
    pictures ``growth_rate.png``, ``growth_cycles.png``, ``growth_map.png`` (with map coordinates)
    and ``summary.md``.

    Returns
    -------
    dict
        Name → path of every file written.
    """
    out = Outputs(folder)
    out.table("profile", result.profile, "growth_profile.csv")
    out.table("barriers", result.barriers, "growth_barriers.csv")
    out.table("dips", result.dips, "growth_dips.csv")
    if result.bands is not None:
        out.table("bands", result.bands, "growth_bands.csv")
    if calibration is not None:
        out.table("calibration", calibration.table, "growth_calibration.csv")
    settings = {"stress_amplitude_mpa": result.stress_amplitude, **asdict(result.params),
                "arrest_length_um": result.arrest_length_um, "notes": list(result.notes)}
    out.json("settings", settings, "growth_settings.json")
    if figures:
        out.figure("growth_rate", plot_growth_rate(result), "growth_rate.png")
        out.figure("growth_cycles", plot_crack_length(result), "growth_cycles.png")
        if result.path.polyline is not None:
            out.figure("growth_map", plot_growth_on_map(result, gg), "growth_map.png")
    prof = result.profile
    fin = prof.loc[np.isfinite(prof["cycles"]), "cycles"]
    p = result.params
    lines = [
        f"Stress amplitude σ_a = {result.stress_amplitude:g} MPa; friction stress σ_f = {p.friction_stress:g} MPa; "
        f"da/dN = {p.coefficient:g} · φ^{p.exponent:g} (µm/cycle, φ in µm).",
        f"Barrier critical stress S_c = {p.barrier_stress:g} MPa at r₀ = {p.source_distance:g} µm; coupling "
        f"1 + {p.transmission_weight:g}(1 − |m′|) + {p.twist_weight:g} sin(twist).",
        f"Path: {result.path.n_barriers} barriers over {result.path.length_um:.1f} µm.",
        (f"The crack arrests at {result.arrest_length_um:.1f} µm (barrier strength exceeds what the blocked zone "
         f"can deliver); cycles are infinite beyond." if math.isfinite(result.arrest_length_um)
         else f"No arrest up to {prof['crack_length_um'].iloc[-1]:.1f} µm; {fin.iloc[-1]:.3g} cycles from "
              f"{prof['crack_length_um'].iloc[0]:.2f} µm."),
        f"Amplitude needed to pass every barrier on the path: "
        f"{float(result.barriers['threshold_amplitude_mpa'].max()) if len(result.barriers) else 0.0:.1f} MPa "
        "(microstructural fatigue-limit estimate).",
        f"Predicted dips: {len(result.dips)} (growth_dips.csv: crack length of each minimum, depth = minimum rate "
        "/ rate just after crossing; kind 'boundary' = the plastic zone blocked at a grain boundary, 'zone' = a "
        "strain-localisation zone on the path).",
        *([f"Localisation zones on the path: {result.path.n_zones} (where the forecast's localisation field reaches "
           f"0.5); each slows the rate by up to {p.zone_retardation:g} × its strength before its centre and lets it "
           f"recover over {p.zone_recovery:g} × its approach width after. The field's weights were fitted against "
           "slipnet's own cyclic crystal-plasticity model (a consistency test, not a validation against "
           "experiments)."] if result.path.n_zones else []),
        *[f"Note: {n}" for n in result.notes],
        "",
        "The model (Bilby, Cottrell & Swinden 1963 strip-yield zone blocked at grain boundaries as in Navarro & "
        "de los Rios 1988) and every added assumption are described in docs/growth-model.md. The constants are "
        "illustrative until calibrated against a growth record of the material.",
    ]
    if calibration is not None:
        lines += ["", "Calibration (95 % intervals):"]
        lines += [f"- {r.parameter}: {r.value:.4g} [{r.low:.4g}, {r.high:.4g}]" for r in calibration.table.itertuples()]
    out.summary(title, lines)
    return out.files

"""Writing a growth prediction: tables, settings, pictures and a summary carrying the caution.

Kept apart from the model (:mod:`slipnet.growth`) so that the model holds no file or figure code;
:func:`write_growth` is also importable from :mod:`slipnet.growth`.
"""

from __future__ import annotations

import math
from typing import TYPE_CHECKING

import numpy as np

if TYPE_CHECKING:
    from .growth import GrowthResult
    from .growth_calibration import CalibrationResult

__all__ = ["write_growth"]


def write_growth(result: GrowthResult, folder, gg=None, *, figures: bool = True,
                 calibration: CalibrationResult | None = None, title: str = "Short-crack growth prediction") -> dict:
    """Write the growth tables (CSV), settings (JSON), pictures and a summary carrying the caution.

    Files: ``growth_profile.csv``, ``growth_barriers.csv``, ``growth_dips.csv``, ``growth_bands.csv``
    (with bands), ``growth_calibration.csv`` (with a calibration), ``growth_settings.json``, the
    pictures of :func:`slipnet.figures.growth.save_growth_figures` and ``summary.md``.

    Returns
    -------
    dict
        Name → path of every file written.
    """
    import json
    from dataclasses import asdict
    from pathlib import Path

    from ._files import atomic_path
    from .report import write_summary, write_table

    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    out = {
        "profile": write_table(result.profile, folder / "growth_profile.csv"),
        "barriers": write_table(result.barriers, folder / "growth_barriers.csv"),
        "dips": write_table(result.dips, folder / "growth_dips.csv"),
    }
    if result.bands is not None:
        out["bands"] = write_table(result.bands, folder / "growth_bands.csv")
    if calibration is not None:
        out["calibration"] = write_table(calibration.table, folder / "growth_calibration.csv")
    settings = {"stress_amplitude_mpa": result.stress_amplitude, **asdict(result.params),
                "arrest_length_um": result.arrest_length_um, "notes": list(result.notes)}
    with atomic_path(folder / "growth_settings.json") as tmp:
        tmp.write_text(json.dumps(settings, indent=1, default=str), encoding="utf-8")
    out["settings"] = folder / "growth_settings.json"
    if figures:
        from .figures.growth import save_growth_figures

        out.update(save_growth_figures(result, folder, gg))
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
         else f"No arrest up to {prof['crack_length'].iloc[-1]:.1f} µm; {fin.iloc[-1]:.3g} cycles from "
              f"{prof['crack_length'].iloc[0]:.2f} µm."),
        f"Amplitude needed to pass every barrier on the path: "
        f"{float(result.barriers['threshold_amplitude_mpa'].max()) if len(result.barriers) else 0.0:.1f} MPa "
        "(microstructural fatigue-limit estimate).",
        f"Predicted dips: {len(result.dips)} (growth_dips.csv: crack length of each minimum, depth = minimum rate "
        "/ rate just after crossing).",
        *[f"Note: {n}" for n in result.notes],
        "",
        "The model (Bilby, Cottrell & Swinden 1963 strip-yield zone blocked at grain boundaries as in Navarro & "
        "de los Rios 1988) and every added assumption are described in docs/growth-model.md. The constants are "
        "illustrative until calibrated against a growth record of the material.",
    ]
    if calibration is not None:
        lines += ["", "Calibration (95 % intervals):"]
        lines += [f"- {r.parameter}: {r.value:.4g} [{r.low:.4g}, {r.high:.4g}]" for r in calibration.table.itertuples()]
    out["summary"] = write_summary(folder, title, lines)
    return out

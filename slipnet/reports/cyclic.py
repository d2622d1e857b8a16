"""Write a cyclic crystal-plasticity result: ranked slip bands, grain responses, the loop, fields,
pictures and a summary with the assumptions."""

from __future__ import annotations

import os
from pathlib import Path

from slipnet.figures import cyclic as figs
from slipnet.reports.writer import Outputs, markdown_table
from slipnet.stress.cyclic import CyclicField

__all__ = ["write_cyclic"]


def write_cyclic(result: CyclicField, folder: str | os.PathLike, *, figures: bool = True,
                 top_bands: int = 10) -> dict[str, Path]:
    """Write tables, fields, pictures and a summary (assumptions and caution) into ``folder``.

    Files: ``bands.csv`` (ranked slip bands), ``grain_response.csv``, ``history.csv`` (the
    macroscopic loop), ``settings.json``, ``accumulated_slip.npy``, ``slip_range.npy``,
    ``fip.npy``, ``labels.npy``, ``compliant.npy`` (``(ny, nx)`` maps), ``fip_bands.png``,
    ``hysteresis.png`` and ``summary.md``. Every file goes through a temporary name; nothing is
    written before the result exists.

    Parameters
    ----------
    result
        From :func:`slipnet.stress.solve_cyclic` or :func:`slipnet.stress.solve_monotonic`.
    folder
        Output folder (created).
    figures
        Draw the two pictures.
    top_bands
        Bands drawn and listed in the summary.

    Returns
    -------
    dict
        Name → path of every file written.
    """
    out = Outputs(folder)
    out.table("bands", result.bands, "bands.csv")
    out.table("grain_response", result.grain_response, "grain_response.csv")
    out.table("history", result.history, "history.csv")
    out.json("settings", {**result.settings, "assumptions": result.assumptions}, "settings.json")
    for name in ("accumulated_slip", "slip_range", "fip", "labels", "compliant"):
        out.array(name, getattr(result, name), f"{name}.npy")
    if figures:
        out.figure("fip_bands_map", figs.plot_fip_bands(result, top=top_bands), "fip_bands.png")
        out.figure("hysteresis", figs.plot_hysteresis(result), "hysteresis.png")
    s = result.settings
    solid = ~result.compliant
    counts = result.grain_response["response"].value_counts().to_dict() if len(result.grain_response) else {}
    unit = "MPa" if s["control"] == "stress" else "strain"
    lines = [
        f"Control: {s['control']}, amplitude {s['amplitude']:g}, load from {s['min_load']:g} to {s['max_load']:g} "
        f"({unit}), ratio {s.get('ratio', 0.0):g}, {s['cycles']} cycle(s) after the first loading.",
        f"Solver: {s['increments']} increments, {s['newton_iterations']} Newton and {s['cg_iterations']} CG "
        f"iterations, {s['cutbacks']} cut-backs (tolerance {s['tol']:g}).",
        f"Accumulated slip over solid points: mean {result.accumulated_slip[solid].mean():.3e}, "
        f"max {result.accumulated_slip[solid].max():.3e}.",
        f"FIP (Fatemi–Socie, k = {s['fip_k']:g}, σ_y = {s['yield_stress_mpa']:g} MPa): max {result.fip.max():.3e}.",
        f"Grain responses: {', '.join(f'{v} {k}' for k, v in counts.items()) or 'none'}.",
    ]
    if s.get("crack_tip_um"):
        lines.append(f"Crack cut in as a slit, tip at ({s['crack_tip_um'][0]:.1f}, {s['crack_tip_um'][1]:.1f}) µm.")
    if len(result.bands):
        cols = ["rank", "grain", "label", "family", "band", "n_points", "fip_mean", "x_um", "y_um"]
        lines += ["", f"Top {min(top_bands, len(result.bands))} slip bands by mean FIP:", "",
                  markdown_table(result.bands.head(top_bands)[cols])]
    lines += ["", "Assumptions: " + result.assumptions]
    out.summary("Cyclic crystal plasticity", lines)
    return out.files

"""Write the slip step: tables, pictures and a summary of a :class:`~slipnet.slip.SlipActivity`."""

from __future__ import annotations

import os
from pathlib import Path

import numpy as np
import pandas as pd

from slipnet.figures import slip as figs
from slipnet.reports.writer import Outputs
from slipnet.slip.activity import GIVEN_SOURCE, SlipActivity
from slipnet.slip.tables import LOCAL_SOURCE

__all__ = ["write_slip"]


def write_slip(activity: SlipActivity, gg, folder: str | os.PathLike, *, figures: bool = True,
               title: str = "Slip activity") -> dict[str, Path]:
    """Write the slip tables, pictures and a summary (with the caution) into ``folder``.

    Parameters
    ----------
    activity
        From :func:`slipnet.slip.slip_activity`.
    gg
        The grain graph it was computed on (for the pictures).
    folder
        Output folder (created if missing).
    figures
        Also draw ``schmid_map.png``, ``transmission_map.png`` and ``slip_traces.png``.
    title
        Title of ``summary.md``.

    Returns
    -------
    dict
        Name → path of every file written: ``grains``, ``traces``, ``transmission``, ``systems``,
        the pictures and ``summary``.
    """
    out = Outputs(folder)
    systems, grains, load = activity.systems, activity.grains, activity.load_axis
    sys_table = pd.DataFrame({
        "system": np.arange(len(systems)), "label": systems.labels, "family": systems.families,
        "crss_relative": systems.crss, "crss_reverse_relative": systems.crss_reverse,
    })
    out.table("grains", grains, "grains_slip.csv")
    out.table("traces", activity.traces, "slip_traces.csv")
    out.table("transmission", activity.transmission, "transmission.csv")
    out.table("systems", sys_table, "systems.csv")
    out.json("settings", activity.settings, "slip_settings.json")
    if figures:
        out.figure("schmid_map", figs.plot_schmid_map(gg, grains["schmid_max"].to_numpy()), "schmid_map.png")
        out.figure("transmission_map", figs.plot_transmission(gg, activity.transmission), "transmission_map.png")
        out.figure("traces_map", figs.plot_slip_traces(gg, activity.traces,
                                                       background=grains["effective_max"].to_numpy()),
                   "slip_traces.png")
    ok = np.isfinite(grains["schmid_max"])
    lines = [
        f"Load axis (map frame): ({load[0]:.3f}, {load[1]:.3f}, {load[2]:.3f}).",
        f"Structure {systems.structure}; families {', '.join(systems.family_names)} ({len(systems)} systems); "
        f"relative CRSS per system in systems.csv.",
        f"Grains analysed: {int(ok.sum())} of {len(grains)} (others have another crystal structure).",
        f"Largest Schmid factor: mean {np.nanmean(grains['schmid_max']):.3f}, "
        f"range {np.nanmin(grains['schmid_max']):.3f}–{np.nanmax(grains['schmid_max']):.3f}."
        if ok.any() else "No grain of this structure.",
    ]
    if "taylor_factor" in grains and ok.any():
        lines.append(f"Mean Taylor factor (uniaxial, full constraints): {np.nanmean(grains['taylor_factor']):.3f}.")
    st = activity.settings
    if activity.factor_source == LOCAL_SOURCE:
        lines += [
            f"Stress: LOCAL Schmid factors (grain means of τ / applied stress) from a full-field solve, "
            f"applied {st['applied_stress_mpa']:g} MPa, {st['iterations']} iterations, residual "
            f"{st['residual']:.2e}; used for the Schmid, trace and transmission tables "
            "(factor_source column). The Taylor factor stays the uniform uniaxial one.",
            f"Local stress assumptions: {activity.assumptions}",
        ]
    elif activity.factor_source == GIVEN_SOURCE:
        lines.append("Stress: per-grain local Schmid factors given by the caller (e.g. from the full-field solve).")
    else:
        lines.append("Stress: uniform uniaxial along the load axis in every grain.")
    lines += [
        f"Shen factor: boundary plane ASSUMED to contain the surface trace of the boundary, inclined "
        f"{activity.boundary_inclination_deg:g}° to the surface (90° = perpendicular); the true plane is not "
        "known from a surface map.",
        "Transmission score A→B: max over outgoing systems j of |m′(i*, j)| · effective Schmid_B(j) / "
        f"{systems.max_effective:.3g}, with i* the most-stressed system of A (see slipnet.crystal.transmission).",
    ]
    out.summary(title, lines)
    return out.files

"""Write a notch plan (and a batch of them): tables, settings, pictures and a summary."""

from __future__ import annotations

import os
from collections.abc import Iterable
from pathlib import Path

import pandas as pd

from slipnet.figures.notch import plot_plan_map, plot_plan_terms
from slipnet.maps.grain_graph import GrainGraph
from slipnet.notch.settings import NotchPlan
from slipnet.reports.writer import Outputs, markdown_table

__all__ = ["write_batch", "write_plan"]

#: Columns of the best-candidates table in the summary.
_SUMMARY_COLUMNS = ("rank", "root_x_um", "root_y_um", "plan_score", "initiation_drive", "barrier_strength_in_window",
                    "first_barrier_um", "log10_cycles_to_window", "arrest_probability", "p_top_k")


def write_plan(plan: NotchPlan, gg: GrainGraph, folder: str | os.PathLike, *, figures: bool = True,
               title: str = "Notch placement plan") -> dict[str, Path]:
    """Write ``notch_plan.csv``, ``notch_plan.json``, ``settings.json``, pictures and ``summary.md``.

    Returns
    -------
    dict
        Name → path of every file written.
    """
    out = Outputs(folder)
    t = plan.table
    out.table("table", t, "notch_plan.csv")
    out.table("json", t, "notch_plan.json")
    settings = plan.as_dict()
    out.json("settings", settings, "settings.json")
    if figures:
        out.figure("map", plot_plan_map(t, gg), "notch_plan_map.png")
        out.figure("terms", plot_plan_terms(t, plan.settings.weights), "notch_plan_terms.png")
    s = plan.settings
    weights = ", ".join(f"{k} {v:+g}" for k, v in s.weights.items())
    lines = [
        f"Load axis (map frame): ({', '.join(f'{v:.3f}' for v in s.load_axis)}); nominal amplitude "
        f"{s.stress_amplitude:g} MPa, R = {s.stress_ratio:g}.",
        f"Notch: depth {s.notch.depth_um:g} µm, root radius {s.notch.root_radius_um:g} µm, opening "
        f"{s.notch.opening_deg:g}°; observation window {s.window_um:g} µm.",
        f"Candidates: {len(t)}; objectives and weights: {weights}; ranking: {plan.method}.",
        "", "Best candidates (notch root, µm):", "",
        markdown_table(t.head(5)[[c for c in _SUMMARY_COLUMNS if c in t]]),
        "", "Stress concentration: Peterson-type K_t (semi-infinite plate chart fit, Pilkey & Pilkey 2008); "
        "growth at σ·min(K_t, √((t+a)/a)) (Dowling 1979)." if s.concentration == "peterson" else
        "", *(f"Note: {n}" for n in plan.notes),
    ]
    out.summary(title, lines)
    return out.files


def write_batch(results: Iterable[tuple[Path, GrainGraph, NotchPlan]], folder: str | os.PathLike, *,
                figures: bool = True) -> dict[str, Path]:
    """Write each specimen's plan to ``folder/<map file name>/`` as it comes, then the combined best table.

    Parameters
    ----------
    results
        ``(map path, grain graph, plan)`` per specimen, e.g. :func:`slipnet.notch.iter_batch`.
    folder
        Output folder.
    figures
        Draw each plan's pictures.

    Returns
    -------
    dict
        ``batch_best`` (the best three candidates of every specimen), ``summary`` and, per specimen,
        ``<map file name>/summary``.
    """
    out = Outputs(folder)
    best, names = [], []
    for path, gg, plan in results:
        sub = write_plan(plan, gg, out.folder / path.name, figures=figures)
        out.file(f"{path.name}/summary", sub["summary"])
        top = plan.table.head(3).copy()
        top.insert(0, "specimen", path.name)
        best.append(top)
        names.append(path.name)
    out.table("batch_best", pd.concat(best, ignore_index=True), "batch_best.csv")
    out.summary("Notch plans, batch", [f"Specimens: {len(names)} ({', '.join(names)})",
                                       "Best three candidates per specimen: batch_best.csv",
                                       "Each specimen's plan: one folder per map file."])
    return out.files

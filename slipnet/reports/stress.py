"""Write the stress step: pictures, the per-grain stress table and a summary with the assumptions."""

from __future__ import annotations

import os
from pathlib import Path

import numpy as np

from slipnet.figures import stress as figs
from slipnet.reports.writer import Outputs
from slipnet.stress.elastic import StressField
from slipnet.stress.local import grain_stress_table, stress_concentration

__all__ = ["write_stress"]


def write_stress(field: StressField, folder: str | os.PathLike, gg=None, systems=None, *,
                 title: str = "Local stresses", notch_root=None, radius_um: float | None = None,
                 figures: bool = True) -> dict[str, Path]:
    """Write pictures, a grain table and a summary (with the assumptions and the caution) into ``folder``.

    Parameters
    ----------
    field
        The solved field.
    folder
        Output folder (created).
    gg
        A ``GrainGraph`` for the per-grain table ``grain_stress.csv`` (optional).
    systems
        Slip systems (default: the catalogue's default for the main phase).
    notch_root
        ``(x, y)`` µm: report the stress concentration within ``radius_um`` (default 5 steps).
    radius_um
        Search radius around ``notch_root``, µm.
    figures
        Draw the stress pictures.

    Returns
    -------
    dict
        Name → path of every file written.
    """
    out = Outputs(folder)
    table = None
    if gg is not None:
        table = grain_stress_table(field, gg, systems)
        out.table("grain_stress", table, "grain_stress.csv")
    conc = None
    if notch_root is not None:
        r = 5.0 * field.omap.step if radius_um is None else radius_um
        conc = stress_concentration(field, notch_root[0], notch_root[1], r)
    if figures:
        out.figure("stress_map", figs.plot_stress_component(field), "stress_load_axis.png")
        out.figure("local_schmid_map", figs.plot_max_local_schmid(field, systems), "local_schmid_max.png")
        out.figure("schmid_difference_map", figs.plot_schmid_difference(field, systems),
                   "local_schmid_minus_uniform.png")
    solid = ~field.compliant
    lines = [
        f"Applied uniaxial stress {field.applied_stress:g} MPa along load axis "
        f"({field.load_axis[0]:.3f}, {field.load_axis[1]:.3f}, {field.load_axis[2]:.3f}) (map frame).",
        f"Solver: {field.iterations} conjugate-gradient iterations, normalised equilibrium residual "
        f"{field.residual:.2e} (tolerance {field.tol:g}).",
        f"Apparent Young's modulus of the cell along the load axis: {field.apparent_modulus:.1f} GPa.",
        f"Load-axis normal stress over solid points: min {np.min(field.normal_stress()[solid]):.1f}, "
        f"max {np.max(field.normal_stress()[solid]):.1f} MPa.",
    ]
    if conc is not None:
        lines.append(f"Stress concentration near ({notch_root[0]:.1f}, {notch_root[1]:.1f}) µm: "
                     f"{conc['concentration']:.2f} x applied at ({conc['x_um']:.1f}, {conc['y_um']:.1f}) µm.")
    if table is not None and len(table):
        worst = np.nanmax(np.abs(table["local_minus_uniform"]))
        lines.append(f"Grains: largest |local - uniform| Schmid factor {worst:.3f} (grain_stress.csv).")
    lines += ["", "Assumptions: " + field.assumptions]
    out.summary(title, lines)
    return out.files

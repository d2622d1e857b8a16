"""Slip transmission across every boundary of a grain graph, as a table.

The maths (m′, residual Burgers vector, Shen factor and the directional transmission score) is in
:mod:`slipnet.crystal.transmission`; this module applies it to the boundaries of a
:class:`~slipnet.maps.GrainGraph` with uniform-stress or local factors.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from slipnet._checks import check_range
from slipnet.crystal.slip_systems import SlipSystems, check_systems, schmid_factors, slip_systems
from slipnet.crystal.transmission import transmission_summaries
from slipnet.slip.tables import LOCAL_SOURCE, factors_or_local, grain_quats_for

__all__ = ["transmission_table"]


def transmission_table(gg, load_axis, systems: SlipSystems | None = None, *, boundary_inclination_deg: float = 90.0,
                          factors=None, stress_field=None) -> pd.DataFrame:
    """Transmission summaries for every boundary of ``gg``, both directions (the graph is not changed).

    Parameters
    ----------
    gg
        A :class:`slipnet.grains.GrainGraph`; uses ``mean_quats``, ``boundaries`` (``grain_a`` <
        ``grain_b``), edge ``trace_angle_deg`` and node ``phase``.
    load_axis : (3,) array_like
        Map frame.
    systems
        Catalogue (default: the defaults for the structure of the map's first phase). Grains
        of another structure are skipped (NaN).
    boundary_inclination_deg
        Assumed boundary-plane inclination to the surface for the Shen factor (90 = perpendicular).
    factors : (n_grains, n_sys) array_like, optional
        Signed per-grain Schmid factors to use instead of the uniform-stress ones.
    stress_field
        A :class:`slipnet.stress.StressField` solved on ``gg.omap`` for ``load_axis``: use its
        local grain Schmid factors (:func:`slipnet.slip.local_grain_factors`) instead of the
        uniform-stress ones; not with ``factors``. The table then has ``factor_source`` =
        ``"local stress field"``.

    Returns
    -------
    DataFrame
        Two rows per boundary (one per direction): ``boundary_id``, ``grain_in``, ``grain_out``,
        ``system_in``, ``label_in``, ``system_out``, ``label_out``, ``m_prime``,
        ``transmission_score``, ``score_system``, ``residual_burgers_nm`` (lattice parameters if
        the phase has none), ``shen_factor``, ``m_prime_max``, ``boundary_inclination_deg``
        (assumed). :func:`slipnet.slip.with_slip_annotations` puts them on a copy of the graph.
    """
    if systems is None:
        systems = slip_systems(gg.omap.phases[0].structure)
    systems = check_systems(systems)
    inc = check_range(boundary_inclination_deg, "boundary_inclination_deg", 0.0, 180.0, inclusive=False)
    q = grain_quats_for(gg, systems)
    if stress_field is not None:
        factors = factors_or_local(gg, load_axis, systems, factors, stress_field)
    if factors is None:
        factors = schmid_factors(q, load_axis, systems)
    b = gg.boundaries
    ga = b["grain_a"].to_numpy(np.int64)
    gb = b["grain_b"].to_numpy(np.int64)
    trace = b["trace_angle_deg"].to_numpy(float) if "trace_angle_deg" in b else np.full(ga.size, np.nan)
    # Burgers length in nm from the phase of grain A when the phase gives a lattice parameter
    lattice = np.array([ph.lattice_parameter_nm for ph in gg.omap.phases], dtype=float)
    lat = lattice[np.clip(gg.grains["phase"].to_numpy(np.int64)[ga], 0, len(lattice) - 1)]
    res = transmission_summaries(q, ga, gb, systems, factors=factors, trace_angle_deg=trace,
                                 boundary_inclination_deg=inc, burgers_nm=systems.burgers_length * lat)
    lab = np.append(systems.labels, "")
    rows = []
    for c, (gi, go) in enumerate(((ga, gb), (gb, ga))):
        rows.append(pd.DataFrame({
            "boundary_id": b["boundary_id"].to_numpy(), "grain_in": gi, "grain_out": go,
            "system_in": res["slip_in"][:, c], "label_in": lab[res["slip_in"][:, c]],
            "system_out": res["slip_out"][:, c], "label_out": lab[res["slip_out"][:, c]],
            "m_prime": res["m_prime"][:, c], "transmission_score": res["score"][:, c],
            "score_system": res["score_system"][:, c], "residual_burgers_nm": res["residual_burgers"][:, c],
            "shen_factor": res["shen"][:, c], "m_prime_max": res["m_prime_max"],
            "boundary_inclination_deg": inc,
        }))
    table = pd.concat(rows, ignore_index=True).sort_values(["boundary_id", "grain_in"], ignore_index=True)
    if stress_field is not None:
        table["factor_source"] = LOCAL_SOURCE
    return table

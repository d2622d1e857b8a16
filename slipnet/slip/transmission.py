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
    # both directions of every boundary in one set of columns, ordered by boundary then incoming
    # grain (A→B before B→A since grain_a < grain_b): no per-direction frames, no concat and sort
    n_b = ga.size
    bid = b["boundary_id"].to_numpy()
    if n_b < 2 or bool(np.all(bid[1:] > bid[:-1])):
        # the grain graph lists boundaries by increasing id: the order is A→B, B→A of each in turn
        order = np.arange(2 * n_b).reshape(2, n_b).T.ravel()
    else:
        order = np.lexsort((np.concatenate((ga, gb)), np.concatenate((bid, bid))))
    row_b, row_c = order % n_b, order // n_b  # boundary row and direction (0: A→B, 1: B→A) of each row

    def per_row(v):
        return v[row_b, row_c]

    # an object array: taking labels copies references, where a str array would make pandas build new strings
    lab = np.array([*systems.labels, ""], dtype=object)
    s_in, s_out = per_row(res["slip_in"]), per_row(res["slip_out"])
    table = pd.DataFrame({
        "boundary_id": bid[row_b], "grain_in": np.where(row_c == 0, ga[row_b], gb[row_b]),
        "grain_out": np.where(row_c == 0, gb[row_b], ga[row_b]),
        "system_in": s_in, "label_in": lab[s_in], "system_out": s_out, "label_out": lab[s_out],
        "m_prime": per_row(res["m_prime"]), "transmission_score": per_row(res["score"]),
        "score_system": per_row(res["score_system"]), "residual_burgers_nm": per_row(res["residual_burgers"]),
        "shen_factor": per_row(res["shen"]), "m_prime_max": res["m_prime_max"][row_b],
        "boundary_inclination_deg": inc,
    })
    if stress_field is not None:
        table["factor_source"] = LOCAL_SOURCE
    return table

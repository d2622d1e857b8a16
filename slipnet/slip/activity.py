"""Slip activity of a whole grain graph in one container, and a graph copy that carries it.

:func:`slip_activity` runs the three per-grain and per-boundary tables of the slip step
(Schmid factors, slip traces, transmission) from one set of factors, so they always agree, and
returns them in a :class:`SlipActivity`. :func:`with_slip_annotations` returns a new
:class:`~slipnet.maps.GrainGraph` whose graph carries the main numbers as node and edge
attributes (for GraphML export); the caller's graph is never changed.
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace

import numpy as np
import pandas as pd

from slipnet._checks import check_vector
from slipnet.crystal.slip_systems import SlipSystems, check_systems, slip_systems
from slipnet.slip.tables import LOCAL_SOURCE, factors_or_local, grain_schmid_table, slip_trace_table
from slipnet.slip.transmission import transmission_table

__all__ = [
    "GIVEN_SOURCE",
    "SLIP_EDGE_KEYS",
    "SLIP_NODE_KEYS",
    "UNIFORM_SOURCE",
    "SlipActivity",
    "slip_activity",
    "with_slip_annotations",
]

#: ``factor_source`` of activity from the uniform uniaxial stress.
UNIFORM_SOURCE = "uniform uniaxial stress"
#: ``factor_source`` of activity from factors the caller gave.
GIVEN_SOURCE = "factors given by the caller"

#: Node attributes added by :func:`with_slip_annotations`.
SLIP_NODE_KEYS = ("schmid_max", "effective_schmid_max", "slip_system")
#: Edge attributes added by :func:`with_slip_annotations` (``_ab``: grain_a → grain_b with
#: grain_a < grain_b; ``_ba`` the reverse).
SLIP_EDGE_KEYS = (
    "m_prime_ab", "m_prime_ba", "slip_in_ab", "slip_in_ba", "slip_out_ab", "slip_out_ba",
    "transmission_ab", "transmission_ba", "residual_burgers_ab_nm", "residual_burgers_ba_nm",
    "shen_ab", "shen_ba", "m_prime_max", "transmission_max", "boundary_inclination_deg",
)


@dataclass(frozen=True, eq=False)
class SlipActivity:
    """The slip step's result for one grain graph and one load.

    Attributes
    ----------
    systems : SlipSystems
        The catalogue used.
    load_axis : (3,) ndarray
        Unit load axis, map frame.
    grains : DataFrame
        :func:`slipnet.slip.grain_schmid_table`, one row per grain.
    traces : DataFrame
        :func:`slipnet.slip.slip_trace_table`, the most-stressed planes of every grain.
    transmission : DataFrame
        :func:`slipnet.slip.transmission_table`, two rows per boundary.
    factor_source : str
        Where the Schmid factors came from: :data:`UNIFORM_SOURCE`, :data:`GIVEN_SOURCE` or
        ``"local stress field"``.
    boundary_inclination_deg : float
        Assumed boundary-plane inclination to the surface (90 = perpendicular).
    assumptions : str or None
        The stress model's assumptions when local factors were used.
    settings : dict
        Everything else that shaped the tables (JSON-safe).
    """

    systems: SlipSystems
    load_axis: np.ndarray
    grains: pd.DataFrame
    traces: pd.DataFrame
    transmission: pd.DataFrame
    factor_source: str
    boundary_inclination_deg: float
    assumptions: str | None = None
    settings: dict = field(default_factory=dict)


def slip_activity(gg, load_axis, systems: SlipSystems | None = None, *, boundary_inclination_deg: float = 90.0,
                  taylor: bool = True, factors=None, stress_field=None) -> SlipActivity:
    """Schmid, slip-trace and transmission tables of every grain and boundary, from one set of factors.

    Parameters
    ----------
    gg : GrainGraph
        The grain graph.
    load_axis : (3,) array_like
        Uniaxial load axis, map frame.
    systems
        Catalogue (default: the default families of the map's first phase).
    boundary_inclination_deg
        Assumed boundary-plane inclination to the surface for the Shen factor, degrees
        (90 = perpendicular).
    taylor
        Add the Taylor factor to the grain table (one small LP per grain).
    factors : (n_grains, n_sys) array_like, optional
        Signed per-grain factors to use instead of the uniform-stress ones.
    stress_field : StressField, optional
        Use its local grain factors (:func:`slipnet.slip.local_grain_factors`); not with ``factors``.

    Returns
    -------
    SlipActivity
    """
    load = check_vector(load_axis, "load_axis")
    if systems is None:
        structures = [p.structure for p in gg.omap.phases]
        systems = slip_systems(structures[0] if structures else "bcc")
    systems = check_systems(systems)
    given = factors is not None
    f = factors_or_local(gg, load, systems, factors, stress_field)  # solved once for all three tables
    grains = grain_schmid_table(gg, load, systems, factors=f, taylor=taylor)
    traces = slip_trace_table(gg, load, systems, factors=f)
    trans = transmission_table(gg, load, systems, boundary_inclination_deg=boundary_inclination_deg, factors=f)
    if stress_field is not None:
        source = LOCAL_SOURCE
    else:
        source = GIVEN_SOURCE if given else UNIFORM_SOURCE
    for t in (grains, traces, trans):
        t["factor_source"] = source
    settings = {
        "load_axis": [float(v) for v in load], "structure": systems.structure,
        "families": list(systems.family_names), "boundary_inclination_deg": float(boundary_inclination_deg),
        "taylor": bool(taylor),
        "factor_source": source,
    }
    if stress_field is not None:
        settings.update(applied_stress_mpa=float(stress_field.applied_stress),
                        iterations=int(stress_field.iterations), residual=float(stress_field.residual))
    return SlipActivity(systems=systems, load_axis=load, grains=grains, traces=traces, transmission=trans,
                        factor_source=source, boundary_inclination_deg=float(boundary_inclination_deg),
                        assumptions=getattr(stress_field, "assumptions", None), settings=settings)


def with_slip_annotations(gg, activity: SlipActivity):
    """A new grain graph whose networkx graph carries the slip activity as attributes.

    Nodes get :data:`SLIP_NODE_KEYS` from ``activity.grains``; edges get :data:`SLIP_EDGE_KEYS` from
    ``activity.transmission``. ``gg`` itself is not changed.

    Returns
    -------
    GrainGraph
        A copy of ``gg`` with an annotated copy of its graph.
    """
    g = gg.graph.copy()
    gt = activity.grains
    node_values = {
        int(k): {"schmid_max": float(a), "effective_schmid_max": float(b), "slip_system": int(c)}
        for k, a, b, c in zip(gt["grain"], gt["schmid_max"], gt["effective_max"], gt["system_effective"],
                              strict=True) if int(k) in g
    }
    import networkx as nx

    nx.set_node_attributes(g, node_values)
    t = activity.transmission
    b = gg.boundaries
    bid = b["boundary_id"].to_numpy(np.int64)
    ga, gb = b["grain_a"].to_numpy(np.int64), b["grain_b"].to_numpy(np.int64)
    pos = np.full(int(bid.max()) + 1 if bid.size else 0, -1, np.int64)
    pos[bid] = np.arange(bid.size)
    rows = pos[t["boundary_id"].to_numpy(np.int64)]
    forward = t["grain_in"].to_numpy(np.int64) == ga[rows]
    cols = {"m_prime": float, "system_in": int, "system_out": int, "transmission_score": float,
            "residual_burgers_nm": float, "shen_factor": float, "m_prime_max": float}
    per = {}  # column -> (n_b, 2) array: [:, 0] a→b, [:, 1] b→a
    for c, kind in cols.items():
        arr = np.full((bid.size, 2), -1 if kind is int else np.nan, dtype=np.int64 if kind is int else float)
        v = t[c].to_numpy()
        arr[rows[forward], 0] = v[forward]
        arr[rows[~forward], 1] = v[~forward]
        per[c] = arr
    sc = per["transmission_score"]
    with np.errstate(invalid="ignore"):
        tmax = np.where(np.isfinite(sc).any(axis=1), np.nanmax(np.where(np.isfinite(sc), sc, -np.inf), axis=1),
                        np.nan)
    named = {
        "m_prime_ab": per["m_prime"][:, 0], "m_prime_ba": per["m_prime"][:, 1],
        "slip_in_ab": per["system_in"][:, 0], "slip_in_ba": per["system_in"][:, 1],
        "slip_out_ab": per["system_out"][:, 0], "slip_out_ba": per["system_out"][:, 1],
        "transmission_ab": sc[:, 0], "transmission_ba": sc[:, 1],
        "residual_burgers_ab_nm": per["residual_burgers_nm"][:, 0],
        "residual_burgers_ba_nm": per["residual_burgers_nm"][:, 1],
        "shen_ab": per["shen_factor"][:, 0], "shen_ba": per["shen_factor"][:, 1],
        "m_prime_max": np.fmax(per["m_prime_max"][:, 0], per["m_prime_max"][:, 1]),
        "transmission_max": tmax,
        "boundary_inclination_deg": np.full(bid.size, float(activity.boundary_inclination_deg)),
    }
    lists = {k: v.tolist() for k, v in named.items()}  # plain Python numbers, GraphML-safe
    pairs = zip(ga.tolist(), gb.tolist(), strict=True)
    edge_values = {(a, c): {k: lists[k][i] for k in SLIP_EDGE_KEYS} for i, (a, c) in enumerate(pairs)}
    nx.set_edge_attributes(g, edge_values)
    return replace(gg, graph=g)

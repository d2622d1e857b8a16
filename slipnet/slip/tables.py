"""Slip activity of every grain of a grain graph: Schmid factor and slip-trace tables.

The per-orientation maths (catalogue, Schmid factors, traces, Taylor factor) lives in
:mod:`slipnet.crystal.slip_systems`; this module applies it to the grains of a
:class:`~slipnet.maps.GrainGraph`, with uniform-stress or local (full-field) factors.
"""

from __future__ import annotations

import numpy as np
import pandas as pd

from slipnet._checks import check_vector
from slipnet.crystal.slip_systems import (
    SlipSystems,
    check_systems,
    effective_schmid,
    schmid_factors,
    taylor_factor,
    trace_geometry,
)
from slipnet.errors import ParameterError

__all__ = [
    "LOCAL_SOURCE",
    "factors_or_local",
    "grain_quats_for",
    "grain_schmid_table",
    "local_grain_factors",
    "slip_trace_table",
]

# ---------------------------------------------------------------------------------------- tables
def _grain_quats(gg) -> np.ndarray:
    q = np.asarray(gg.mean_quats, dtype=float)
    if q.ndim != 2 or q.shape[1] != 4:
        raise ParameterError(f"gg.mean_quats should have shape (n_grains, 4); got {q.shape}")
    return q


def _structure_mask(gg, systems: SlipSystems) -> np.ndarray:
    """True for grains whose phase has the structure of ``systems``."""
    n = _grain_quats(gg).shape[0]
    phases = gg.omap.phases
    ok = np.ones(n, bool)
    grains = getattr(gg, "grains", None)
    if grains is not None and "grain" in grains and "phase" in grains:
        # the grain table carries the nodes' phases: one array pass instead of a loop over grains
        g = grains["grain"].to_numpy(np.int64)
        ph = grains["phase"].to_numpy(np.int64)
        use = (ph >= 0) & (ph < len(phases)) & (g >= 0) & (g < n)
        same = np.array([p.structure == systems.structure for p in phases], dtype=bool)
        ok[g[use]] = same[ph[use]]
        return ok
    for g, data in gg.graph.nodes(data=True):
        ph = int(data.get("phase", 0))
        if 0 <= ph < len(phases) and 0 <= int(g) < n:
            ok[int(g)] = phases[ph].structure == systems.structure
    return ok


def grain_quats_for(gg, systems: SlipSystems) -> np.ndarray:
    """Grain mean orientations, NaN for grains of another crystal structure than ``systems``."""
    q = _grain_quats(gg).copy()
    q[~_structure_mask(gg, systems)] = np.nan
    return q


def local_grain_factors(gg, load_axis, systems: SlipSystems, stress_field) -> np.ndarray:
    """Per-grain local signed Schmid factors from a full-field stress solution.

    The grain means of ``τ / σ_applied`` from :func:`slipnet.stress.grain_schmid_factors`, laid
    out like the uniform-stress factors of :func:`grain_quats_for` (NaN rows for grains of another
    structure than ``systems``, or with no solid point).

    Parameters
    ----------
    gg
        The :class:`slipnet.grains.GrainGraph` of the map the field was solved on.
    load_axis : (3,) array_like
        Map frame; must be parallel (or anti-parallel) to ``stress_field.load_axis``.
    systems
        Catalogue.
    stress_field
        A :class:`slipnet.stress.StressField` on ``gg.omap``.

    Returns
    -------
    (n_grains, n_sys) ndarray
        Dimensionless signed local Schmid factors.
    """
    from slipnet.stress.local import grain_schmid_factors

    systems = check_systems(systems)
    load = check_vector(load_axis, "load_axis")
    field_axis = getattr(stress_field, "load_axis", None)
    if field_axis is None or not hasattr(stress_field, "assumptions"):
        raise ParameterError(f"stress_field should be a slipnet.stress.StressField; got {type(stress_field).__name__}")
    # a uniaxial load and its reverse give the same factors; any other axis is a different load case
    if abs(float(np.dot(load, check_vector(field_axis, "stress_field.load_axis")))) < 1.0 - 1e-9:
        raise ParameterError(
            f"load_axis {np.round(load, 4).tolist()} should be the load axis the stress field was solved for "
            f"({np.round(np.asarray(field_axis, float), 4).tolist()})")
    local = np.asarray(grain_schmid_factors(stress_field, gg, systems), dtype=float)
    n = _grain_quats(gg).shape[0]
    f = np.full((n, len(systems)), np.nan)
    k = min(n, local.shape[0])
    f[:k] = local[:k]
    f[~_structure_mask(gg, systems)] = np.nan
    return f


def factors_or_local(gg, load_axis, systems, factors, stress_field):
    """``factors`` unchanged, or the local factors of ``stress_field`` (not both)."""
    if stress_field is None:
        return factors
    if factors is not None:
        raise ParameterError("give either factors or stress_field, not both")
    return local_grain_factors(gg, load_axis, systems, stress_field)


def grain_schmid_table(gg, load_axis, systems: SlipSystems, *, factors=None, taylor: bool = False,
                       stress_field=None) -> pd.DataFrame:
    """One row per grain: largest Schmid factor and its system, runner-up, ratio, effective factor.

    Parameters
    ----------
    gg
        A :class:`slipnet.grains.GrainGraph` (uses ``mean_quats`` and node ``phase``).
    load_axis : (3,) array_like
        Map frame.
    systems
        Catalogue; grains of another structure get NaN.
    factors : (n_grains, n_sys) array_like, optional
        Signed factors to use instead of the uniform-stress ones (e.g. local factors from
        :func:`slipnet.stress.grain_schmid_factors`).
    taylor
        Add a ``taylor_factor`` column (one LP per grain; always for the uniform uniaxial load).
    stress_field
        A :class:`slipnet.stress.StressField`: use its local grain factors
        (:func:`local_grain_factors`) instead of the uniform-stress ones; not with ``factors``.

    Returns
    -------
    DataFrame
        Columns ``grain``, ``schmid_max``, ``system_max``, ``label_max``, ``family_max``,
        ``sense_max`` (+1/−1; +1 twinning sense for {112}), ``schmid_second``, ``system_second``,
        ``label_second``, ``second_to_max_ratio``, ``effective_max``, ``system_effective``,
        ``label_effective`` (all factors dimensionless), optionally ``taylor_factor``; with
        ``stress_field`` also ``factor_source`` = ``"local stress field"``.
    """
    systems = check_systems(systems)
    q = grain_quats_for(gg, systems)
    factors = factors_or_local(gg, load_axis, systems, factors, stress_field)
    if factors is None:
        f = schmid_factors(q, load_axis, systems)
    else:
        f = np.asarray(factors, dtype=float)
        if f.shape != (q.shape[0], len(systems)):
            raise ParameterError(f"factors should have shape {(q.shape[0], len(systems))}; got {f.shape}")
    s = _summary_from_factors(f, systems)
    lab = np.append(systems.labels, "")
    fam = np.append(systems.families, "")
    t = pd.DataFrame({"grain": np.arange(q.shape[0])})
    t["schmid_max"] = s["schmid_max"]
    t["system_max"] = s["system_max"]
    t["label_max"] = lab[s["system_max"]]
    t["family_max"] = fam[s["system_max"]]
    t["sense_max"] = s["sense_max"]
    t["schmid_second"] = s["schmid_second"]
    t["system_second"] = s["system_second"]
    t["label_second"] = lab[s["system_second"]]
    t["second_to_max_ratio"] = s["second_to_max_ratio"]
    t["effective_max"] = s["effective_max"]
    t["system_effective"] = s["system_effective"]
    t["label_effective"] = lab[s["system_effective"]]
    if taylor:
        t["taylor_factor"] = taylor_factor(q, load_axis, systems)
    if stress_field is not None:
        t["factor_source"] = LOCAL_SOURCE
    return t


def _summary_from_factors(f: np.ndarray, systems: SlipSystems) -> dict[str, np.ndarray]:
    ok = np.all(np.isfinite(f), axis=1)
    a = np.abs(np.where(ok[:, None], f, 0.0))
    order = np.argsort(-a, axis=1, kind="stable")
    rows = np.arange(f.shape[0])
    i1, i2 = order[:, 0], order[:, 1] if f.shape[1] > 1 else order[:, 0]
    eff = effective_schmid(np.where(ok[:, None], f, 0.0), systems)
    ie = np.argmax(eff, axis=1)
    m1, m2 = a[rows, i1], a[rows, i2]
    with np.errstate(divide="ignore", invalid="ignore"):
        ratio = np.where(m1 > 0, m2 / m1, np.nan)
    out = {
        "schmid_max": m1, "system_max": i1, "schmid_second": m2, "system_second": i2,
        "second_to_max_ratio": ratio, "effective_max": eff[rows, ie], "system_effective": ie,
        "sense_max": np.where(f[rows, i1] >= 0, 1, -1),
    }
    for k in out:
        if out[k].dtype.kind == "f":
            out[k] = np.where(ok, out[k], np.nan)
        else:
            out[k] = np.where(ok, out[k], -1)
    out["sense_max"] = np.where(ok, out["sense_max"], 0)
    return out


def slip_trace_table(gg, load_axis, systems: SlipSystems, *, n_planes: int = 2, factors=None,
                     stress_field=None) -> pd.DataFrame:
    """Surface traces of the most-stressed slip planes of every grain.

    For each grain the systems are ranked by effective Schmid factor and the first ``n_planes``
    systems on *distinct* planes are kept (two systems on one plane share a trace). ``factors``
    ((n_grains, n_sys) signed) or ``stress_field`` (local factors, :func:`local_grain_factors`)
    replace the uniform-stress factors in the ranking.

    Returns
    -------
    DataFrame
        Columns ``grain``, ``rank`` (1 = most stressed), ``system``, ``label``, ``family``,
        ``effective_schmid``, ``trace_angle_deg`` ([0, 180) from +x towards +y; NaN if the plane
        is parallel to the surface), ``inclination_deg`` (plane to surface, 90 = perpendicular),
        ``centroid_x_um``, ``centroid_y_um``; with ``stress_field`` also ``factor_source``.
    """
    systems = check_systems(systems)
    if int(n_planes) < 1:
        raise ParameterError(f"n_planes should be >= 1; got {n_planes}")
    q = grain_quats_for(gg, systems)
    factors = factors_or_local(gg, load_axis, systems, factors, stress_field)
    f = schmid_factors(q, load_axis, systems) if factors is None else np.asarray(factors, dtype=float)
    ok = np.all(np.isfinite(f), axis=1)
    eff = effective_schmid(np.where(ok[:, None], f, 0.0), systems)
    order = np.argsort(-eff, axis=1, kind="stable")
    plane_of = systems.plane_index[order]
    ang, inc = trace_geometry(q, systems)
    rows = np.arange(q.shape[0])
    chosen = np.zeros_like(order, dtype=bool)
    picks = []
    for _ in range(min(int(n_planes), len(systems.planes))):
        # first system in ranked order whose plane is not yet taken
        taken = np.zeros_like(order, dtype=bool)
        for prev in picks:
            taken |= plane_of == plane_of[rows, prev][:, None]
        pos = np.argmax(~taken & ~chosen, axis=1)
        chosen[rows, pos] = True
        picks.append(pos)
    node = dict(gg.graph.nodes(data=True))
    cx = np.array([float(node.get(g, {}).get("centroid_x_um", np.nan)) for g in rows])
    cy = np.array([float(node.get(g, {}).get("centroid_y_um", np.nan)) for g in rows])
    parts = []
    for r, pos in enumerate(picks, start=1):
        s = order[rows, pos]
        parts.append(pd.DataFrame({
            "grain": rows, "rank": r, "system": s, "label": systems.labels[s], "family": systems.families[s],
            "effective_schmid": np.where(ok, eff[rows, s], np.nan),
            "trace_angle_deg": ang[rows, s], "inclination_deg": inc[rows, s],
            "centroid_x_um": cx, "centroid_y_um": cy,
        })[ok])
    out = pd.concat(parts, ignore_index=True).sort_values(["grain", "rank"], ignore_index=True)
    if stress_field is not None:
        out["factor_source"] = LOCAL_SOURCE
    return out




#: ``factor_source`` value of tables made with local factors from a stress field.
LOCAL_SOURCE = "local stress field"

"""Crack forecast: the stage-I path ahead of a tip, ranked arrest barriers and localisation sites.

Given a grain graph (:class:`slipnet.grains.GrainGraph`), the load and a crack tip, this module
says where a microstructurally short crack will run, which boundaries should slow or stop it, and
where shear should pile up ahead of it, and shows every term of every ranking.

Notation (sample/map frame unless stated): g orientation (``v_c = g v_s``), n slip-plane normal,
d slip direction, l unit load axis, z = (0, 0, 1) the surface normal (into the specimen),
t = n × z the surface trace of a plane, b the surface trace of a boundary, n_gb its plane normal.

The path (stage I)
------------------
Inside a grain the crack follows the surface trace of the slip plane whose best system carries
the highest effective Schmid factor ``|m| / τ_c`` (``τ_c`` the relative critical resolved shear
stress of its family), in the sense with a positive projection on the macroscopic growth
direction (the direction given at the tip). Where another plane's effective factor is within
``zigzag_tol`` (relative to the larger of the two) of the plane being followed, the crack
alternates between the two traces (zig-zag) in legs of ``zigzag_step_fraction`` × the grain's
equivalent circle diameter (at least two map steps). The march samples the label image every
quarter step along the trace (numba) and bisects the exit point to 1/64 of that. At a boundary
the outgoing plane is the one with the highest choice score (see :class:`PathWeights`); the
boundary plane is taken perpendicular to the surface through the fitted boundary trace
(``trace_angle_deg`` of the graph edge) unless an inclination is given. Stage II (growth
perpendicular to the in-plane projection of the load axis) starts past ``stage2_after_um`` or in
a grain whose best effective factor is below ``stage2_min_schmid``. The path stops at the
horizon, the map edge, a run of unindexed points longer than ``unindexed_gap_um``, or where the
chosen trace leads straight back into the grain it came from ("blocked": the crack would have
to run along the boundary).

Alternatives, barriers, sites
-----------------------------
Every other outgoing plane whose choice score is within ``branch_tol`` of the best starts an
alternative path (breadth first, at most ``max_branches``). Every boundary met by the main path
or an alternative is ranked by :func:`rank_barriers`. Localisation sites: in the grains on and
next to the paths, the band of the most stressed system runs along its surface trace through
the grain; where it ends on a boundary its score is τ × band length × (1 − transmission), with
τ = m_eff × stress amplitude (MPa) and the transmission the best |m′| to a system of the next
grain weighted by that system's relative effective factor. The bands, weighted by their sites'
scores, drawn on the grid and blurred with a Gaussian of ``field_sigma_um`` give the predicted
localisation field (maximum 1). Monte Carlo: :mod:`slipnet.forecast_mc`.

References
----------
Zhai, T., Wilkinson, A. J. & Martin, J. W. (2000). A crystallographic mechanism for fatigue crack
propagation through grain boundaries. Acta Materialia 48, 4917–4927.
Luster, J. & Morris, M. A. (1995). Compatibility of deformation in two-phase Ti-Al alloys.
Metallurgical and Materials Transactions A 26, 1745–1756.
Navarro, A. & de los Rios, E. R. (1988). Short and long fatigue crack growth: a unified model.
Philosophical Magazine A 57, 15–36.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, fields

import numpy as np
import pandas as pd

from ._checks import check_positive, check_vector
from ._forecast_core import (
    _MAX_SCHMID,
    _check_decay,
    _class_factor,
    _Crystal,
    _distance_to_segments,
    _field,
    _make_opts,
    _Opts,
    _parse_tip,
    _Planes,
    _sites,
    _start_grain,
    _trace_all,
    crack_plane_angles,
    geometry_of,
)
from .errors import ParameterError

__all__ = [
    "CLASS_FACTORS",
    "BarrierWeights",
    "CrackForecast",
    "MonteCarloNoise",
    "PathWeights",
    "crack_plane_angles",
    "forecast_crack",
    "rank_barriers",
    "write_forecast",
]


#: Barrier factor of each boundary class (0 no barrier … 1 full high-angle barrier).
#: Sub-grain and low-angle boundaries let slip and cracks through almost unchanged (common
#: practice; Zhai et al. 2000 saw cracks cross low-misorientation boundaries without arrest);
#: coherent Σ3 twins transmit slip on the shared {111}/{112} plane family more easily than a
#: general boundary (common practice), other CSL boundaries sit in between (common practice).
CLASS_FACTORS: dict[str, float] = {
    "subgrain": 0.1,
    "low_angle": 0.3,
    "sigma3": 0.6,
    "csl": 0.8,
    "high_angle": 1.0,
}


@dataclass(frozen=True)
class PathWeights:
    """Weights of the outgoing-plane choice score at a boundary.

    ``score = (w_s·min(m_eff/0.5, 1) + w_m·|m′| + w_α·(1 − α/90°) + w_β·(1 − β/90°)) / Σw``,
    in [0, 1]; m_eff is the outgoing plane's best effective Schmid factor, |m′| is between the
    incoming system and that best system, α and β the crack-plane twist and tilt.

    Notes
    -----
    Defaults: the driving force (Schmid) and the twist carry equal weight, because Zhai et al.
    (2000) found the twist angle to govern whether and where a stage-I crack crosses; the tilt
    is "a minor factor" in the same work (weight 0.25); |m′| (Luster & Morris 1995) adds slip
    continuity at half weight, since the crack plane need not be the transmitted slip plane.
    """

    schmid: float = 1.0
    m_prime: float = 0.5
    twist: float = 1.0
    tilt: float = 0.25


@dataclass(frozen=True)
class BarrierWeights:
    """Weights of the barrier resistance score.

    ``score = relevance · (w_α·α/90° + w_T·(1 − |m′|) + w_c·class_factor + w_Δ·Δm_eff/0.5) / Σw``
    with ``relevance = exp(−distance / decay_length)``.

    Notes
    -----
    Defaults: twist and 1 − transmission weigh 1 each (twist: Zhai et al. 2000, the main
    resistance to crack crossing; transmission: slip blocked at a boundary holds the plastic
    zone back, Navarro & de los Rios 1988), the boundary class 0.5 (it repeats part of the
    twist/m′ information: a low-angle boundary has small twist and high m′ anyway) and the drop
    of effective Schmid factor 0.5 (a less favourably oriented next grain slows the crack,
    Tanaka et al. 1986; common practice).
    """

    twist: float = 1.0
    transmission: float = 1.0
    boundary_class: float = 0.5
    schmid_drop: float = 0.5


@dataclass(frozen=True)
class MonteCarloNoise:
    """Standard deviations of the Monte Carlo perturbations.

    Attributes
    ----------
    orientation_deg
        Rotation angle (normal, random axis) applied to every grain mean orientation; 1–2° is
        the usual angular precision of an orientation map (common practice).
    load_deg
        Misalignment of the load axis (normal angle about a random perpendicular axis).
    tip_um
        Gaussian jitter of each tip coordinate, µm.
    weights
        Log-normal relative jitter of every score weight.
    """

    orientation_deg: float = 1.5
    load_deg: float = 2.0
    tip_um: float = 1.0
    weights: float = 0.2


@dataclass(frozen=True, eq=False)
class CrackForecast:
    """Result of :func:`forecast_crack`.

    Attributes
    ----------
    path : DataFrame
        Main path, one row per straight segment: ``grain``, ``x0``, ``y0``, ``x1``, ``y1`` (µm),
        ``length_um``, ``s_start_um`` (distance along the path from the tip), ``system`` (index
        into the catalogue, −1 in stage II), ``plane`` (Miller label), ``schmid`` (effective
        factor of that system in that grain), ``stage`` ("I"/"II"), ``direction_deg`` (from +x
        towards +y), ``leg`` ("trace"/"zigzag"/"stage2"), ``end`` (what stopped the segment).
    crossings : DataFrame
        One row per boundary crossing of the main path and of the alternatives (``branch``):
        ``boundary_id``, ``grain_a`` (from), ``grain_b`` (into), ``x``, ``y`` (µm),
        ``distance_um``, ``twist_deg``, ``tilt_deg``, ``m_prime``, ``schmid_in``, ``schmid_out``,
        the choice-score terms ``choice_*`` and ``choice_score``, ``n_close`` (other planes within
        the branch tolerance).
    barriers : DataFrame
        Ranked boundaries (``rank`` 1 = strongest): ``boundary_id``, ``grain_a``, ``grain_b``,
        ``score``, ``twist_deg``, ``tilt_deg``, ``m_prime``, ``distance_um``, ``on_path``, the
        terms ``term_*``, the weights ``weight_*``, ``relevance``, ``boundary_class``, ``branches``,
        and with Monte Carlo ``p_on_path``, ``p_top_k``.
    sites : DataFrame
        Ranked localisation sites: ``rank``, ``x``, ``y`` (µm), ``score`` (MPa·µm), ``grain``,
        ``blocking_grain``, ``boundary_id``, ``system``, ``plane``, ``resolved_shear_mpa``,
        ``band_length_um``, ``transmission``; with Monte Carlo ``p_present``, ``p_top_k``.
    alternatives : DataFrame
        Segments of the alternative paths (same columns as ``path`` plus ``branch`` ≥ 1).
    field : (ny, nx) ndarray or None
        Predicted localisation field on the map grid, maximum 1.
    samples : DataFrame or None
        One row per Monte Carlo sample, or None without sampling.
    settings : dict
        Every input that shaped the result (JSON-safe).
    stop_reason : str
        Why the main path ended: "horizon", "map_edge", "unindexed", "blocked".
    """

    path: pd.DataFrame
    crossings: pd.DataFrame
    barriers: pd.DataFrame
    sites: pd.DataFrame
    alternatives: pd.DataFrame
    field: np.ndarray | None
    samples: pd.DataFrame | None
    settings: dict
    stop_reason: str

    @property
    def length_um(self) -> float:
        """Length of the main path, µm."""
        return float(self.path["length_um"].sum()) if len(self.path) else 0.0



# ---------------------------------------------------------------------------------------------
# barrier ranking


def rank_barriers(
    crossings: pd.DataFrame,
    weights: BarrierWeights | None = None,
    *,
    decay_length_um: float = np.inf,
    class_factors: dict[str, float] | None = None,
) -> pd.DataFrame:
    """Rank boundary crossings by a resistance score that shows every term and weight.

    Parameters
    ----------
    crossings
        Crossing rows as in :attr:`CrackForecast.crossings` (at least ``boundary_id``,
        ``grain_a``, ``grain_b``, ``twist_deg``, ``tilt_deg``, ``m_prime``, ``schmid_in``,
        ``schmid_out``, ``boundary_class``, ``distance_um``; ``branch`` 0 marks the main path).
    weights
        Term weights (:class:`BarrierWeights`).
    decay_length_um
        Relevance decay length: ``relevance = exp(−distance_um / decay_length_um)``; ``inf``
        ranks by the terms alone.
    class_factors
        Barrier factor per boundary class (default :data:`CLASS_FACTORS`).

    Returns
    -------
    DataFrame
        One row per boundary (the main-path crossing when the boundary is on it, else its first
        crossing by an alternative), sorted by ``score`` (descending), ``rank`` from 1.

    Notes
    -----
    ``score = relevance · Σ_k w_k·term_k / Σ_k w_k`` with ``term_twist = α/90°``,
    ``term_transmission = 1 − |m′|``, ``term_class`` from the boundary class and
    ``term_schmid_drop = max(0, m_eff,in − m_eff,out)/0.5``; every term lies in [0, 1].
    A boundary between identical orientations has twist 0, |m′| = 1 and no Schmid drop, so only
    its class term (sub-grain: 0.1) remains: the weakest possible barrier.
    """
    w = weights or BarrierWeights()
    cf = CLASS_FACTORS if class_factors is None else class_factors
    decay_length_um = _check_decay(decay_length_um)
    cols = ["rank", "boundary_id", "grain_a", "grain_b", "score", "twist_deg", "tilt_deg", "m_prime",
            "distance_um", "on_path", "term_twist", "term_transmission", "term_class", "term_schmid_drop",
            "relevance", "weight_twist", "weight_transmission", "weight_class", "weight_schmid_drop",
            "boundary_class", "misorientation_deg", "schmid_in", "schmid_out", "x", "y", "branches"]
    if crossings is None or len(crossings) == 0:
        return pd.DataFrame({c: pd.Series(dtype=object if c in ("boundary_class", "branches") else float)
                             for c in cols})
    n = len(crossings)
    col = {c: crossings[c].to_numpy() for c in crossings.columns}
    branch = col.get("branch", np.zeros(n, int))
    ga, gb = col["grain_a"].astype(int), col["grain_b"].astype(int)
    keys = [(min(a, b), max(a, b)) for a, b in zip(ga, gb, strict=True)]
    # one row per boundary: its main-path crossing if any, else the first alternative crossing
    first: dict = {}
    seen: dict = {}
    for i in np.lexsort((col["distance_um"], branch)):
        k = keys[i]
        seen.setdefault(k, set()).add(int(branch[i]))
        first.setdefault(k, i)
    idx = np.array(list(first.values()), dtype=int)
    mis = col.get("misorientation_deg", np.full(n, np.nan))
    out = pd.DataFrame({
        "boundary_id": col["boundary_id"][idx].astype(int),
        "grain_a": ga[idx], "grain_b": gb[idx],
        "twist_deg": col["twist_deg"][idx].astype(float), "tilt_deg": col["tilt_deg"][idx].astype(float),
        "m_prime": col["m_prime"][idx].astype(float), "distance_um": col["distance_um"][idx].astype(float),
        "on_path": [0 in seen[keys[i]] for i in idx],
        "boundary_class": col["boundary_class"][idx].astype(str),
        "misorientation_deg": mis[idx].astype(float),
        "schmid_in": col["schmid_in"][idx].astype(float), "schmid_out": col["schmid_out"][idx].astype(float),
        "x": col["x"][idx].astype(float), "y": col["y"][idx].astype(float),
        "branches": [";".join(str(b) for b in sorted(seen[keys[i]])) for i in idx],
    })
    out["term_twist"] = np.clip(out["twist_deg"].to_numpy() / 90.0, 0.0, 1.0)
    out["term_transmission"] = np.clip(1.0 - out["m_prime"].to_numpy(), 0.0, 1.0)
    out["term_class"] = [_class_factor(c, cf) for c in out["boundary_class"]]
    out["term_schmid_drop"] = np.clip((out["schmid_in"].to_numpy() - out["schmid_out"].to_numpy()) / _MAX_SCHMID,
                                      0.0, 1.0)
    out["relevance"] = np.exp(-out["distance_um"] / decay_length_um)
    out["weight_twist"] = w.twist
    out["weight_transmission"] = w.transmission
    out["weight_class"] = w.boundary_class
    out["weight_schmid_drop"] = w.schmid_drop
    wsum = w.twist + w.transmission + w.boundary_class + w.schmid_drop
    if wsum <= 0:
        raise ParameterError(f"barrier weights should have a positive sum; got {w}")
    raw = (w.twist * out["term_twist"] + w.transmission * out["term_transmission"]
           + w.boundary_class * out["term_class"] + w.schmid_drop * out["term_schmid_drop"]) / wsum
    out["score"] = out["relevance"] * raw
    out = out.sort_values(["score", "distance_um"], ascending=[False, True], kind="stable").reset_index(drop=True)
    out["rank"] = np.arange(1, len(out) + 1)
    return out[cols]


def _core(geo, planes, quats, load, schmid, tip, grain0, opts: _Opts, *, amplitude, decay, bw, cf,
          want_field: bool, sigma_um: float, site_radius: float | None = None) -> dict:
    cry = _Crystal(quats, load, planes, schmid)
    states, alt_cross = _trace_all(geo, cry, planes, float(tip[0]), float(tip[1]), grain0, opts)
    main = states[0]
    seg_cols = ["grain", "x0", "y0", "x1", "y1", "length_um", "s_start_um", "system", "plane", "schmid", "stage",
                "direction_deg", "leg", "end", "branch"]
    path = pd.DataFrame(main.segments, columns=seg_cols).drop(columns="branch")
    alts = pd.DataFrame([s for st in states[1:] for s in st.segments], columns=seg_cols)
    crossings = pd.DataFrame(main.crossings + alt_cross)
    barriers = rank_barriers(crossings, bw, decay_length_um=decay, class_factors=cf)
    on = set(path["grain"].tolist()) | set(alts["grain"].tolist())
    near = set(on)
    for g in path["grain"].tolist():
        near.update(geo.neigh.get(int(g), []))
    cand = np.array(sorted(near), dtype=np.int64)
    if cand.size:
        dist = np.hypot(geo.cx[cand] - tip[0], geo.cy[cand] - tip[1])
        cand = cand[(dist <= opts.horizon + 0.5 * geo.ecd[cand]) | np.isin(cand, list(on))]
    sites, bands = _sites(geo, cry, planes, cand, amplitude, want_bands=want_field,
                          max_gap=min(opts.max_gap, 3.0 * geo.step))
    segs = pd.concat([path[["x0", "y0", "x1", "y1"]], alts[["x0", "y0", "x1", "y1"]]]).to_numpy(float)
    if len(sites) and len(segs):
        dpath = _distance_to_segments(sites["x"].to_numpy(float), sites["y"].to_numpy(float), segs)
        radius = site_radius if site_radius is not None else float(np.median(geo.ecd[path["grain"].to_numpy()]))
        sites = sites.assign(path_distance_um=dpath)[dpath <= radius].reset_index(drop=True)
        sites["rank"] = np.arange(1, len(sites) + 1)
    else:
        sites = sites.assign(path_distance_um=np.full(len(sites), np.nan))
    sites["on_path_grain"] = sites["grain"].isin(path["grain"]) if len(sites) else pd.Series(dtype=bool)
    fld = _field(geo, bands, sigma_um) if want_field else None
    return {"path": path, "alternatives": alts, "crossings": crossings, "barriers": barriers, "sites": sites,
            "field": fld, "stop": main.stop}


def forecast_crack(
    gg,
    tip,
    direction=None,
    load_axis=(0.0, 1.0, 0.0),
    horizon: float = 200.0,
    *,
    stress_amplitude: float = 200.0,
    stress_ratio: float = -1.0,
    systems=None,
    stress_field=None,
    samples: int = 0,
    seed: int = 0,
    noise: MonteCarloNoise | None = None,
    top_k: int = 3,
    path_weights: PathWeights | None = None,
    barrier_weights: BarrierWeights | None = None,
    class_factors: dict[str, float] | None = None,
    decay_length_um: float | None = None,
    zigzag_tol: float = 0.05,
    zigzag_step_fraction: float = 0.25,
    branch_tol: float = 0.05,
    max_branches: int = 4,
    stage2_after_um: float | None = None,
    stage2_min_schmid: float | None = None,
    inclination_deg: float = 0.0,
    unindexed: str = "stop",
    unindexed_gap_um: float | None = None,
    field_sigma_um: float | None = None,
    site_radius_um: float | None = None,
) -> CrackForecast:
    """Forecast the short-crack path ahead of a tip, rank barriers and localisation sites.

    Parameters
    ----------
    gg : GrainGraph
        Grains and boundaries (:func:`slipnet.grains.build_grain_graph`).
    tip : (2,) or (k, 2) array_like
        Crack tip ``(x, y)`` in µm, or a crack polyline (tip = last point; if ``direction`` is
        None, direction = last segment). A notch root is given as a tip with the notch direction.
    direction : (2,) array_like or None
        Macroscopic growth direction (map frame, need not be unit). The crack always takes the
        sense of a trace that has a positive projection on it.
    load_axis : (3,) array_like
        Uniaxial load axis in the map frame.
    horizon
        Path length to forecast ahead of the tip, µm (> 0).
    stress_amplitude
        Applied stress amplitude, MPa (resolved shear of the sites = m_eff × amplitude).
    stress_ratio
        R = σ_min/σ_max (< 1); recorded in the settings for the growth model.
    systems
        Slip-system catalogue (default ``slipnet.slip.slip_systems`` of the map's first phase).
    stress_field
        A :class:`slipnet.stress.StressField`: grain-mean local Schmid factors replace the
        uniform-load ones (and load misalignment is then not sampled).
    samples, seed, noise, top_k
        Monte Carlo samples (0: none), their seed, perturbation sizes and the k of "top k".
    path_weights, barrier_weights, class_factors
        Score weights (:class:`PathWeights`, :class:`BarrierWeights`, :data:`CLASS_FACTORS`).
    decay_length_um
        Barrier relevance decay length, µm; default the horizon (a barrier at the horizon
        counts e⁻¹ ≈ 0.37 of one at the tip).
    zigzag_tol, zigzag_step_fraction
        Relative tolerance on the effective Schmid factor under which two planes alternate, and
        the leg length as a fraction of the grain's equivalent circle diameter (≥ 2 steps).
    branch_tol, max_branches
        Alternative outgoing planes within ``branch_tol`` of the best choice score start an
        alternative path, at most ``max_branches`` in all (breadth first).
    stage2_after_um, stage2_min_schmid
        Switch to stage II past this path length, or in a grain whose best effective Schmid
        factor is below this threshold (None: never).
    inclination_deg
        Boundary-plane inclination about its trace (0: perpendicular to the surface, assumed).
    unindexed, unindexed_gap_um
        ``"stop"``: the path ends where it meets a run of unindexed points longer than
        ``unindexed_gap_um`` (default 5 steps: isolated bad points and small clusters are walked
        through, a notch or a large unindexed region stops it); ``"cross"``: walk through any unindexed run to the
        next grain (the crossing is recorded where that grain begins).
    field_sigma_um
        Gaussian width of the localisation field, µm (default 2 steps).
    site_radius_um
        Keep localisation sites within this distance of the main or an alternative path, µm
        (default: the median equivalent circle diameter of the grains on the main path, so a
        site lies at most about one grain away from where the crack is expected).

    Returns
    -------
    CrackForecast

    Raises
    ------
    ParameterError
        Tip outside the map or on an unindexed point, zero/negative horizon, zero vectors,
        stage II requested with a load along the surface normal (no in-plane component).

    Notes
    -----
    A tip lying on a boundary starts in the grain half a step ahead along ``direction``. A load
    along the surface normal is valid for stage I (Schmid factors are defined) but has no stage II
    direction: every in-plane direction is normal to it, so stage II options are refused.
    Cost: one march per segment (numba), O(grains ahead × systems) for scores; a forecast takes
    milliseconds once the graph exists (``benchmarks/bench_forecast.py``).
    """
    geo = geometry_of(gg)
    horizon = check_positive(horizon, "horizon")
    tip_xy, d, crack_len = _parse_tip(geo, tip, direction)
    load = check_vector(load_axis, "load_axis", 3)
    amplitude = check_positive(stress_amplitude, "stress_amplitude")
    ratio = float(stress_ratio)
    if not (math.isfinite(ratio) and ratio < 1.0):
        raise ParameterError(f"stress_ratio should be a finite number < 1; got {stress_ratio!r}")
    pw = path_weights or PathWeights()
    bw = barrier_weights or BarrierWeights()
    for wobj in (pw, bw):
        if any(getattr(wobj, f.name) < 0 for f in fields(wobj)):
            raise ParameterError(f"score weights should be >= 0; got {wobj}")
    decay = horizon if decay_length_um is None else _check_decay(decay_length_um)
    sigma_um = 2.0 * geo.step if field_sigma_um is None else check_positive(field_sigma_um, "field_sigma_um")
    site_r = None if site_radius_um is None else check_positive(site_radius_um, "site_radius_um")
    gap = 5.0 * geo.step if unindexed_gap_um is None else check_positive(
        unindexed_gap_um, "unindexed_gap_um",
                                                                           allow_zero=True)
    opts = _make_opts(horizon, d, load, stage2_after_um=stage2_after_um, stage2_min_schmid=stage2_min_schmid,
                      zigzag_tol=zigzag_tol, zigzag_step_fraction=zigzag_step_fraction, branch_tol=branch_tol,
                      max_branches=max_branches, inclination_deg=inclination_deg, unindexed=unindexed,
                      unindexed_gap_um=gap, path_weights=pw)
    if opts.d_stage2 is None and (stage2_after_um is not None or stage2_min_schmid is not None):
        raise ParameterError(
            f"load_axis {tuple(np.round(load, 3))} is (nearly) along the surface normal, so stage II "
            "(growth normal to the in-plane load) has no direction; give stage2_after_um=None and "
            "stage2_min_schmid=None, or a load axis with an in-plane component"
        )
    grain0 = _start_grain(geo, tip_xy, d)
    if systems is None:
        from .slip import slip_systems

        systems = slip_systems(geo.structure)
    planes = _Planes(systems)
    quats = np.asarray(gg.mean_quats, dtype=float)
    schmid = None
    if stress_field is not None:
        from .stress import grain_schmid_factors

        local = np.asarray(grain_schmid_factors(stress_field, gg, systems), dtype=float)
        schmid = np.zeros((quats.shape[0], local.shape[1]))
        schmid[: local.shape[0]] = np.nan_to_num(local[: quats.shape[0]])
    res = _core(geo, planes, quats, load, schmid, tip_xy, grain0, opts, amplitude=amplitude, decay=decay, bw=bw,
                cf=class_factors, want_field=True, sigma_um=sigma_um, site_radius=site_r)
    noise = noise or MonteCarloNoise()
    settings = {
        "tip_um": [float(v) for v in tip_xy], "direction": [float(v) for v in d],
        "load_axis": [float(v) for v in load], "horizon_um": horizon, "stress_amplitude_mpa": amplitude,
        "stress_ratio": ratio, "initial_crack_um": crack_len, "start_grain": int(grain0),
        "samples": int(samples), "seed": int(seed), "top_k": int(top_k),
        "noise": {f.name: getattr(noise, f.name) for f in fields(noise)},
        "path_weights": {f.name: getattr(pw, f.name) for f in fields(pw)},
        "barrier_weights": {f.name: getattr(bw, f.name) for f in fields(bw)},
        "class_factors": dict(CLASS_FACTORS if class_factors is None else class_factors),
        "decay_length_um": decay, "zigzag_tol": opts.zigzag_tol, "zigzag_step_fraction": opts.zigzag_fraction,
        "branch_tol": opts.branch_tol, "max_branches": opts.max_branches,
        "stage2_after_um": stage2_after_um, "stage2_min_schmid": stage2_min_schmid,
        "inclination_deg": opts.inclination, "boundary_plane": "perpendicular to the surface through the "
        "fitted boundary trace" if opts.inclination == 0 else f"inclined {opts.inclination:g}° about the trace",
        "unindexed": unindexed, "unindexed_gap_um": gap, "field_sigma_um": sigma_um, "site_radius_um": site_r,
        "stress_field": stress_field is not None,
        # outputs made from local factors must print the stress model's assumptions
        "stress_assumptions": getattr(stress_field, "assumptions", None),
        "systems": sorted(set(map(str, getattr(systems, "families", [])))),
    }
    fc = CrackForecast(path=res["path"], crossings=res["crossings"], barriers=res["barriers"], sites=res["sites"],
                       alternatives=res["alternatives"], field=res["field"], samples=None, settings=settings,
                       stop_reason=res["stop"])
    if int(samples) > 0:
        from .forecast_mc import monte_carlo

        fc = monte_carlo(fc, geo, planes, quats, load, schmid, tip_xy, opts, samples=int(samples), seed=int(seed),
                         noise=noise, top_k=int(top_k), amplitude=amplitude, decay=decay, bw=bw, cf=class_factors,
                         site_radius=site_r)
    return fc


def write_forecast(fc: CrackForecast, folder, gg=None, *, figures: bool = True, title: str = "Crack forecast") -> dict:
    """Write the forecast tables (CSV and JSON), pictures and a summary with the caution.

    Parameters
    ----------
    fc
        The forecast.
    folder
        Output folder (created if missing).
    gg
        The grain graph, needed for the map picture (skipped without it).
    figures
        Also draw ``forecast_map.png`` and ``forecast_terms.png``.
    title
        Title of ``summary.md``.

    Returns
    -------
    dict
        Name → path of every file written.
    """
    import json
    from pathlib import Path

    from ._files import atomic_path
    from .report import write_summary, write_table

    folder = Path(folder)
    folder.mkdir(parents=True, exist_ok=True)
    out = {}
    tables = {"path": fc.path, "alternatives": fc.alternatives, "crossings": fc.crossings,
              "barriers": fc.barriers, "sites": fc.sites}
    if fc.samples is not None:
        tables["samples"] = fc.samples
    for name, df in tables.items():
        out[f"{name}_csv"] = write_table(df, folder / f"forecast_{name}.csv")
        out[f"{name}_json"] = write_table(df, folder / f"forecast_{name}.json")
    with atomic_path(folder / "forecast_settings.json") as tmp:
        tmp.write_text(json.dumps({**fc.settings, "stop_reason": fc.stop_reason}, indent=1, default=str),
                       encoding="utf-8")
    out["settings"] = folder / "forecast_settings.json"
    if fc.field is not None:
        with atomic_path(folder / "forecast_field.npy") as tmp, open(tmp, "wb") as fh:
            np.save(fh, fc.field.astype(np.float32))
        out["field"] = folder / "forecast_field.npy"
    if figures:
        from .figures._common import save_figure
        from .figures.forecast import plot_forecast_map, plot_score_terms

        if gg is not None:
            fig = plot_forecast_map(fc, gg)
            save_figure(fig, folder / "forecast_map.png")
            out["map_png"] = folder / "forecast_map.png"
        fig = plot_score_terms(fc)
        save_figure(fig, folder / "forecast_terms.png")
        out["terms_png"] = folder / "forecast_terms.png"
    st = fc.settings
    lines = [
        f"Tip ({st['tip_um'][0]:.1f}, {st['tip_um'][1]:.1f}) µm, direction ({st['direction'][0]:.3f}, "
        f"{st['direction'][1]:.3f}), load axis ({', '.join(f'{v:.3f}' for v in st['load_axis'])}), "
        f"amplitude {st['stress_amplitude_mpa']:g} MPa, R = {st['stress_ratio']:g}, horizon {st['horizon_um']:g} µm.",
        f"Main path: {fc.length_um:.1f} µm in {len(fc.path)} segments through "
        f"{fc.path['grain'].nunique() if len(fc.path) else 0} grains; stopped at: {fc.stop_reason}.",
        f"Alternative paths: {fc.alternatives['branch'].nunique() if len(fc.alternatives) else 0}.",
        f"Boundary plane: {st['boundary_plane']} (assumed from a surface map).",
        *([f"Schmid factors: LOCAL grain means from a full-field stress solve. Local stress assumptions: "
           f"{st['stress_assumptions']}"] if st.get("stress_field") else []),
        "",
        "Strongest barriers (rank, boundary, grains, score, twist°, tilt°, |m′|, distance µm):",
    ]
    for r in fc.barriers.head(5).itertuples():
        lines.append(f"- {r.rank}: boundary {r.boundary_id} ({r.grain_a}→{r.grain_b}) score {r.score:.3f}, "
                     f"twist {r.twist_deg:.1f}, tilt {r.tilt_deg:.1f}, m′ {r.m_prime:.2f}, at {r.distance_um:.1f}")
    lines += ["", "Top localisation sites (rank, x, y µm, score MPa·µm):"]
    for r in fc.sites.head(5).itertuples():
        lines.append(f"- {r.rank}: ({r.x:.1f}, {r.y:.1f}) score {r.score:.0f}, grain {r.grain} against "
                     f"{r.blocking_grain}")
    if fc.samples is not None:
        lines += ["", f"Monte Carlo: {len(fc.samples)} samples, seed {st['seed']}; probabilities in the "
                  "barrier and site tables (p_on_path, p_present, p_top_k)."]
    out["summary"] = write_summary(folder, title, lines)
    return out

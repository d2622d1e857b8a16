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
localisation field (maximum 1). Monte Carlo: :mod:`slipnet.forecast.monte_carlo`.

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
from dataclasses import fields

import numpy as np

from slipnet._checks import check_choice, check_positive, check_vector
from slipnet.crystal.slip_systems import slip_systems
from slipnet.errors import ParameterError
from slipnet.forecast._core import _make_opts, _parse_tip, _start_grain
from slipnet.forecast._geometry import _Planes, crack_plane_angles, geometry_of
from slipnet.forecast._run import run_forecast_pass
from slipnet.forecast._window import forecast_window, schmid_rows
from slipnet.forecast.barriers import _check_decay
from slipnet.forecast.features import MODES, window_features
from slipnet.forecast.localise import barrier_features, full_field, peak_sites, predict_field
from slipnet.forecast.monte_carlo import monte_carlo
from slipnet.forecast.predictor import BARRIER_FEATURES, load_weights
from slipnet.forecast.types import CLASS_FACTORS, BarrierWeights, CrackForecast, MonteCarloNoise, PathWeights

__all__ = ["BARRIER_MODELS", "crack_plane_angles", "forecast_crack"]

#: How barriers are ranked: "fitted" (the calibrated probability of a slip drop, default) or
#: "weights" (the hand-set resistance score of :class:`BarrierWeights` alone).
BARRIER_MODELS = ("fitted", "weights")


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
    mode: str = "elastic",
    stress_field=None,
    cyclic_field=None,
    free_edges="auto",
    weights=None,
    barrier_model: str = "fitted",
    n_sites: int = 10,
    samples: int = 0,
    seed: int = 0,
    noise: MonteCarloNoise | None = None,
    top_k: int = 3,
    workers: int = 1,
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
    boundary_inclination_deg: float = 90.0,
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
        Crack tip ``(x, y)`` in µm, or a crack polyline from its mouth to its tip (tip = last point;
        if ``direction`` is None, direction = last segment); a polyline is cut into the stress solve
        as a traction-free slit. A notch root is given as a tip with the notch direction.
    direction : (2,) array_like or None
        Macroscopic growth direction (map frame, need not be unit). The crack always takes the
        sense of a trace that has a positive projection on it.
    load_axis : (3,) array_like
        Uniaxial load axis in the map frame.
    horizon
        Path length to forecast ahead of the tip, µm (> 0); sites are looked for within it.
    stress_amplitude
        Applied stress amplitude, MPa.
    stress_ratio
        R = σ_min/σ_max (< 1); used by the cyclic mode and recorded for the growth model.
    systems
        Slip-system catalogue (default ``slipnet.slip.slip_systems`` of the map's first phase).
    mode
        What the localisation field, sites and barriers are computed from (:mod:`slipnet.forecast.features`):
        ``"elastic"`` (default: a full-field elastic solve with the notch and crack cut in, about a
        second at 256²), ``"map"`` (no solve: the cheaper, weaker mode for quick sweeps; the outputs
        say so) or ``"cyclic"`` (adds a short cyclic crystal-plasticity solve; tens of seconds).
    stress_field
        A solved :class:`slipnet.stress.StressField` to use instead of the elastic solve (elastic
        and cyclic modes); its grain means also give the path's Schmid factors, and load
        misalignment is then not sampled.
    cyclic_field
        A solved :class:`slipnet.stress.CyclicField` for the cyclic mode (instead of its short solve).
    free_edges
        Map edges that are free surfaces in the solve: ``"auto"`` (edges along the load that a notch
        is cut into) or edge names.
    weights
        The fitted weights (:func:`slipnet.forecast.load_weights`: a path, a ``Weights`` or None
        for the shipped file).
    barrier_model
        ``"fitted"`` (rank barriers by the calibrated probability that slip drops across them) or
        ``"weights"`` (by the hand-set resistance score alone), :data:`BARRIER_MODELS`.
    n_sites
        Localisation sites (field peaks) to report.
    samples, seed, noise, top_k
        Monte Carlo samples (0: none), their seed, perturbation sizes and the k of "top k".
    workers
        Threads computing the Monte Carlo samples (≥ 1); the numbers are the same for any value.
    path_weights, barrier_weights, class_factors
        Path-choice and resistance-score weights (:class:`PathWeights`, :class:`BarrierWeights`,
        :data:`CLASS_FACTORS`).
    decay_length_um
        Barrier relevance decay length, µm; default the horizon (a barrier at the horizon
        counts e⁻¹ ≈ 0.37 of one at the tip) in the resistance score.
    zigzag_tol, zigzag_step_fraction
        Relative tolerance on the effective Schmid factor under which two planes alternate, and
        the leg length as a fraction of the grain's equivalent circle diameter (≥ 2 steps).
    branch_tol, max_branches
        Alternative outgoing planes within ``branch_tol`` of the best choice score start an
        alternative path, at most ``max_branches`` in all (breadth first).
    stage2_after_um, stage2_min_schmid
        Switch to stage II past this path length, or in a grain whose best effective Schmid
        factor is below this threshold (None: never).
    boundary_inclination_deg
        Assumed angle between each boundary plane and the surface, about its trace, degrees in
        [1, 179] (90: perpendicular to the surface, the default; as in :mod:`slipnet.slip`).
    unindexed, unindexed_gap_um
        ``"stop"``: the path ends where it meets a run of unindexed points longer than
        ``unindexed_gap_um`` (default 5 steps: isolated bad points and small clusters are walked
        through, a notch or a large unindexed region stops it); ``"cross"``: walk through any
        unindexed run to the next grain (the crossing is recorded where that grain begins).
    field_sigma_um, site_radius_um
        Accepted for compatibility; the fitted field needs no blur and its sites are looked for
        within the horizon (recorded in the settings, otherwise unused).

    Returns
    -------
    CrackForecast
        ``field`` is the probability that each metal point is among the top 10 % of accumulated
        slip (as the cyclic reference computes it) within the horizon, computed on the window of points
        within the horizon (plus the barrier drop radius) of the tip and 0 outside it (so a repeated
        forecast costs the same on any map size); ``sites`` are its peaks with
        ``site_probability``; ``barriers`` carry ``barrier_score`` (the fitted probability of a slip
        drop across the boundary, or the resistance score with ``barrier_model="weights"``) and
        ``resistance_score`` (the hand-set score).

    Raises
    ------
    ParameterError
        Tip outside the map or on an unindexed point, zero/negative horizon, zero vectors,
        stage II requested with a load along the surface normal (no in-plane component), an
        unknown mode.
    InputFileError
        An unreadable weights file.

    Notes
    -----
    A tip lying on a boundary starts in the grain half a step ahead along ``direction``. A load
    along the surface normal is valid for stage I (Schmid factors are defined) but has no stage II
    direction: every in-plane direction is normal to it, so stage II options are refused.
    Cost: the point features on the window of the horizon (O(window points): a few distance
    transforms and array passes; the holes of the map once per graph), the elastic solve of the
    whole map (elastic and cyclic modes; give ``stress_field`` to reuse one), one march per segment
    (numba) and O(grains in the window × systems) for the crystal data, so a repeated map-mode
    forecast costs about the same on a 250² and a 2000² map (``benchmarks/bench_forecast.py``,
    ``benchmarks/bench_scaling.py``). A map-mode Monte Carlo sample costs roughly 0.3–0.4 × a
    forecast on one core (``benchmarks/bench_monte_carlo.py``; the machine is shared, times vary).
    The weights and how well they do are in ``slipnet/forecast/weights.json`` and
    ``slipnet/validation/standing.json``: they are fitted against slipnet's own cyclic
    crystal-plasticity model, a consistency test, not a validation against experiments.
    """
    geo = geometry_of(gg)
    horizon = check_positive(horizon, "horizon")
    tip_xy, d, crack_len = _parse_tip(geo, tip, direction)
    tip_arr = np.asarray(tip, dtype=float)
    crack = tip_arr if tip_arr.ndim == 2 else None
    load = check_vector(load_axis, "load_axis", 3)
    amplitude = check_positive(stress_amplitude, "stress_amplitude")
    ratio = float(stress_ratio)
    if not (math.isfinite(ratio) and ratio < 1.0):
        raise ParameterError(f"stress_ratio should be a finite number < 1; got {stress_ratio!r}")
    mode = check_choice(mode, "mode", MODES)
    barrier_model = check_choice(barrier_model, "barrier_model", BARRIER_MODELS)
    if mode == "map" and (stress_field is not None or cyclic_field is not None):
        raise ParameterError("mode='map' uses no stress solve; give mode='elastic' (or 'cyclic') with stress_field, "
                             "or leave stress_field and cyclic_field out")
    if isinstance(workers, bool) or not isinstance(workers, int | np.integer) or workers < 1:
        raise ParameterError(f"workers should be an integer >= 1; got {workers!r}")
    n_workers = int(workers)
    if isinstance(n_sites, bool) or not isinstance(n_sites, int | np.integer) or n_sites < 0:
        raise ParameterError(f"n_sites should be an integer >= 0; got {n_sites!r}")
    pw = path_weights or PathWeights()
    bw = barrier_weights or BarrierWeights()
    for wobj in (pw, bw):
        if any(getattr(wobj, f.name) < 0 for f in fields(wobj)):
            raise ParameterError(f"score weights should be >= 0; got {wobj}")
    decay = horizon if decay_length_um is None else _check_decay(decay_length_um)
    sigma_um = 2.0 * geo.step if field_sigma_um is None else check_positive(field_sigma_um, "field_sigma_um")
    site_r = None if site_radius_um is None else check_positive(site_radius_um, "site_radius_um")
    gap = 5.0 * geo.step if unindexed_gap_um is None else check_positive(
        unindexed_gap_um, "unindexed_gap_um", allow_zero=True)
    opts = _make_opts(horizon, d, load, stage2_after_um=stage2_after_um, stage2_min_schmid=stage2_min_schmid,
                      zigzag_tol=zigzag_tol, zigzag_step_fraction=zigzag_step_fraction, branch_tol=branch_tol,
                      max_branches=max_branches, boundary_inclination_deg=boundary_inclination_deg, unindexed=unindexed,
                      unindexed_gap_um=gap, path_weights=pw)
    if opts.d_stage2 is None and (stage2_after_um is not None or stage2_min_schmid is not None):
        raise ParameterError(
            f"load_axis {tuple(np.round(load, 3))} is (nearly) along the surface normal, so stage II "
            "(growth normal to the in-plane load) has no direction; give stage2_after_um=None and "
            "stage2_min_schmid=None, or a load axis with an in-plane component"
        )
    grain0 = _start_grain(geo, tip_xy, d)
    if systems is None:
        systems = slip_systems(geo.structure)
    planes = _Planes(systems)
    quats = np.asarray(gg.mean_quats, dtype=float)
    wts = load_weights(weights)
    # everything the forecast reports lies within the horizon of the tip (barrier features reach
    # drop_radius_um beyond a crossing): the features and the field are computed on that window only
    win = forecast_window(gg, geo, tip_xy, horizon + wts.drop_radius_um)
    inputs = window_features(gg, geo, win, tip_xy, d, load, mode=mode, stress_amplitude=amplitude, crack=crack,
                             stress_field=stress_field, cyclic_field=cyclic_field, systems=systems,
                             free_edges=free_edges, stress_ratio=ratio)
    schmid = None
    if inputs.stress_field is not None:
        schmid = schmid_rows(inputs.stress_field, gg, geo, systems)
    res = run_forecast_pass(geo, planes, quats, load, schmid, tip_xy, grain0, opts, amplitude=amplitude, decay=decay,
                            bw=bw, cf=class_factors, want_field=False, sigma_um=sigma_um, site_radius=site_r,
                            rows=win.reach)
    cry = res["crystal"]
    fld_w = predict_field(inputs, wts)
    sites = peak_sites(geo, cry, planes, inputs, fld_w, wts, tip_xy, horizon, amplitude, k=int(n_sites))
    barriers = _fitted_barriers(res["barriers"], res["crossings"], inputs, fld_w, geo, cry, wts, horizon, mode,
                                barrier_model)
    fld = full_field(fld_w, inputs, (geo.ny, geo.nx))
    noise = noise or MonteCarloNoise()
    settings = {
        "tip_um": [float(v) for v in tip_xy], "direction": [float(v) for v in d],
        "load_axis": [float(v) for v in load], "horizon_um": horizon, "stress_amplitude_mpa": amplitude,
        "stress_ratio": ratio, "initial_crack_um": crack_len, "start_grain": int(grain0),
        "mode": mode, "mode_note": _MODE_NOTES[mode], "barrier_model": barrier_model, "n_sites": int(n_sites),
        "free_edges": list(inputs.free_edges), "crack_cut_in": crack is not None and mode != "map",
        "feature_notes": list(inputs.notes), "weights_source": wts.source,
        "weights_provenance": {k: wts.provenance.get(k) for k in ("fitted_on", "slipnet_version", "training_seeds",
                                                                   "reference") if k in wts.provenance},
        "hit_radius_um": wts.hit_radius_um, "site_separation_um": wts.site_separation_um,
        "drop_radius_um": wts.drop_radius_um, "drop_threshold": wts.drop_threshold,
        "samples": int(samples), "seed": int(seed), "top_k": int(top_k),
        "noise": {f.name: getattr(noise, f.name) for f in fields(noise)},
        "path_weights": {f.name: getattr(pw, f.name) for f in fields(pw)},
        "barrier_weights": {f.name: getattr(bw, f.name) for f in fields(bw)},
        "class_factors": dict(CLASS_FACTORS if class_factors is None else class_factors),
        "decay_length_um": decay, "zigzag_tol": opts.zigzag_tol, "zigzag_step_fraction": opts.zigzag_fraction,
        "branch_tol": opts.branch_tol, "max_branches": opts.max_branches,
        "stage2_after_um": stage2_after_um, "stage2_min_schmid": stage2_min_schmid,
        "boundary_inclination_deg": opts.inclination, "boundary_plane": "perpendicular to the surface through the "
        "fitted boundary trace" if opts.inclination == 90 else f"inclined {opts.inclination:g}° to the surface "
        "about the fitted boundary trace",
        "unindexed": unindexed, "unindexed_gap_um": gap, "field_sigma_um": sigma_um, "site_radius_um": site_r,
        "field_grid": {"origin_um": [float(geo.ox), float(geo.oy)], "step_um": geo.step, "row_spacing_um": geo.rs,
                       "hex": bool(geo.hexgrid), "shape": [int(geo.ny), int(geo.nx)]},
        "stress_field": inputs.stress_field is not None,
        "stress_field_given": stress_field is not None,
        # outputs made from local factors must print the stress model's assumptions
        "stress_assumptions": getattr(inputs.stress_field, "assumptions", None),
        "systems": sorted(set(map(str, getattr(systems, "families", [])))),
    }
    fc = CrackForecast(path=res["path"], crossings=res["crossings"], barriers=barriers, sites=sites,
                       alternatives=res["alternatives"], field=fld, samples=None, settings=settings,
                       stop_reason=res["stop"])
    if int(samples) > 0:
        fc = monte_carlo(fc, geo, planes, quats, load, schmid, tip_xy, opts, samples=int(samples), seed=int(seed),
                         noise=noise, top_k=int(top_k), amplitude=amplitude, decay=decay, bw=bw, cf=class_factors,
                         site_radius=site_r, gg=gg, inputs=inputs, weights=wts, crack=crack, systems=systems,
                         stress_given=stress_field is not None, cyclic_field=cyclic_field, free_edges=free_edges,
                         ratio=ratio, barrier_model=barrier_model, workers=n_workers)
    return fc


_MODE_NOTES = {
    "map": "map-only mode: no stress solve (nominal Schmid factors, elastic anisotropy by each grain's modulus "
           "along the load, notch and crack-tip geometry); the cheaper, weaker forecast mode",
    "elastic": "elastic mode: a full-field anisotropic elastic solve with the notch and crack cut in",
    "cyclic": "cyclic mode: the elastic solve plus a short cyclic crystal-plasticity solve",
}


def _fitted_barriers(barriers, crossings, inputs, fld, geo, cry, wts, horizon, mode, barrier_model):
    """The barrier table with the hand-set ``resistance_score`` and, when fitted, the calibrated probability."""
    b = barriers.copy()
    b["resistance_score"] = b["barrier_score"].to_numpy(float) if len(b) else np.zeros(0)
    x = barrier_features(b, crossings, inputs, fld, geo, cry, wts, horizon)
    prob = wts.model(mode, "barriers").probability(x) if len(b) else np.zeros(0)
    b["drop_probability"] = prob
    for k, name in enumerate(BARRIER_FEATURES):
        b[f"fit_{name}"] = x[:, k]
    if barrier_model == "fitted" and len(b):
        b["barrier_score"] = prob
        b = b.sort_values(["barrier_score", "distance_um"], ascending=[False, True], kind="stable")
        b = b.reset_index(drop=True)
        b["rank"] = np.arange(1, len(b) + 1)
    return b

"""The computing steps of a study, each a plain function of earlier results and its options.

Each function returns its result and appends what the user should be told to ``warn`` (a
callable taking ``(step, message)``); :mod:`slipnet.study.run` chains them, caches them and
writes the report.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from dataclasses import dataclass, replace

import numpy as np
import pandas as pd

from slipnet.compare.comparison import Comparison, compare_forecast
from slipnet.compare.registration import fit_transform
from slipnet.errors import ParameterError
from slipnet.forecast.crack import forecast_crack
from slipnet.forecast.types import CrackForecast
from slipnet.grains.build import build_grain_graph
from slipnet.growth.calibration import CalibrationResult, calibrate
from slipnet.growth.model import GrowthResult, simulate_growth
from slipnet.growth.zones import threshold_amplitudes
from slipnet.io.maps import read_map
from slipnet.io.strain import read_strain
from slipnet.io.tables import read_control_points, read_growth_record, read_measured_path
from slipnet.maps.grain_graph import GrainGraph
from slipnet.maps.notch import NotchShape
from slipnet.maps.orientation_map import OrientationMap
from slipnet.notch.candidates import candidate_positions
from slipnet.notch.ranking import finish_plan
from slipnet.notch.settings import DEFAULT_WEIGHTS, Candidate, NotchPlan, PlanSettings
from slipnet.notch.sweep import run_sweep
from slipnet.slip.activity import SlipActivity, slip_activity
from slipnet.stress.elastic import StressField, solve_elastic
from slipnet.study.options import StudyOptions

__all__ = [
    "Outcome", "arrest_probabilities", "compare_warnings", "forecast_warnings", "step_compare", "step_forecast",
    "step_grains", "step_growth", "step_map", "step_notch", "step_slip", "step_stress",
]

Warn = Callable[[str, str], None]


@dataclass(frozen=True, eq=False)
class Outcome:
    """What one candidate notch would give: its plan row, the forecast and growth from its root."""

    rank: int
    row: pd.Series
    forecast: CrackForecast
    growth: GrowthResult
    arrest: pd.DataFrame


def step_map(opts: StudyOptions, warn: Warn) -> OrientationMap:
    """Read the map once, with the frame rotation and quality property chosen."""
    m = opts.map
    omap = read_map(m.path, frame_rotation=m.frame_rotation, quality_prop=m.quality_prop, structures=m.structures,
                    step_um=m.step_um)
    return omap


def map_warnings(omap: OrientationMap, warn: Warn) -> None:
    """What the reader decided or had to guess (``meta["decisions"]``, kept in the map), told to the user."""
    meta = omap.meta or {}
    for decision in meta.get("decisions", []) or []:
        warn("map", str(decision))
    frac = 1.0 - float(np.mean(omap.indexed))
    if frac > 0.2:
        warn("map", f"{100 * frac:.0f} % of the points are unindexed: grains and forecasts near them are uncertain")


def step_grains(omap: OrientationMap, opts: StudyOptions, warn: Warn) -> GrainGraph:
    """Grains and boundaries with the chosen clean-up."""
    g = opts.grains
    return build_grain_graph(omap, threshold_deg=g.threshold_deg, subgrain_deg=g.subgrain_deg,
                             min_quality=g.min_quality, fill_unindexed=g.fill_unindexed,
                             min_grain_size=g.min_grain_size, min_grain_area_um2=g.min_grain_area_um2)


def step_slip(gg: GrainGraph, opts: StudyOptions, warn: Warn) -> SlipActivity:
    """Schmid factors, slip traces, Taylor factors and slip transmission (uniform uniaxial load)."""
    return slip_activity(gg, opts.load.axis, boundary_inclination_deg=opts.forecast.boundary_inclination_deg)


def step_stress(omap: OrientationMap, opts: StudyOptions, warn: Warn) -> StressField:
    """The full-field elastic stress at the study's amplitude."""
    field = solve_elastic(omap, opts.load.axis, stress=opts.load.stress_amplitude_mpa, tol=opts.stress.tol,
                          unindexed=opts.stress.unindexed)
    return field


def stress_warnings(field: StressField, warn: Warn) -> None:
    """A solve that stopped above its tolerance."""
    if not field.residual <= field.tol * 1.0000001:
        warn("stress", f"the elastic solve stopped at residual {field.residual:.2e} above its tolerance "
             f"{field.tol:g}: local stresses are approximate")


def step_notch(gg: GrainGraph, opts: StudyOptions, warn: Warn, *, progress: bool = False) -> NotchPlan:
    """Candidates along every chosen edge, evaluated and ranked together."""
    n = opts.notch
    s = PlanSettings(
        load_axis=tuple(float(v) for v in opts.load.axis), stress_amplitude=opts.load.stress_amplitude_mpa,
        stress_ratio=opts.load.stress_ratio, notch=NotchShape(n.depth_um, n.root_radius_um, n.opening_deg),
        window_um=n.window_um, crack_sizes_um=tuple(n.crack_sizes_um), strong_barrier=n.strong_barrier,
        weights=dict(DEFAULT_WEIGHTS if n.weights is None else n.weights), target=n.target, samples=n.samples,
        orientation_noise_deg=n.orientation_noise_deg, load_misalignment_deg=n.load_misalignment_deg,
        position_error_um=n.position_error_um, seed=n.seed, growth=opts.growth.model_constants(),
        concentration=n.concentration)
    if n.method not in ("weighted", "pareto"):
        raise ParameterError(f"notch method should be 'weighted' or 'pareto'; got {n.method!r}")
    cands: list[Candidate] = []
    sides = []
    for edge in n.edges:
        found = candidate_positions(gg, edge if isinstance(edge, str) else np.asarray(edge, float), n.spacing_um,
                                    s.notch)
        for c in found:
            cands.append(Candidate(len(cands), c.edge_x, c.edge_y, c.normal_x, c.normal_y, c.root_x, c.root_y))
            sides.append(edge if isinstance(edge, str) else "polyline")
    # the study's own bar counts this step: the sweep's bar (another style) stays off
    rows = run_sweep(gg, cands, s, scheduler=n.scheduler, workers=n.workers, progress=False)
    for r, side in zip(rows, sides, strict=True):
        r["edge"] = side
    plan = finish_plan(rows, s, method=n.method, top_k=n.top_k)
    return plan


def notch_warnings(plan: NotchPlan, warn: Warn) -> None:
    """The plan's own notes (chart range, mode I) and candidates that could not be evaluated."""
    for note in plan.notes:
        warn("notch", note)
    t = plan.table
    if "valid" in t and (~t["valid"].astype(bool)).any():
        bad = t[~t["valid"].astype(bool)]
        reasons = sorted({str(r) for r in bad.get("reason", pd.Series(["?"] * len(bad)))})
        warn("notch", f"{len(bad)} of {len(t)} candidate notches could not be evaluated ({'; '.join(reasons)})")


def forecast_candidates(plan: NotchPlan, k: int) -> pd.DataFrame:
    """The best ``k`` evaluated candidates, best first."""
    t = plan.table
    ok = t["valid"].astype(bool) if "valid" in t else pd.Series(True, index=t.index)
    ok &= np.isfinite(t["plan_score"].to_numpy(dtype=float))
    return t[ok].sort_values("rank").head(int(k))


def step_forecast(gg: GrainGraph, field: StressField, slip: SlipActivity, row: pd.Series, opts: StudyOptions,
                  warn: Warn) -> CrackForecast:
    """The forecast from one candidate's root along its inward normal (the notch is not cut into the map)."""
    f = opts.forecast
    return forecast_crack(gg, (float(row["root_x_um"]), float(row["root_y_um"])),
                          (float(row["normal_x"]), float(row["normal_y"])), opts.load.axis, f.horizon_um,
                          stress_amplitude=opts.load.stress_amplitude_mpa, stress_ratio=opts.load.stress_ratio,
                          systems=slip.systems, stress_field=field, samples=f.samples, seed=f.seed,
                          boundary_inclination_deg=f.boundary_inclination_deg)


def step_growth(fc: CrackForecast, gg: GrainGraph, field: StressField, slip: SlipActivity, opts: StudyOptions,
                warn: Warn) -> GrowthResult:
    """Growth along a forecast path, with Monte Carlo bands following the forecast's samples."""
    g = opts.growth
    if len(fc.path) == 0:
        raise ParameterError("growth: the forecast from this notch has no path to grow along (the root may face "
                             "unindexed points); choose another edge or a shallower notch")
    return simulate_growth(fc, opts.load.stress_amplitude_mpa, friction_stress=g.friction_stress,
                           coefficient=g.coefficient, exponent=g.exponent, barrier_stress=g.barrier_stress,
                           initial_length=g.initial_length, final_length=g.final_length, n_points=g.n_points,
                           samples=None, strength_scatter=g.strength_scatter, stress_field=field, gg=gg,
                           systems=slip.systems)


def arrest_probabilities(result: GrowthResult, samples: int, scatter: float, seed: int) -> pd.DataFrame:
    """Per barrier on the path: where the crack stops in the model and in Monte Carlo strength draws.

    The draws are those of the growth bands (log-normal barrier strengths, σ_ln = ``scatter``,
    ``seed``): a crack stops at the first barrier whose threshold amplitude exceeds the applied one.

    Returns
    -------
    DataFrame
        ``barrier``, ``boundary_id``, ``position_um``, ``threshold_amplitude_mpa``, ``arrest_here``
        (the central model), ``p_arrest_here`` and ``p_arrest_by_here`` (share of draws; 0–1).
    """
    path = result.path
    k = path.n_barriers
    if k == 0:
        return pd.DataFrame(columns=["barrier", "boundary_id", "position_um", "threshold_amplitude_mpa",
                                     "arrest_here", "p_arrest_here", "p_arrest_by_here"])
    s = result.stress_amplitude
    reach = path.barrier_positions_um <= float(result.profile["crack_length_um"].iloc[-1]) + 1e-9
    th = threshold_amplitudes(path, result.params)
    stop = np.flatnonzero((th > s) & reach)
    first = int(stop[0]) if stop.size else -1
    p_here = np.zeros(k)
    n = int(samples)
    if n > 0:
        rng = np.random.default_rng(seed)
        draws = rng.lognormal(0.0, scatter, size=(n, k))
        for i in range(n):  # one vectorised threshold evaluation per draw
            thi = threshold_amplitudes(replace(path, strength_scale=path.strength_scale * draws[i]), result.params)
            hit = np.flatnonzero((thi > s) & reach)
            if hit.size:
                p_here[hit[0]] += 1.0 / n
    ids = np.asarray(path.boundary_ids) if path.boundary_ids is not None else np.full(k, -1)
    return pd.DataFrame({
        "barrier": np.arange(k), "boundary_id": ids.astype(np.int64), "position_um": path.barrier_positions_um,
        "threshold_amplitude_mpa": th, "arrest_here": np.arange(k) == first,
        "p_arrest_here": p_here if n > 0 else (np.arange(k) == first).astype(float),
        "p_arrest_by_here": np.cumsum(p_here) if n > 0 else (np.arange(k) >= first).astype(float) * (first >= 0),
    })


def step_compare(gg: GrainGraph, outcome: Outcome, opts: StudyOptions,
                 warn: Warn) -> tuple[Comparison, CalibrationResult | None]:
    """Measured strain (and crack path, growth record) against the forecast of the notch that was cut."""
    c = opts.compare
    step_um = gg.omap.step
    notes: list[str] = []  # the tables' reader notes; the strain file's come with the comparison
    series = read_strain(c.strain, **(c.strain_reader or {}))
    transform = None
    if c.control_points:
        src, dst = read_control_points(c.control_points, **(c.points_reader or {}), notes=notes)
        transform = fit_transform(src, dst, c.transform)
    measured = read_measured_path(c.crack_path) if c.crack_path else None
    record = (read_growth_record(c.growth_record, **(c.record_reader or {}), notes=notes)
              if c.growth_record else None)
    comp = compare_forecast(
        series, forecast=outcome.forecast, gg=gg, transform=transform, step=c.step, window=c.window,
        peak_distance_um=c.peak_distance_um or 4.0 * step_um, site_tol_um=c.site_tol_um or 3.0 * step_um,
        path_tol_um=c.path_tol_um or 3.0 * step_um, measured_path=measured, load_axis=opts.load.axis,
        growth_record=record, growth=outcome.growth, dip_prominence=c.dip_prominence,
        dip_tol_um=c.dip_tol_um or 3.0 * step_um, max_sites=12)
    comp.warnings.extend(f"measured tables: {n}" for n in notes)  # kept with the cached comparison
    if c.synthetic:
        comp.settings["synthetic"] = True
    cal = None
    if c.calibrate:
        if record is None:
            raise ParameterError("compare: calibrate needs a growth record (--growth-record FILE)")
        cal = calibrate(record["crack_length_um"].to_numpy(float), record["cycles"].to_numpy(float),
                        outcome.growth.path, opts.load.stress_amplitude_mpa)
    return comp, cal


def compare_warnings(opts: StudyOptions, cal: CalibrationResult | None, warn: Warn,
                     comp: Comparison | None = None) -> None:
    """Frames taken as equal, the comparison's own warnings, a calibration that did not converge."""
    for w in (comp.warnings if comp is not None else ()):
        warn("compare", str(w))
    if not opts.compare.control_points:
        warn("compare", "no control points given: the strain map's frame is taken as equal to the orientation "
             "map's frame (give --control-points to register them)")
    if cal is not None and not cal.success:
        warn("compare", f"the growth calibration did not converge ({cal.message}): the fitted constants are "
             "not reliable; the forecast keeps the model defaults")


def forecast_warnings(name: str, fc: CrackForecast, window_um: float, warn: Warn, *,
                      reach: str = "observation window") -> None:
    """A forecast that leaves the map (or stops) before ``window_um``, called ``reach`` in the message.

    The study measures against the plan's observation window; the ``forecast`` command against
    its ``--horizon``.
    """
    if fc.length_um < window_um and fc.stop_reason in ("map_edge", "unindexed", "blocked"):
        where = {"map_edge": "reaches the map edge", "unindexed": "runs into unindexed points",
                 "blocked": "is blocked (it would have to run along a boundary)"}[fc.stop_reason]
        warn(f"forecast {name}".strip(), f"the forecast path {where} after {fc.length_um:.0f} µm, short of the "
             f"{window_um:g} µm {reach}: the map does not show what the crack meets beyond")


def finite_or_none(v) -> float | None:
    """``float(v)`` when finite, else None."""
    try:
        f = float(v)
    except (TypeError, ValueError):
        return None
    return f if math.isfinite(f) else None

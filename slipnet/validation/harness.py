"""The validation harness: virtual experiments, the reference, the forecast and its baselines, scored alike.

For every held-out seed: draw and build the case (:mod:`slipnet.validation.cases`), solve or read the
reference (:mod:`slipnet.validation.reference`), run the forecast in each requested mode and the
baselines (:mod:`slipnet.validation.baselines`), and score them all with the same functions
(:mod:`slipnet.validation.scoring`). Cases run as Dask tasks on any scheduler (results come back in
seed order, so the table is the same on every scheduler).

The reference is slipnet's own cyclic crystal-plasticity model: the scores measure the agreement of
a fast model with a slow one (a consistency test), not a validation against experiments.
"""

from __future__ import annotations

import time
from dataclasses import dataclass

import numpy as np
import pandas as pd

from slipnet.errors import ParameterError
from slipnet.forecast.features import boundary_drops, field_peaks
from slipnet.validation.baselines import BASELINES, baseline_fields
from slipnet.validation.cases import HELD_OUT_SEEDS, CaseRanges, build_case, draw_case
from slipnet.validation.fit import HarnessSettings
from slipnet.validation.reference import REFERENCE_STATEMENT, ReferenceSettings, run_reference
from slipnet.validation.scoring import (
    field_auc,
    grain_spearman,
    hot_mask,
    path_agreement,
    ridge_path,
    scoring_region,
    site_hits,
    spearman,
)
from slipnet.validation.tasks import run_tasks

__all__ = ["METRICS", "SCORE_COLUMNS", "ValidationResult", "run_tasks", "run_validation", "score_case",
           "summarise"]

#: The per-specimen score columns (one row per specimen and predictor).
SCORE_COLUMNS = ("seed", "predictor", "auc_slip", "auc_fip", "grain_rho", "site_hit_rate", "barrier_rho",
                 "n_barriers", "path_share", "path_mean_distance_um", "seconds")
#: Metrics summarised as mean ± sd over specimens.
METRICS = ("auc_slip", "auc_fip", "grain_rho", "site_hit_rate", "barrier_rho", "path_share",
           "path_mean_distance_um", "seconds")


@dataclass(frozen=True, eq=False)
class ValidationResult:
    """Scores of every predictor on every specimen, their summary and the calibration data.

    Attributes
    ----------
    scores : DataFrame
        :data:`SCORE_COLUMNS`, one row per specimen and predictor.
    summary : DataFrame
        Per predictor and metric: ``mean``, ``sd``, ``n``.
    calibration : DataFrame
        One row per forecast probability: ``seed``, ``mode``, ``kind`` (``site``, ``barrier``,
        ``point``), ``source`` (``nominal`` or ``monte_carlo``), ``probability``, ``event`` (0/1).
    cases : DataFrame
        The drawn cases (one row per seed) and the reference's solve time.
    settings : dict
        Seeds, modes, ranges, reference and harness settings.
    statement : str
        That the reference is slipnet's own model.
    """

    scores: pd.DataFrame
    summary: pd.DataFrame
    calibration: pd.DataFrame
    cases: pd.DataFrame
    settings: dict
    statement: str = REFERENCE_STATEMENT


# ---------------------------------------------------------------------------------------------- one case
def _score_field(name, seed, fld, ref, region, hot, labels, omap, hs, step, peaks=None, barrier_scores=None,
                 barrier_drops=None, path=None, ref_path=None, seconds=0.0) -> dict:
    row = {"seed": seed, "predictor": name, "seconds": float(seconds)}
    row["auc_slip"] = field_auc(fld, ref.accumulated_slip, region, hs.hot_fraction, name)
    row["auc_fip"] = field_auc(fld, ref.fip, region, hs.hot_fraction, name)
    row["grain_rho"] = grain_spearman(fld, ref.accumulated_slip, labels, region)
    if peaks is None:
        peaks = field_peaks(fld, region, omap, hs.top_k, hs.site_separation_steps * step)
    hits = site_hits(np.asarray(peaks)[: hs.top_k], hot, omap, hs.hit_radius_steps * step)
    row["site_hit_rate"] = float(hits.mean()) if hits.size else float("nan")
    if barrier_drops is not None and barrier_scores is not None:
        ok = np.isfinite(barrier_drops) & np.isfinite(barrier_scores)
        row["barrier_rho"] = spearman(np.asarray(barrier_scores)[ok], np.asarray(barrier_drops)[ok])
        row["n_barriers"] = int(ok.sum())
    else:
        row["barrier_rho"], row["n_barriers"] = float("nan"), 0
    pa = path_agreement(path, ref_path, hs.path_tol_steps * step) if path is not None else \
        {"mean_distance_um": float("nan"), "share_within_tol": float("nan")}
    row["path_share"] = pa["share_within_tol"]
    row["path_mean_distance_um"] = pa["mean_distance_um"]
    return row


def score_case(seed: int, modes=("elastic", "map"), ranges: CaseRanges | None = None,
               reference: ReferenceSettings | None = None, settings: HarnessSettings | None = None, cache_dir=None,
               weights=None, samples: int = 0, mc_seed: int = 0, baselines: bool = True) -> dict:
    """Score the forecast (each of ``modes``) and the baselines on the case of ``seed``.

    Returns a dict with ``rows`` (score rows, :data:`SCORE_COLUMNS`), ``calibration`` (rows of
    probability and event) and ``case`` (the drawn case with the reference's solve time).
    """
    from slipnet.forecast import forecast_crack, load_weights

    r = ranges or CaseRanges()
    hs = settings or HarnessSettings()
    wts = load_weights(weights)
    built = build_case(draw_case(int(seed), r))
    ref = run_reference(built, reference, cache_dir=cache_dir)
    c = built.case
    omap = built.specimen.omap
    step = float(c.step_um)
    labels = np.asarray(built.gg.labels, np.int64)
    solid = (labels >= 0) & ~ref.compliant
    region = scoring_region(omap, solid, built.tip, c.horizon_um)
    hot = hot_mask(ref.accumulated_slip, region, hs.hot_fraction)
    ref_path = ridge_path(ref.accumulated_slip, region, omap, built.tip, built.direction, c.horizon_um)
    rows, calib = [], []
    rng = np.random.default_rng([int(seed), 11])
    pts = np.flatnonzero(region.ravel())
    pts = np.sort(rng.choice(pts, size=min(1500, pts.size), replace=False))
    main_barriers = None
    for mode in modes:
        t0 = time.perf_counter()
        fc = forecast_crack(built.gg, built.crack_um, None, c.load_axis, c.horizon_um,
                            stress_amplitude=c.stress_amplitude_mpa, stress_ratio=c.ratio, mode=mode, weights=wts,
                            samples=int(samples) if mode == modes[0] else 0, seed=int(mc_seed))
        secs = time.perf_counter() - t0
        b = fc.barriers[fc.barriers["on_path"].astype(bool)] if len(fc.barriers) else fc.barriers
        drops_all = boundary_drops(ref.accumulated_slip, labels, solid, omap, fc.barriers["x_um"].to_numpy(),
                                   fc.barriers["y_um"].to_numpy(), fc.barriers["grain_a"].to_numpy(),
                                   fc.barriers["grain_b"].to_numpy(), wts.drop_radius_um)
        on = fc.barriers["on_path"].to_numpy(bool) if len(fc.barriers) else np.zeros(0, bool)
        if mode == modes[0]:
            main_barriers = (b, drops_all[on])
        sites = fc.sites[["x_um", "y_um"]].to_numpy(float)
        path = fc.path if len(fc.path) else None
        rows.append(_score_field(f"forecast:{mode}", seed, fc.field, ref, region, hot, labels, omap, hs, step,
                                 peaks=sites, barrier_scores=b["barrier_score"].to_numpy(float) if len(b) else None,
                                 barrier_drops=drops_all[on], path=path, ref_path=ref_path, seconds=secs))
        site_ev = site_hits(sites, hot, omap, wts.hit_radius_um).astype(int)
        ok_b = np.isfinite(drops_all)
        bar_ev = (drops_all[ok_b] >= wts.drop_threshold).astype(int)
        for kind, p, ev in (("site", fc.sites["site_probability"].to_numpy(float), site_ev),
                            ("barrier", fc.barriers["drop_probability"].to_numpy(float)[ok_b], bar_ev),
                            ("point", fc.field.ravel()[pts], hot.ravel()[pts].astype(int))):
            calib += [{"seed": seed, "mode": mode, "kind": kind, "source": "nominal", "probability": float(pp),
                       "event": int(e)} for pp, e in zip(p, ev, strict=True)]
        if "p_hit" in fc.sites.columns:
            calib += [{"seed": seed, "mode": mode, "kind": "site", "source": "monte_carlo", "probability": float(pp),
                       "event": int(e)} for pp, e in zip(fc.sites["p_hit"], site_ev, strict=True)]
            calib += [{"seed": seed, "mode": mode, "kind": "barrier", "source": "monte_carlo", "probability": float(pp),
                       "event": int(e)} for pp, e in zip(fc.barriers["p_drop"].to_numpy(float)[ok_b], bar_ev,
                                                         strict=True)]
    if baselines:
        t0 = time.perf_counter()
        bl = baseline_fields(built.gg, built.tip, c.load_axis, stress_amplitude=c.stress_amplitude_mpa)
        secs = (time.perf_counter() - t0) / len(BASELINES)
        for name in BASELINES:
            fld = bl[name]
            bs, bd = None, None
            if main_barriers is not None and len(main_barriers[0]):
                b = main_barriers[0]
                bs = boundary_drops(fld, labels, solid, omap, b["x_um"].to_numpy(), b["y_um"].to_numpy(),
                                    b["grain_a"].to_numpy(), b["grain_b"].to_numpy(), wts.drop_radius_um)
                bd = main_barriers[1]
            path = ridge_path(fld, region, omap, built.tip, built.direction, c.horizon_um)
            rows.append(_score_field(f"baseline:{name}", seed, fld, ref, region, hot, labels, omap, hs, step,
                                     barrier_scores=bs, barrier_drops=bd, path=path if len(path) > 1 else None,
                                     ref_path=ref_path, seconds=secs))
    case = {**c.as_dict(), "reference_seconds": ref.seconds, "reference_key": ref.key,
            "reference_path_points": len(ref_path)}
    case["crack_um"] = built.crack_um.tolist()
    return {"rows": rows, "calibration": calib, "case": case}


# ---------------------------------------------------------------------------------------------- summary
def summarise(scores: pd.DataFrame) -> pd.DataFrame:
    """Mean, standard deviation and count over specimens of every metric, per predictor."""
    out = []
    for name, grp in scores.groupby("predictor", sort=False):
        for m in METRICS:
            v = grp[m].to_numpy(float)
            v = v[np.isfinite(v)]
            out.append({"predictor": name, "metric": m, "mean": float(v.mean()) if v.size else float("nan"),
                        "sd": float(v.std(ddof=1)) if v.size > 1 else float("nan"), "n": int(v.size)})
    return pd.DataFrame(out, columns=["predictor", "metric", "mean", "sd", "n"])


def run_validation(
    seeds=HELD_OUT_SEEDS,
    *,
    modes=("elastic", "map"),
    ranges: CaseRanges | None = None,
    reference: ReferenceSettings | None = None,
    settings: HarnessSettings | None = None,
    cache_dir=None,
    weights=None,
    samples: int = 8,
    mc_seed: int = 0,
    scheduler: str = "local",
    workers: int | None = None,
    progress: bool = False,
) -> ValidationResult:
    """Score the forecast and the baselines on every seed (default: the held-out seeds).

    Parameters
    ----------
    seeds
        Case seeds (default :data:`~slipnet.validation.HELD_OUT_SEEDS`).
    modes
        Forecast modes to score (``"elastic"``, ``"map"``, ``"cyclic"``); the first also runs the
        Monte Carlo with ``samples`` samples (0: none) for the calibration of its probabilities.
    ranges, reference, settings, cache_dir, weights
        Case ranges, reference settings, harness settings, reference cache folder and the weights
        (default: the shipped file).
    mc_seed
        Seed of the Monte Carlo.
    scheduler, workers, progress
        See :func:`run_tasks`.
    """
    from slipnet.forecast import load_weights

    seeds = [int(s) for s in seeds]
    wts = load_weights(weights)
    overlap = sorted(set(seeds) & set(wts.provenance.get("training_seeds", [])))
    if overlap:
        raise ParameterError(f"seeds {overlap} were used to fit the weights; score on held-out seeds only")
    out = run_tasks(score_case, seeds, (tuple(modes), ranges, reference, settings, cache_dir, wts, int(samples),
                                        int(mc_seed)), scheduler=scheduler, workers=workers, progress=progress,
                    desc="validation cases")
    scores = pd.DataFrame([r for o in out for r in o["rows"]], columns=list(SCORE_COLUMNS))
    calib = pd.DataFrame([r for o in out for r in o["calibration"]],
                         columns=["seed", "mode", "kind", "source", "probability", "event"])
    cases = pd.DataFrame([{k: v for k, v in o["case"].items() if not isinstance(v, (list, dict))} for o in out])
    s = {"seeds": seeds, "modes": list(modes), "samples": int(samples), "mc_seed": int(mc_seed),
         "ranges": (ranges or CaseRanges()).as_dict(), "reference": (reference or ReferenceSettings()).as_dict(),
         "harness": (settings or HarnessSettings()).as_dict(), "weights_source": wts.source,
         "weights_training_seeds": wts.provenance.get("training_seeds"),
         "weights_fitted_on": wts.provenance.get("fitted_on")}
    return ValidationResult(scores=scores, summary=summarise(scores), calibration=calib, cases=cases, settings=s)

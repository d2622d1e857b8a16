"""Fit the forecast's weights on the training specimens and write ``slipnet/forecast/weights.json``.

Three logistic regressions per mode (scikit-learn ``LogisticRegression``, L2 penalty ``C = 1`` on
standardised features; Hosmer, Lemeshow & Sturdivant 2013, *Applied Logistic Regression*, Wiley):

1. ``field``: the point features of every metal point within the horizon (a seeded subsample of
   ``points_per_case`` per specimen) against "among the top 10 % of the reference's accumulated slip";
2. ``sites``: the logit of the field at each of the top ``n_sites`` field peaks against "a hot point
   lies within the hit radius" (Platt 1999 scaling);
3. ``barriers``: the barrier features of every boundary the forecast's paths cross against "the
   reference's slip drops by at least ``drop_threshold`` across it".

Uncertainty: each model is refitted on ``n_bootstrap`` resamples of the training specimens (with
replacement; specimens, not points, because points of one specimen are strongly correlated); the
replicates ship with the weights for the Monte Carlo.
"""

from __future__ import annotations

import datetime
import json
import os
from dataclasses import asdict, dataclass
from pathlib import Path

import numpy as np

from slipnet._files import atomic_path
from slipnet.errors import ParameterError
from slipnet.forecast.features import FEATURES, MODES, boundary_drops, localisation_features
from slipnet.forecast.predictor import BARRIER_FEATURES, SITE_FEATURES, Model, Weights, default_weights_path
from slipnet.validation.cases import TRAINING_SEEDS, CaseRanges, build_case, draw_case
from slipnet.validation.reference import ReferenceSettings, run_reference
from slipnet.validation.scoring import hot_mask, scoring_region, site_hits

__all__ = ["HarnessSettings", "fit_weights", "write_weights"]


@dataclass(frozen=True)
class HarnessSettings:
    """What the harness calls hot, a hit and a drop (lengths in map steps, converted with the step).

    Attributes
    ----------
    hot_fraction
        Share of the metal points within the horizon called hot (top accumulated slip, top FIP).
    hit_radius_steps
        A site is a hit when a hot point lies within this many steps (2 steps = 6 µm at 3 µm).
    site_separation_steps
        Sites (field peaks) are at least this far apart.
    drop_radius_steps
        Side means across a boundary are taken within this radius of the crossing point.
    drop_threshold
        A barrier "holds" when the relative slip drop (s_in − s_out)/(s_in + s_out) reaches this
        (0.2: the far side has at most 2/3 of the near side's slip).
    top_k
        k of the site hit rate.
    path_tol_steps
        Tolerance of the path agreement.
    """

    hot_fraction: float = 0.1
    hit_radius_steps: float = 2.0
    site_separation_steps: float = 4.0
    drop_radius_steps: float = 3.0
    drop_threshold: float = 0.2
    top_k: int = 5
    path_tol_steps: float = 3.0

    def as_dict(self) -> dict:
        return asdict(self)


def _logistic(x: np.ndarray, y: np.ndarray, groups: np.ndarray, names, n_boot: int, seed: int, c: float = 1.0):
    from sklearn.linear_model import LogisticRegression

    x = np.asarray(x, float)
    y = np.asarray(y, bool)
    if y.size == 0:
        raise ParameterError(f"no training events for {list(names)}: add training specimens")
    mean = x.mean(axis=0)
    scale = x.std(axis=0)
    scale = np.where(scale > 1e-12, scale, 1.0)
    if y.all() or not y.any():
        # one outcome only: no slope can be fitted; the intercept is the Laplace-smoothed event rate
        # (k + 1/2) / (n + 1) (the add-one-half rule; common practice)
        rate = (y.sum() + 0.5) / (y.size + 1.0)
        k = len(names)
        return Model(features=tuple(names), mean=mean, scale=scale, coef=np.zeros(k),
                     intercept=float(np.log(rate / (1.0 - rate))), bootstrap_coef=np.zeros((0, k)),
                     bootstrap_intercept=np.zeros(0),
                     fit={"method": "intercept only: every training event had the same outcome; Laplace-smoothed "
                                    "rate (k + 1/2)/(n + 1)", "n_samples": int(y.size), "event_rate": float(y.mean()),
                          "n_specimens": int(np.unique(groups).size), "n_bootstrap": 0})
    z = (x - mean) / scale

    def one(zz, yy):
        m = LogisticRegression(C=c, max_iter=2000)
        m.fit(zz, yy)
        return m.coef_[0].copy(), float(m.intercept_[0])

    coef, b = one(z, y)
    rng = np.random.default_rng(seed)
    uniq = np.unique(groups)
    bc, bi = [], []
    for _ in range(int(n_boot)):
        pick = rng.choice(uniq, size=uniq.size, replace=True)
        idx = np.concatenate([np.flatnonzero(groups == g) for g in pick])
        if y[idx].all() or not y[idx].any():
            continue
        cc, bb = one(z[idx], y[idx])
        bc.append(cc)
        bi.append(bb)
    p = 1.0 / (1.0 + np.exp(-(b + z @ coef)))
    brier = float(np.mean((p - y) ** 2))
    return Model(features=tuple(names), mean=mean, scale=scale, coef=coef, intercept=b,
                 bootstrap_coef=np.asarray(bc).reshape(-1, len(names)), bootstrap_intercept=np.asarray(bi),
                 fit={"method": f"sklearn LogisticRegression, L2, C={c:g}, standardised features",
                      "n_samples": int(y.size), "event_rate": float(y.mean()), "train_brier": brier,
                      "n_specimens": int(uniq.size), "n_bootstrap": len(bc)})


def _field_rows(seed: int, modes, ranges, ref_settings, cache_dir, hs: HarnessSettings, points: int) -> dict:
    """Stage 1 of the fit for one training specimen: subsampled point features and hot labels per mode."""
    built = build_case(draw_case(seed, ranges))
    ref = run_reference(built, ref_settings, cache_dir=cache_dir)
    c = built.case
    out = {}
    rng = np.random.default_rng([seed, 7])
    for mode in modes:
        inp = localisation_features(built.gg, built.tip, built.direction, c.load_axis, mode=mode,
                                    stress_amplitude=c.stress_amplitude_mpa, crack=built.crack_um,
                                    stress_ratio=c.ratio)
        solid = inp.solid & ~ref.compliant
        region = scoring_region(built.specimen.omap, solid, built.tip, c.horizon_um)
        hot = hot_mask(ref.accumulated_slip, region, hs.hot_fraction)
        idx = np.flatnonzero(region.ravel())
        if idx.size > points:
            idx = np.sort(rng.choice(idx, size=points, replace=False))
        x = np.stack([inp.features[f].ravel()[idx] for f in FEATURES[mode]], axis=1)
        out[mode] = (x, hot.ravel()[idx])
    return out


def _event_rows(seed: int, modes, ranges, ref_settings, cache_dir, hs: HarnessSettings, weights: Weights,
                n_sites: int) -> dict:
    """Stage 2 for one training specimen: site and barrier features with their reference events."""
    from slipnet.forecast import forecast_crack
    from slipnet.forecast.localise import field_logit

    built = build_case(draw_case(seed, ranges))
    ref = run_reference(built, ref_settings, cache_dir=cache_dir)
    c = built.case
    omap = built.specimen.omap
    out = {}
    for mode in modes:
        fc = forecast_crack(built.gg, built.crack_um, None, c.load_axis, c.horizon_um,
                            stress_amplitude=c.stress_amplitude_mpa, stress_ratio=c.ratio, mode=mode, weights=weights,
                            barrier_model="weights", n_sites=n_sites)
        solid = (np.asarray(built.gg.labels) >= 0) & ~ref.compliant
        region = scoring_region(omap, solid, built.tip, c.horizon_um)
        hot = hot_mask(ref.accumulated_slip, region, hs.hot_fraction)
        s = fc.sites
        hits = site_hits(s[["x_um", "y_um"]].to_numpy(float), hot, omap, weights.hit_radius_um)
        xs = field_logit(s["field_value"].to_numpy(float))[:, None]
        b = fc.barriers
        xb = b[[f"fit_{f}" for f in BARRIER_FEATURES]].to_numpy(float)
        drop = boundary_drops(ref.accumulated_slip, ref.labels, solid & ~ref.compliant, omap, b["x_um"].to_numpy(),
                              b["y_um"].to_numpy(), b["grain_a"].to_numpy(), b["grain_b"].to_numpy(),
                              weights.drop_radius_um)
        ok = np.isfinite(drop)
        out[mode] = {"sites": (xs, hits), "barriers": (xb[ok], drop[ok] >= weights.drop_threshold)}
    return out


def _map_tasks(fn, seeds, scheduler: str, workers: int | None, progress: bool, desc: str, *args) -> list:
    from slipnet.validation.tasks import run_tasks

    return run_tasks(fn, list(seeds), args, scheduler=scheduler, workers=workers, progress=progress, desc=desc)


def fit_weights(
    seeds=TRAINING_SEEDS,
    *,
    modes=MODES,
    ranges: CaseRanges | None = None,
    reference: ReferenceSettings | None = None,
    settings: HarnessSettings | None = None,
    cache_dir=None,
    points_per_case: int = 4000,
    n_sites: int = 10,
    n_bootstrap: int = 40,
    seed: int = 0,
    scheduler: str = "synchronous",
    workers: int | None = None,
    progress: bool = False,
) -> Weights:
    """Fit every model of every mode on the training specimens ``seeds``; return the :class:`Weights`.

    Parameters
    ----------
    seeds
        Training seeds (default :data:`~slipnet.validation.TRAINING_SEEDS`); never the held-out ones.
    modes
        Forecast modes to fit (default all of :data:`slipnet.forecast.features.MODES`).
    ranges, reference, settings
        Case ranges, reference settings and harness settings (defaults if None).
    cache_dir
        Reference cache folder.
    points_per_case, n_sites, n_bootstrap, seed
        Point subsample per specimen, field peaks per specimen for the site model, bootstrap
        replicates and the seed of the subsample and bootstrap.
    scheduler, workers, progress
        Dask scheduler (``"synchronous"``, ``"threads"``, ``"processes"`` or ``"tcp://…"``), local
        workers and a progress bar.
    """
    from slipnet import __version__
    from slipnet.validation.cases import HELD_OUT_SEEDS

    seeds = [int(s) for s in seeds]
    if set(seeds) & set(HELD_OUT_SEEDS):
        both = sorted(set(seeds) & set(HELD_OUT_SEEDS))
        raise ParameterError(f"training seeds should not include held-out seeds; got {both}")
    modes = tuple(modes)
    for m in modes:
        if m not in MODES:
            raise ParameterError(f"modes should be among {MODES}; got {m!r}")
    r = ranges or CaseRanges()
    rs = reference or ReferenceSettings()
    hs = settings or HarnessSettings()
    step = r.step_um
    stage1 = _map_tasks(_field_rows, seeds, scheduler, workers, progress, "fit: point features", modes, r, rs,
                        cache_dir, hs, int(points_per_case))
    models: dict = {m: {} for m in modes}
    for m in modes:
        x = np.concatenate([s[m][0] for s in stage1])
        y = np.concatenate([s[m][1] for s in stage1])
        g = np.concatenate([np.full(len(s[m][1]), k) for k, s in enumerate(stage1)])
        models[m]["field"] = _logistic(x, y, g, FEATURES[m], n_bootstrap, seed)
        # placeholders until stage 2 fits them: neutral models (probability ½ everywhere)
        models[m]["sites"] = Model(SITE_FEATURES, np.zeros(1), np.ones(1), np.zeros(1), 0.0, np.zeros((0, 1)),
                                   np.zeros(0), {"placeholder": True})
        k = len(BARRIER_FEATURES)
        models[m]["barriers"] = Model(BARRIER_FEATURES, np.zeros(k), np.ones(k), np.zeros(k), 0.0, np.zeros((0, k)),
                                      np.zeros(0), {"placeholder": True})
    prov = _provenance(seeds, r, rs, hs, __version__, points_per_case, n_sites, n_bootstrap, seed)
    partial = Weights(models=models, provenance=prov, hit_radius_um=hs.hit_radius_steps * step,
                      site_separation_um=hs.site_separation_steps * step, drop_radius_um=hs.drop_radius_steps * step,
                      drop_threshold=hs.drop_threshold, source="<fit in progress>")
    stage2 = _map_tasks(_event_rows, seeds, scheduler, workers, progress, "fit: sites and barriers", modes, r, rs,
                        cache_dir, hs, partial, int(n_sites))
    for m in modes:
        for kind, names in (("sites", SITE_FEATURES), ("barriers", BARRIER_FEATURES)):
            x = np.concatenate([s[m][kind][0] for s in stage2]).reshape(-1, len(names))
            y = np.concatenate([s[m][kind][1] for s in stage2])
            g = np.concatenate([np.full(len(s[m][kind][1]), k) for k, s in enumerate(stage2)])
            models[m][kind] = _logistic(x, y, g, names, n_bootstrap, seed)
    return Weights(models=models, provenance=prov, hit_radius_um=partial.hit_radius_um,
                   site_separation_um=partial.site_separation_um, drop_radius_um=partial.drop_radius_um,
                   drop_threshold=partial.drop_threshold, source="<fitted>")


def _provenance(seeds, r, rs, hs, version, points, n_sites, n_boot, seed) -> dict:
    import sklearn

    return {
        "fitted_on": datetime.date.today().isoformat(),
        "slipnet_version": version,
        "scikit_learn_version": sklearn.__version__,
        "training_seeds": list(seeds),
        "ranges": r.as_dict(),
        "reference": {"model": "slipnet.stress.solve_cyclic", **rs.as_dict()},
        "harness": hs.as_dict(),
        "points_per_case": int(points), "n_sites": int(n_sites), "n_bootstrap": int(n_boot), "seed": int(seed),
        "refit": "slipnet validate --refit",
        "statement": "Fitted against slipnet's own cyclic crystal-plasticity model on synthetic specimens: a "
                     "consistency test between a fast and a slow model, not a validation against experiments.",
    }


def write_weights(weights: Weights, path: str | os.PathLike | None = None) -> Path:
    """Write ``weights`` as JSON (default: the shipped ``slipnet/forecast/weights.json``), atomically."""
    target = Path(default_weights_path() if path is None else path)
    with atomic_path(target) as tmp:
        tmp.write_text(json.dumps(weights.as_dict(), indent=1) + "\n", encoding="utf-8")
    return target

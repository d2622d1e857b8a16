"""Tests of the validation harness, the fit and the standing file (tiny specimens, a one-cycle reference).

The reference is slipnet's own cyclic crystal-plasticity model; these tests check that the harness
scores what it says (an oracle scores 1, noise 0.5, a constant is refused), that its statistics agree
with reference libraries, and that fitting, shipping and reading the weights and the standing work.
"""

from __future__ import annotations

import json

import numpy as np
import pytest

from slipnet.cautions import CAUTION
from slipnet.errors import ParameterError
from slipnet.validation import (
    HELD_OUT_SEEDS,
    REFERENCE_STATEMENT,
    TRAINING_SEEDS,
    CaseRanges,
    ReferenceSettings,
    build_case,
    draw_case,
    field_auc,
    fit_weights,
    grain_spearman,
    hot_mask,
    read_standing,
    reliability,
    run_reference,
    run_validation,
    scoring_region,
    site_hits,
    write_weights,
)

# the notch is large enough (≥ 25 points) to count as a notch, not a speck of unindexed points
TINY = CaseRanges(shape=(36, 36), step_um=3.0, horizon_um=60.0, grain_size_um=(18.0, 24.0), notch_depth_um=(20.0, 24.0),
                  notch_radius_um=(6.0, 8.0), crack_length_um=(4.0, 8.0), max_stress_mpa=(230.0, 250.0))
ONE_CYCLE = ReferenceSettings(cycles=1, max_slip_increment=1e-3)


@pytest.fixture(scope="module")
def cache(tmp_path_factory):
    return tmp_path_factory.mktemp("reference-cache")


@pytest.fixture(scope="module")
def case(cache):
    built = build_case(draw_case(7, TINY))
    ref = run_reference(built, ONE_CYCLE, cache_dir=cache)
    solid = (np.asarray(built.gg.labels) >= 0) & ~ref.compliant
    region = scoring_region(built.specimen.omap, solid, built.tip, TINY.horizon_um)
    return built, ref, region


def test_auc_agrees_with_scikit_learn(case):
    # ROC AUC = Mann–Whitney U / (n₁ n₀) (Hanley & McNeil 1982, Radiology 143:29); scikit-learn's
    # roc_auc_score is the reference implementation
    from sklearn.metrics import roc_auc_score

    _, ref, region = case
    rng = np.random.default_rng(0)
    pred = ref.accumulated_slip + rng.normal(0.0, ref.accumulated_slip[region].std(), ref.accumulated_slip.shape)
    hot = hot_mask(ref.accumulated_slip, region, 0.1)
    assert field_auc(pred, ref.accumulated_slip, region) == pytest.approx(roc_auc_score(hot[region], pred[region]))


def test_oracle_scores_one_noise_one_half_and_a_constant_is_refused(case):
    built, ref, region = case
    assert field_auc(ref.accumulated_slip, ref.accumulated_slip, region) == pytest.approx(1.0)
    assert field_auc(ref.fip, ref.fip, region) == pytest.approx(1.0)
    assert grain_spearman(ref.accumulated_slip, ref.accumulated_slip, ref.labels, region) == pytest.approx(1.0)
    rng = np.random.default_rng(1)
    aucs = [field_auc(rng.uniform(size=region.shape), ref.accumulated_slip, region) for _ in range(10)]
    assert abs(aucs[0] - 0.5) <= 0.05
    assert abs(float(np.mean(aucs)) - 0.5) <= 0.05
    with pytest.raises(ParameterError, match="constant"):
        field_auc(np.full(region.shape, 0.3), ref.accumulated_slip, region)
    with pytest.raises(ParameterError, match="NaN"):
        field_auc(np.where(region, np.nan, 0.0), ref.accumulated_slip, region)
    # a site on a hot point hits, one far from every hot point misses
    hot = hot_mask(ref.accumulated_slip, region, 0.1)
    x, y = built.specimen.omap.coordinates()
    far = np.unravel_index(int(np.argmin(np.where(region, ref.accumulated_slip, np.inf))), region.shape)
    sites = [[x[hot][0], y[hot][0]], [x[far], y[far]]]
    assert site_hits(sites, hot, built.specimen.omap, 1.0).tolist() == [True, False]


def test_brier_and_reliability_agree_with_scikit_learn():
    # Brier (1950), Monthly Weather Review 78:1; scikit-learn's brier_score_loss and calibration_curve
    from sklearn.calibration import calibration_curve
    from sklearn.metrics import brier_score_loss

    rng = np.random.default_rng(3)
    p = rng.uniform(size=400)
    o = rng.uniform(size=400) < p
    r = reliability(p, o, bins=10)
    assert r["brier"] == pytest.approx(brier_score_loss(o, p))
    true, pred = calibration_curve(o, p, n_bins=10)
    assert [b["event_rate"] for b in r["bins"]] == pytest.approx(true)
    assert [b["mean_probability"] for b in r["bins"]] == pytest.approx(pred)
    assert r["brier_base_rate"] == pytest.approx(o.mean() * (1 - o.mean()))


def test_cases_are_seeded_within_their_ranges_and_training_is_apart_from_held_out():
    assert not set(TRAINING_SEEDS) & set(HELD_OUT_SEEDS)
    a, b = draw_case(2000), draw_case(2000)
    assert a == b and draw_case(2001) != a
    r = CaseRanges()
    for s in HELD_OUT_SEEDS:
        c = draw_case(s)
        assert r.grain_size_um[0] <= c.grain_size_um <= r.grain_size_um[1]
        assert r.ratio[0] <= c.ratio <= r.ratio[1]
        assert c.stress_amplitude_mpa == pytest.approx(0.5 * c.max_stress_mpa * (1 - c.ratio))
        assert np.linalg.norm(c.load_axis) == pytest.approx(1.0)
        assert c.notch_side in r.notch_sides
    with pytest.raises(ParameterError, match="seed"):
        draw_case(1.5)


def test_the_forecast_cuts_the_same_crack_as_the_reference(case):
    from slipnet.forecast.features import crack_cells, free_edges_of

    built, ref, _ = case
    assert np.array_equal(crack_cells(built.crack_um, built.specimen.omap), ref.crack_mask)
    assert free_edges_of(built.specimen.omap, built.case.load_axis) == (built.case.notch_side,)


def test_crack_aware_solve_raises_the_stress_ahead_of_the_tip(case):
    from slipnet.forecast import crack_aware_stress

    built, _, _ = case
    om = built.specimen.omap
    load = built.case.load_axis
    plain = crack_aware_stress(om, load, 100.0)
    cut = crack_aware_stress(om, load, 100.0, crack=built.crack_um)
    tip = built.tip + 1.5 * om.step * built.direction
    i, j = om.index_of(tip[0], tip[1])
    assert cut.normal_stress()[i, j] > plain.normal_stress()[i, j]
    assert "slit" in cut.assumptions and built.case.notch_side in cut.assumptions
    # force balance across the load: the whole cell (map + the free gap of 4 points beyond the notched
    # edge, which carries almost nothing) has the applied mean stress, so the map alone carries it on
    # 36 of 40 columns
    assert cut.stress[..., 1, 1].mean() == pytest.approx(100.0 * load[1] ** 2 * 40 / 36, rel=0.03)


@pytest.fixture(scope="module")
def tiny_weights(cache, tmp_path_factory):
    w = fit_weights((11, 12, 13), modes=("map", "elastic"), ranges=TINY, reference=ONE_CYCLE, cache_dir=cache,
                    points_per_case=800, n_sites=6, n_bootstrap=3)
    path = write_weights(w, tmp_path_factory.mktemp("weights") / "weights.json")
    return w, path


def test_fitted_weights_round_trip_as_plain_json(tiny_weights):
    from slipnet.forecast import load_weights

    w, path = tiny_weights
    data = json.loads(path.read_text(encoding="utf-8"))
    assert data["format"] == "slipnet-forecast-weights" and data["provenance"]["training_seeds"] == [11, 12, 13]
    back = load_weights(path)
    x = np.random.default_rng(0).normal(size=(5, len(back.model("elastic", "field").features)))
    assert back.model("elastic", "field").probability(x) == pytest.approx(w.model("elastic", "field").probability(x))
    assert back.model("map", "field").n_replicates >= 1
    # the resolved shear of the local elastic solve is the strongest field feature (largest coefficient)
    m = back.model("elastic", "field")
    assert m.features[int(np.argmax(m.coef))] == "tau"
    with pytest.raises(ParameterError, match="held-out"):
        fit_weights(HELD_OUT_SEEDS[:1], modes=("map",), ranges=TINY)


def test_validation_run_scores_forecast_and_baselines_alike_on_any_scheduler(tiny_weights, cache, tmp_path):
    from slipnet.reports.validation import write_validation

    _, path = tiny_weights
    kw = dict(modes=("elastic", "map"), ranges=TINY, reference=ONE_CYCLE, cache_dir=cache, weights=path, samples=2)
    res = run_validation([24, 25], scheduler="synchronous", **kw)
    again = run_validation([24, 25], scheduler="threads", workers=2, **kw)
    cols = ["auc_slip", "auc_fip", "grain_rho", "site_hit_rate", "barrier_rho"]
    assert res.scores[cols].equals(again.scores[cols])
    assert set(res.scores["predictor"]) == {"forecast:elastic", "forecast:map", "baseline:distance",
                                            "baseline:nominal_schmid", "baseline:local_schmid_grain",
                                            "baseline:elastic_max_shear"}
    assert res.scores["auc_slip"].between(0, 1).all()
    c = res.calibration
    assert set(c["kind"]) == {"site", "barrier", "point"} and c["probability"].between(0, 1).all()
    assert "monte_carlo" in set(c["source"])
    files = write_validation(res, tmp_path, figures=True)
    text = files["summary"].read_text(encoding="utf-8")
    assert REFERENCE_STATEMENT in text and CAUTION in text
    st = read_standing(files["standing"])
    assert st["statement"] == REFERENCE_STATEMENT and st["provenance"]["held_out_seeds"] == [24, 25]
    assert {t["id"] for t in st["targets"]} >= {"field_auc_slip", "grain_rho", "site_hit_rate", "barrier_rho"}
    with pytest.raises(ParameterError, match="fit the weights"):
        run_validation([11], scheduler="synchronous", **kw)


def test_shipped_standing_and_weights_are_readable_and_held_out():
    from slipnet.forecast import load_weights

    st = read_standing()
    w = load_weights()
    assert st["provenance"]["held_out_seeds"] == list(HELD_OUT_SEEDS)
    assert st["provenance"]["training_seeds"] == w.provenance["training_seeds"] == list(TRAINING_SEEDS)
    assert "not a validation against experiments" in st["statement"]
    for t in st["targets"]:
        assert t["met"] == (t["value"] >= t["threshold"])


def test_validate_command_refuses_bad_options_and_training_seeds(capsys):
    from slipnet.cli import main

    assert main(["validate", "--samples", "-1"]) == 2
    assert "--samples" in capsys.readouterr().err
    # scoring a seed the shipped weights were fitted on is refused before any solve
    assert main(["validate", "--seeds", str(TRAINING_SEEDS[0]), "--scheduler", "synchronous"]) == 2
    assert "held-out" in capsys.readouterr().err

"""The Monte Carlo's array-only per-sample steps give the numbers of the table-building code they replace."""

from __future__ import annotations

import numpy as np
import pandas as pd
import pytest

from slipnet.crystal import slip_systems
from slipnet.forecast import BarrierWeights, forecast_crack, load_weights, rank_barriers
from slipnet.grains import build_grain_graph


@pytest.fixture(scope="module")
def poly_gg():
    from slipnet.synthetic import make_specimen

    spec = make_specimen((140, 140), 1.0, grain_size_um=22.0, seed=11)
    return build_grain_graph(spec.omap)


def _rows(crossings: pd.DataFrame) -> list[dict]:
    return crossings.to_dict("records")


def _check_rank(crossings: pd.DataFrame, bw, decay, cf=None) -> None:
    from slipnet.forecast._mc_arrays import rank_pairs

    want = rank_barriers(crossings, bw, decay_length_um=decay, class_factors=cf)
    got = rank_pairs(_rows(crossings), bw, decay_length_um=decay, class_factors=cf)
    lo = np.minimum(want["grain_a"], want["grain_b"]).to_numpy()
    hi = np.maximum(want["grain_a"], want["grain_b"]).to_numpy()
    np.testing.assert_array_equal(got["lo"], lo)
    np.testing.assert_array_equal(got["hi"], hi)
    np.testing.assert_array_equal(got["on_path"], want["on_path"].to_numpy(bool))
    np.testing.assert_array_equal(got["boundary_id"], want["boundary_id"].to_numpy())
    np.testing.assert_array_equal(got["barrier_score"], want["barrier_score"].to_numpy(float))


def test_rank_pairs_equals_rank_barriers_on_forecast_crossings(poly_gg):
    for tip, d, branches in (((3.0, 70.0), (1.0, 0.0), 6), ((70.0, 3.0), (0.1, 1.0), 0), ((60.0, 60.0), (1.0, 0.3), 3)):
        fc = forecast_crack(poly_gg, tip, d, (0.0, 1.0, 0.0), 90.0, mode="map", max_branches=branches)
        assert len(fc.crossings) >= 2
        for bw, decay in ((BarrierWeights(), np.inf), (BarrierWeights(twist=0.3, schmid_drop=2.0), 40.0)):
            _check_rank(fc.crossings, bw, decay, cf={"high_angle": 0.9, "csl": 0.5})
            _check_rank(fc.crossings, bw, decay)


def test_rank_pairs_keeps_the_table_order_on_ties_and_repeats():
    # equal scores and equal distances: the stable order of the table's sort must be kept
    rng = np.random.default_rng(3)
    n = 40
    ga = rng.integers(0, 8, n)
    gb = (ga + rng.integers(1, 4, n)) % 9
    tab = pd.DataFrame({
        "boundary_id": rng.integers(0, 30, n), "grain_a": ga, "grain_b": gb,
        "branch": rng.integers(0, 4, n), "distance_um": rng.choice([5.0, 10.0, 10.0, 20.0], n),
        "twist_deg": rng.choice([0.0, 30.0, 45.0], n), "tilt_deg": 0.0, "m_prime": rng.choice([0.5, 1.0], n),
        "schmid_in": rng.choice([0.4, 0.45], n), "schmid_out": rng.choice([0.4, 0.45], n),
        "boundary_class": rng.choice(["high_angle", "low_angle", "sigma3", "subgrain"], n),
        "misorientation_deg": 40.0, "x_um": rng.random(n), "y_um": rng.random(n),
    })
    for decay in (np.inf, 15.0):
        _check_rank(tab, BarrierWeights(), decay)
    _check_rank(tab.assign(branch=0), BarrierWeights(), np.inf)


def test_barrier_plan_equals_barrier_features(poly_gg):
    from slipnet.forecast._geometry import _Crystal, _Planes, geometry_of
    from slipnet.forecast._mc_arrays import BarrierPlan
    from slipnet.forecast._window import forecast_window
    from slipnet.forecast.features import window_features
    from slipnet.forecast.localise import _coords, barrier_features, predict_field

    systems, wts = slip_systems("bcc"), load_weights()
    geo = geometry_of(poly_gg)
    tip, d, load = np.array([3.0, 70.0]), np.array([1.0, 0.0]), np.array([0.0, 1.0, 0.0])
    fc = forecast_crack(poly_gg, tip, d, load, 90.0, mode="map", systems=systems, max_branches=4)
    assert len(fc.barriers) >= 3
    win = forecast_window(poly_gg, geo, tip, 90.0 + wts.drop_radius_um)
    inp = window_features(poly_gg, geo, win, tip, d, load, mode="map", systems=systems)
    fld = predict_field(inp, wts)
    cry = _Crystal(np.asarray(poly_gg.mean_quats, float), load, _Planes(systems))
    want = barrier_features(fc.barriers, fc.crossings, inp, fld, geo, cry, wts, 90.0)
    r0, r1, c0, c1 = inp.window
    x, y = _coords(geo, inp.window)
    plan = BarrierPlan(fc.barriers, fc.crossings, geo, wts.drop_radius_um)
    got = plan.features(fld, inp.tau, geo.labels[r0:r1, c0:c1], inp.solid, x, y, cry)
    assert np.any(got != 0.0, axis=0).sum() >= 5  # the drops are defined somewhere: the test compares numbers
    np.testing.assert_allclose(got, want, rtol=1e-12, atol=1e-14)


def test_field_plan_equals_map_field_plan(poly_gg):
    # the Monte Carlo's array pass gives MapFieldPlan's field and τ, and the points of the peak search
    from slipnet.crystal import perturb_sample
    from slipnet.forecast._geometry import geometry_of
    from slipnet.forecast._mc_arrays import FieldPlan
    from slipnet.forecast._window import forecast_window
    from slipnet.forecast.features import MapFieldPlan
    from slipnet.forecast.localise import _coords

    geo, systems, wts = geometry_of(poly_gg), slip_systems("bcc"), load_weights()
    tip, horizon = np.array([4.0, 70.0]), 60.0
    win = forecast_window(poly_gg, geo, tip, horizon + wts.drop_radius_um + 7.0)
    plan = MapFieldPlan(poly_gg, geo, win, tip, (1.0, 0.0), (0.0, 1.0, 0.0), systems)
    fast = FieldPlan(plan)
    model = wts.model("map", "field")
    rng = np.random.default_rng(2)
    for rep in (None, 1, 5):
        q, ld, dt = perturb_sample(rng, np.asarray(poly_gg.mean_quats), 2.0, (0.0, 1.0, 0.0), 3.0, tip, 1.5)
        want_inp, want = plan.sample(q, ld, tip + dt, (1.0, 0.0), model, rep)
        tau, got, pv, px, py = fast.sample(q, ld, tip + dt, (1.0, 0.0), model, rep, horizon)
        np.testing.assert_allclose(got, want, rtol=1e-12, atol=1e-14)
        np.testing.assert_allclose(tau, want_inp.tau, rtol=1e-12, atol=1e-15)
        x, y = _coords(geo, plan.window)
        region = want_inp.solid & (np.hypot(x - tip[0] - dt[0], y - tip[1] - dt[1]) <= horizon)
        assert 100 < pv.size == region.sum()
        np.testing.assert_array_equal(px, x[region])
        np.testing.assert_array_equal(py, y[region])
        np.testing.assert_allclose(pv, want[region], rtol=1e-12, atol=1e-14)
        # with a mask of needed points: the same numbers there and within the horizon, 0 elsewhere
        need = rng.random(plan.lab.size) < 0.2
        tau_n, got_n, pv_n, _px, _py = fast.sample(q, ld, tip + dt, (1.0, 0.0), model, rep, horizon, need)
        keep = need.reshape(plan.shape) | region
        assert (~keep & want_inp.solid).sum() > 100
        np.testing.assert_array_equal(got_n[keep], got[keep])
        np.testing.assert_array_equal(tau_n[keep], tau[keep])
        assert np.all(got_n[~keep] == 0.0) and np.all(tau_n[~keep] == 0.0)
        np.testing.assert_array_equal(pv_n, pv)


def test_rank_pairs_and_rank_barriers_refuse_weights_without_a_positive_sum(poly_gg):
    # one score formula (barriers.barrier_scores) behind both: the same error, not a division by zero
    from slipnet.errors import ParameterError
    from slipnet.forecast._mc_arrays import rank_pairs

    fc = forecast_crack(poly_gg, (3.0, 70.0), (1.0, 0.0), (0.0, 1.0, 0.0), 90.0, mode="map")
    bad = BarrierWeights(twist=0.0, transmission=0.0, boundary_class=0.0, schmid_drop=0.0)
    with pytest.raises(ParameterError, match="positive sum"):
        rank_barriers(fc.crossings, bad)
    with pytest.raises(ParameterError, match="positive sum"):
        rank_pairs(_rows(fc.crossings), bad)


def test_rank_arrays_equals_rank_pairs(poly_gg):
    # the column form a tracer kernel can call gives the ranking of the dict rows
    from slipnet.forecast._mc_arrays import _RANK_KEYS, rank_arrays, rank_pairs
    from slipnet.forecast.barriers import _class_factor
    from slipnet.forecast.types import CLASS_FACTORS

    fc = forecast_crack(poly_gg, (3.0, 70.0), (1.0, 0.0), (0.0, 1.0, 0.0), 90.0, mode="map", max_branches=6)
    cx = fc.crossings
    cls = np.array([_class_factor(str(c), CLASS_FACTORS) for c in cx["boundary_class"]])
    got = rank_arrays(*(cx[k].to_numpy() for k in _RANK_KEYS), cls, BarrierWeights(), decay_length_um=50.0)
    want = rank_pairs(_rows(cx), BarrierWeights(), decay_length_um=50.0)
    assert got["lo"].size >= 3
    for k in want:
        np.testing.assert_array_equal(got[k], want[k])


def _peak_case(poly_gg):
    from slipnet.forecast._geometry import geometry_of
    from slipnet.forecast._mc_arrays import FieldPlan
    from slipnet.forecast._window import forecast_window
    from slipnet.forecast.features import MapFieldPlan

    geo, systems, wts = geometry_of(poly_gg), slip_systems("bcc"), load_weights()
    tip = np.array([4.0, 70.0])
    win = forecast_window(poly_gg, geo, tip, 60.0 + wts.drop_radius_um + 7.0)
    plan = MapFieldPlan(poly_gg, geo, win, tip, (1.0, 0.0), (0.0, 1.0, 0.0), systems)
    return plan, FieldPlan(plan), wts.model("map", "field"), tip


def test_sample_peaks_equals_the_full_field_and_greedy_search(poly_gg):
    # the lazy tile search gives the peaks of greedy_peaks over every point of the horizon, and the
    # field and τ of the full pass where the caller reads them
    from dataclasses import replace

    from slipnet.crystal import perturb_sample
    from slipnet.forecast.monte_carlo import _peaks

    plan, fast, model, tip = _peak_case(poly_gg)
    rng = np.random.default_rng(4)
    need = (rng.random(plan.lab.size) < 0.05) & plan.solid
    flat = replace(model, coef=np.zeros_like(model.coef), bootstrap_coef=np.zeros((0, model.coef.size)))
    # only the grain terms: the field is constant per grain, so most points tie with others
    steps = replace(flat, coef=np.where(np.array(model.features) == "tau", 3.0, 0.0))
    evaluated, found = [], []
    for i in range(6):
        q, ld, dt = perturb_sample(rng, np.asarray(poly_gg.mean_quats), 2.0, (0.0, 1.0, 0.0), 3.0, tip, 1.5)
        t = tip + dt if i else np.array([plan.x[0] + 20.0, plan.y[0] + 20.0])  # a tip inside a tile too
        for mdl, rep in ((model, None), (model, i), (flat, None), (steps, None)):
            tau, fld, pv, px, py = fast.sample(q, ld, t, (1.0, 0.2), mdl, rep, 60.0, need)
            for k, sep in ((10, 12.0), (1, 12.0), (30, 4.0), (4, 0.0), (6, 200.0)):
                want = _peaks(pv, px, py, k, sep)
                tau2, fld2, got = fast.sample_peaks(q, ld, t, (1.0, 0.2), mdl, rep, 60.0, need, k, sep)
                np.testing.assert_array_equal(got, want)
                keep = need.reshape(plan.shape)
                np.testing.assert_array_equal(fld2[keep], fld[keep])
                np.testing.assert_array_equal(tau2[keep], tau[keep])
                done = (fld2 != 0) & ~keep  # what the search evaluated equals the full pass there
                np.testing.assert_array_equal(fld2[done], fld[done])
                evaluated.append(done.sum() / pv.size)
                found.append(len(want))
        assert fast.sample_peaks(q, ld, t, (1.0, 0.2), model, None, 60.0, need, 0, 12.0)[2] is None
    assert max(found) == 30 and min(found) == 1  # k reached, and a separation wider than the horizon
    assert np.median(evaluated) < 0.6  # the search skips tiles, so the equality above is not a full pass


def test_grain_terms_kernel_equals_the_numpy_grain_terms(poly_gg):
    # the per-grain part of the logit, kernel against the numpy steps of MapFieldPlan.sample
    from slipnet.crystal import perturb_sample
    from slipnet.forecast._geometry import _matrices
    from slipnet.forecast.features import FEATURES, _neighbour_mean_edges, _transmission_pairs, _youngs_ratio

    plan, fast, model, tip = _peak_case(poly_gg)
    rng = np.random.default_rng(9)
    q, ld, _dt = perturb_sample(rng, np.asarray(poly_gg.mean_quats), 2.0, (0.0, 1.0, 0.0), 3.0, tip, 1.5)
    q[plan.used[0]] = np.nan  # an undefined orientation is read as the identity
    grain_z, tau_f, mp_sorted, *_terms = fast._grain_part(q, ld, model, 3)
    ld = ld / np.linalg.norm(ld)
    sy, used = plan.systems, plan.used
    qu = np.where(np.all(np.isfinite(q[used]), axis=1)[:, None], q[used], [1.0, 0.0, 0.0, 0.0])
    g = _matrices(qu)
    schmid = (np.einsum("sk,gkj->gsj", sy.normals, g) @ ld) * (np.einsum("sk,gkj->gsj", sy.directions, g) @ ld)
    er = np.zeros(plan.ng)
    er[used] = _youngs_ratio(np.where(np.isfinite(q[used]), q[used], [1.0, 0.0, 0.0, 0.0]), ld, plan.constants,
                             _matrices)
    gt = np.zeros((plan.ng, schmid.shape[1]))
    gt[used] = np.abs(schmid) / np.where(schmid >= 0, sy.crss, sy.crss_reverse) * er[used, None]
    tau_g = gt.max(axis=1)
    cnt = np.bincount(plan.lab_solid, minlength=plan.ng)
    tg = np.where(cnt > 0, tau_g, np.nan)
    excess = np.nan_to_num(tg - _neighbour_mean_edges(plan.ea, plan.eb, plan.ew, tg))
    c, b = model.bootstrap_coef[3], model.bootstrap_intercept[3]
    want = np.full(plan.ng, b)
    for i, v in enumerate((tau_g, er, excess)):
        k = list(model.features).index(FEATURES["map"][i])
        want += (v - model.mean[k]) / model.scale[k] * c[k]
    np.testing.assert_allclose(grain_z, want, rtol=1e-12, atol=1e-12)
    np.testing.assert_allclose(tau_f, tau_g, rtol=1e-12, atol=1e-15)
    q_ok = np.where(np.isfinite(q), q, [1.0, 0.0, 0.0, 0.0])
    _keys, vals = _transmission_pairs(plan.ea, plan.eb, q_ok, np.argmax(gt, axis=1), sy)
    np.testing.assert_allclose(mp_sorted, vals[plan.order], rtol=1e-12, atol=1e-15)


def test_perturb_orientations_kernel_equals_the_numpy_products():
    # the kernel's products in the order of quat_from_axis_angle and _qmul: the same bits
    from slipnet.crystal.orientation import quat_from_axis_angle
    from slipnet.crystal.perturb import _qmul, perturb_orientations

    rng = np.random.default_rng(1)
    q = rng.normal(size=(3000, 4))
    q /= np.linalg.norm(q, axis=1, keepdims=True)
    q[:5] = [1.0, 0.0, 0.0, 0.0]
    for sigma in (0.5, 1.5, 40.0, 200.0):
        state = rng.bit_generator.state
        got = perturb_orientations(q, sigma, rng)
        rng.bit_generator.state = state
        axes = rng.normal(size=(q.shape[0], 3))
        angles = rng.normal(0.0, sigma, size=q.shape[0])
        want = _qmul(quat_from_axis_angle(axes, angles), q)
        want = np.where(want[:, :1] < 0, -want, want)
        np.testing.assert_array_equal(got, want)


def test_sample_peaks_buffers_are_recycled_only_when_let_go(poly_gg):
    # the outputs are views of a recycled buffer: a held result never changes, a dropped one is reused clean
    from slipnet.crystal import perturb_sample

    plan, fast, model, tip = _peak_case(poly_gg)
    rng = np.random.default_rng(5)
    need = (rng.random(plan.lab.size) < 0.05) & plan.solid
    args = []
    for _ in range(3):
        q, ld, dt = perturb_sample(rng, np.asarray(poly_gg.mean_quats), 2.0, (0.0, 1.0, 0.0), 3.0, tip, 1.5)
        args.append((q, ld, tip + dt, (1.0, 0.0), model, None, 60.0, need, 8, 10.0))
    first = fast.sample_peaks(*args[0])
    kept = [a.copy() for a in first[:2]]
    sub = first[1][2:9, 3:]  # a view of a view keeps the buffer too
    second = fast.sample_peaks(*args[1])
    assert second[1].base is not first[1].base
    np.testing.assert_array_equal(first[0], kept[0])
    del first
    np.testing.assert_array_equal(sub, kept[1][2:9, 3:])
    del sub
    assert len(fast._free) == 1
    third = fast.sample_peaks(*args[2])  # takes the buffer of `first` back: cleared of the first sample's points
    fresh = type(fast)(plan).sample_peaks(*args[2])
    for a, b in zip(third, fresh, strict=True):
        np.testing.assert_array_equal(a, b)
    assert (first_points := (kept[1] != 0).sum()) > 100 and (third[1] != 0).sum() > 100, first_points
    assert third[2].shape[0] == 8 and len(fast._free) == 0

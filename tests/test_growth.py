"""Tests of the short-crack growth model (slipnet.growth)."""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
import pytest
from scipy import integrate

from slipnet.errors import ParameterError
from slipnet.growth import (
    GrowthParameters,
    GrowthPath,
    barrier_strengths,
    calibrate,
    crossing_lengths,
    growth_profile,
    path_from_tables,
    plastic_zone_ratio,
    predicted_dips,
    simulate_growth,
    sliding_displacement,
    threshold_amplitudes,
    zone_state,
)

SF = 400.0  # friction stress used throughout, MPa


def _path(**kw) -> GrowthPath:
    return GrowthPath.from_barriers([20.0, 45.0, 70.0, 100.0, 130.0], length_um=200.0, **kw)


# ------------------------------------------------------------------ strip-yield ratio


def _bcs_finiteness(n: float, sigma: float, sf: float) -> float:
    """∫₀ᶜ q(t)/√(c²−t²) dt with q = σ on the crack, σ − σ_f in the zone (c = 1).

    The slip distribution is bounded at the zone end only when this vanishes (Bilby, Cottrell &
    Swinden 1963, Proc. R. Soc. A 272:304; the same condition as Dugdale 1960). Integrated with
    scipy's quad in the angle t = sin θ so the end singularity disappears.
    """
    th_a = math.asin(n)
    return integrate.quad(lambda th: sigma, 0, th_a)[0] + integrate.quad(lambda th: sigma - sf, th_a, math.pi / 2)[0]


@pytest.mark.parametrize("ratio", [0.05, 0.2, 0.4, 0.6, 0.8, 0.95])
def test_plastic_zone_ratio_meets_the_bcs_finiteness_condition(ratio):
    sigma = ratio * SF
    n = plastic_zone_ratio(sigma, SF)
    # Bilby, Cottrell & Swinden (1963): n = cos(πσ/2σ_f) makes the zone-end singularity vanish
    assert abs(_bcs_finiteness(n, sigma, SF)) < 1e-9 * SF
    assert n == pytest.approx(math.cos(math.pi * sigma / (2 * SF)), rel=1e-12)


def test_plastic_zone_ratio_is_vectorised_and_limits():
    s = np.linspace(0.0, 0.99 * SF, 50).reshape(5, 10)
    n = plastic_zone_ratio(s, SF)
    assert n.shape == (5, 10)
    assert n[0, 0] == 1.0  # no load: no zone (Bilby, Cottrell & Swinden 1963)
    assert np.all(np.diff(n.ravel()) < 0)  # the zone grows with the stress


def test_single_grain_profile_keeps_the_bcs_ratio_over_a_range_of_stress():
    path = GrowthPath.from_barriers([], length_um=300.0)
    for sigma in (40.0, 150.0, 260.0, 380.0):
        prof = growth_profile(path, sigma, friction_stress=SF, initial_length=1.0, n_points=200)
        # no barrier: the zone is never blocked, n = cos(πσ/2σ_f) everywhere (Bilby, Cottrell & Swinden 1963)
        assert (prof["zone_state"] == "spreading").all()
        np.testing.assert_allclose(prof["n_ratio"], math.cos(math.pi * sigma / (2 * SF)), rtol=1e-12)


@pytest.mark.parametrize("bad", [-1.0, SF, 1.5 * SF, math.nan])
def test_plastic_zone_ratio_refuses_bad_stress(bad):
    with pytest.raises(ParameterError, match="stress"):
        plastic_zone_ratio(bad, SF)


def test_plastic_zone_ratio_refuses_bad_friction():
    with pytest.raises(ParameterError, match="friction_stress"):
        plastic_zone_ratio(100.0, 0.0)


# ------------------------------------------------------------------ CTSD against a numerical solution


def _ctsd_numerical(a: float, c: float, sigma: float, sf: float, g_mpa: float, nu: float, n_nodes: int = 600):
    """Slip at x = a of a band (−c, c), crack |x|<a free, zone friction σ_f, solved numerically.

    Singular integral equation (E'/4π)∫B(t)/(x−t)dt = p(x) − σ with slip density B unbounded at ±c
    (blocked zone), closure ∫B = 0, solved by Gauss–Chebyshev quadrature (Erdogan & Gupta 1972,
    Q. Appl. Math. 29:525). E' = 2G/(1−ν) for plane strain (common practice).
    """
    e_prime = 2 * g_mpa / (1 - nu)
    k = np.arange(1, n_nodes + 1)
    th_t = np.pi * (2 * k - 1) / (2 * n_nodes)
    t = c * np.cos(th_t)
    x = c * np.cos(np.pi * np.arange(1, n_nodes) / n_nodes)
    p = np.where(np.abs(x) < a, 0.0, sf)
    mat = (e_prime / (4 * np.pi)) * (np.pi / n_nodes) / (x[:, None] - t[None, :])
    mat = np.vstack([mat, np.ones(n_nodes)])
    rhs = np.concatenate([p - sigma, [0.0]])
    gk = np.linalg.solve(mat, rhs)
    # B(t) = g(t)/√(c²−t²), so ∫_a^c B dt = ∫_0^{θa} g(c cos θ) dθ: midpoint sums give the slip at the
    # cell edges θ = jπ/N exactly to O(1/N²); the slip is continuous, so interpolate it to θa
    edges = np.pi * np.arange(n_nodes + 1) / n_nodes
    slip_at_edges = np.concatenate([[0.0], np.cumsum(gk) * np.pi / n_nodes])
    integral = np.interp(math.acos(a / c), edges, slip_at_edges)
    return abs(integral)


@pytest.mark.parametrize(("n", "sigma"), [(0.5, 250.0), (0.8, 200.0), (0.3, 300.0), (0.9, 100.0)])
def test_blocked_ctsd_matches_the_numerical_dislocation_solution(n, sigma):
    c = 40.0
    g, nu = 82.0, 0.29
    nodes = 400
    # put the crack tip midway between two collocation points, where the quadrature sees the load step
    j = round(nodes * math.acos(n) / math.pi - 0.5)
    a = c * math.cos(math.pi * (j + 0.5) / nodes)
    ours = float(sliding_displacement(a, c, sigma, SF, shear_modulus=g, poisson_ratio=nu))
    ref = _ctsd_numerical(a, c, sigma, SF, g * 1e3, nu, n_nodes=nodes)
    # Erdogan & Gupta (1972) quadrature of the blocked strip-yield band (Navarro & de los Rios 1988 setup)
    assert ours == pytest.approx(ref, rel=1e-3)


def test_unblocked_ctsd_is_the_dugdale_bcs_tip_displacement():
    g, nu, sigma, a = 82.0, 0.29, 250.0, 30.0
    n = plastic_zone_ratio(sigma, SF)
    e_prime = 2 * g * 1e3 / (1 - nu)
    # Dugdale (1960) / Bilby, Cottrell & Swinden (1963): δ = (8σ_f a/(πE')) ln sec(πσ/2σ_f)
    expected = 8 * SF * a / (math.pi * e_prime) * math.log(1 / math.cos(math.pi * sigma / (2 * SF)))
    assert float(sliding_displacement(a, a / n, sigma, SF, shear_modulus=g, poisson_ratio=nu)) == pytest.approx(
        expected, rel=1e-12)


def test_ctsd_vanishes_when_the_tip_reaches_a_blocked_zone_end():
    assert float(sliding_displacement(10.0, 10.0, 200.0, SF)) == 0.0


# ------------------------------------------------------------------ barriers, thresholds, crossings


def test_threshold_falls_as_one_over_root_distance_for_equal_barriers():
    d = np.array([10.0, 20.0, 40.0, 80.0, 160.0])
    path = GrowthPath.from_barriers(d)
    th = threshold_amplitudes(path)
    # Navarro & de los Rios (1988): with equal orientation factors the threshold falls as i^(-1/2)
    np.testing.assert_allclose(th * np.sqrt(d), th[0] * math.sqrt(d[0]), rtol=1e-12)
    p = GrowthParameters()
    assert th[0] == pytest.approx(p.barrier_stress * math.sqrt(2 * p.source_distance / d[0]))


def test_poor_transmission_twist_and_orientation_strengthen_barriers():
    base = barrier_strengths(GrowthPath.from_barriers([10.0]))[0]
    low_mp = barrier_strengths(GrowthPath.from_barriers([10.0], m_prime=[0.2]))[0]
    twisted = barrier_strengths(GrowthPath.from_barriers([10.0], twist_deg=[40.0]))[0]
    hard_next = barrier_strengths(GrowthPath.from_barriers([10.0], grain_factors=[0.45, 0.30]))[0]
    p = GrowthParameters()
    assert low_mp == pytest.approx(base * (1 + p.transmission_weight * 0.8))
    assert twisted == pytest.approx(base * (1 + p.twist_weight * math.sin(math.radians(40.0))))
    # Navarro & de los Rios (1988): critical stress scales with the orientation-factor ratio
    assert hard_next == pytest.approx(base * 0.45 / 0.30)


def test_simulation_arrests_just_below_and_passes_just_above_each_threshold():
    path = _path(m_prime=[1.0, 0.3, 1.0, 0.9, 1.0])
    th = threshold_amplitudes(path)
    need = np.maximum.accumulate(th)
    for k in range(path.n_barriers):
        if k and need[k] == need[k - 1]:
            continue  # a weaker barrier than an earlier one never decides arrest
        below = simulate_growth(path, need[k] * 0.995, friction_stress=SF, n_points=300)
        above = simulate_growth(path, need[k] * 1.005, friction_stress=SF, n_points=300)
        assert below.arrest_length_um == pytest.approx(path.barrier_positions_um[k])
        assert above.arrest_length_um > path.barrier_positions_um[k]


def test_arrest_is_represented_by_infinite_cycles_and_zero_rate():
    path = _path()
    res = simulate_growth(path, 120.0, friction_stress=SF, n_points=400)
    prof = res.profile
    assert math.isfinite(res.arrest_length_um)
    after = prof["crack_length_um"] >= res.arrest_length_um
    assert after.any()
    assert np.isinf(prof.loc[after, "cycles"]).all()
    assert (prof.loc[after, "dadn_um_per_cycle"] == 0).all()
    assert prof.loc[after, "arrested"].all() and (prof.loc[after, "zone_state"] == "arrested").all()
    dips = predicted_dips(res)
    assert dips["arrest"].sum() == 1 and dips.loc[dips["arrest"], "depth_ratio"].iloc[0] == 0.0
    assert res.barriers["arrest"].sum() == 1


def test_crossing_lengths_are_nondecreasing_and_before_their_barrier():
    path = _path()
    x = crossing_lengths(path, 250.0, GrowthParameters(friction_stress=SF))
    assert np.all(np.diff(x) >= 0)
    assert np.all(x <= path.barrier_positions_um)


# ------------------------------------------------------------------ blocked zone: the dips


def test_rate_falls_near_a_blocked_barrier_and_recovers_after_crossing():
    path = _path()
    # 200 MPa: every barrier holds the zone long enough for the rate to turn down (at 250 MPa the weakest
    # barrier gives way while the rate is still rising, which the model also allows)
    res = simulate_growth(path, 200.0, friction_stress=SF, n_points=3000)
    prof = res.profile
    a = prof["crack_length_um"].to_numpy()
    r = prof["dadn_um_per_cycle"].to_numpy()
    dips = res.dips
    assert len(dips) == path.n_barriers
    for _, dip in dips.iterrows():
        k = int(dip["barrier"])
        blocked = np.flatnonzero((prof["barrier"] == k) & (prof["zone_state"] == "blocked"))
        last = blocked[-1]
        # Navarro & de los Rios (1988), qualitative: the rate falls as the tip nears the blocked barrier,
        # is lowest just before slip crosses it and jumps up once it has crossed
        assert r[last - 1] > r[last]
        assert r[last + 1] > r[last]
        assert dip["crack_length_um"] == pytest.approx(a[last])
        assert 0 < dip["depth_ratio"] < 1
        assert dip["crossing_length_um"] == pytest.approx(a[last + 1])
        peak = blocked[np.argmax(r[blocked])]
        assert np.all(np.diff(r[peak:last + 1]) < 0)  # unimodal: falling all the way from the peak


def test_predicted_dips_from_profile_equals_from_result():
    res = simulate_growth(_path(), 250.0, friction_stress=SF, n_points=500)
    pd.testing.assert_frame_equal(predicted_dips(res.profile), predicted_dips(res))
    with pytest.raises(ParameterError, match="columns"):
        predicted_dips(res.profile[["crack_length_um", "dadn_um_per_cycle"]])


# ------------------------------------------------------------------ long cracks: Paris-type limit


def test_long_crack_rate_follows_delta_k_to_twice_the_exponent():
    path = GrowthPath.from_barriers([], length_um=5000.0)
    m = 1.7
    a = 3000.0
    sig = np.array([4.0, 8.0, 16.0, 32.0])
    rates = []
    for s in sig:
        st = zone_state(path, [a], s, GrowthParameters(friction_stress=SF, exponent=m))
        rates.append(st["dadn"][0])
    dk = 2 * sig * np.sqrt(np.pi * a)
    slope = np.polyfit(np.log(dk), np.log(rates), 1)[0]
    # small σ/σ_f: φ ∝ σ²a ∝ ΔK², so da/dN ∝ ΔK^(2m) (Paris, Gomez & Anderson 1961 form)
    assert slope == pytest.approx(2 * m, rel=5e-3)


def test_long_crack_rate_against_length_approaches_the_exponent_through_many_grains():
    d = np.arange(20.0, 20000.0, 20.0)  # 20 µm grains
    path = GrowthPath.from_barriers(d, length_um=20000.0)
    m = 1.5
    res = simulate_growth(path, 150.0, friction_stress=SF, exponent=m, barrier_stress=100.0,
                          initial_length=1.0, n_points=4000)
    prof = res.profile
    long = prof[prof["crack_length_um"] > 2000.0]
    slope = np.polyfit(np.log(long["crack_length_um"]), np.log(long["dadn_um_per_cycle"]), 1)[0]
    # a ≫ grain size: the envelope of da/dN vs a on log–log axes has slope m (φ ∝ a at fixed σ)
    assert slope == pytest.approx(m, rel=0.02)


# ------------------------------------------------------------------ cycles: monotone, units, quad check


def test_cycles_are_monotone_and_match_scipy_quad():
    path = _path()
    p = GrowthParameters(friction_stress=SF)
    res = simulate_growth(path, 250.0, params=p, initial_length=2.0, final_length=60.0, n_points=4000)
    prof = res.profile
    n = prof["cycles"].to_numpy()
    assert np.all(np.diff(n) >= 0) and n[0] == 0.0
    x = crossing_lengths(path, 250.0, p)

    def inv_rate(a):
        return 1.0 / zone_state(path, [a], 250.0, p, crossings=x)["dadn"][0]

    breaks = [b for b in np.concatenate([x, path.barrier_positions_um]) if 2.0 < b < 60.0]
    ref = integrate.quad(inv_rate, 2.0, 60.0, points=breaks, limit=400)[0]  # scipy reference integral
    assert n[-1] == pytest.approx(ref, rel=1e-3)


def test_rate_units_scale_with_the_coefficient_and_modulus():
    path = _path()
    r1 = growth_profile(path, 250.0, friction_stress=SF, coefficient=0.05, exponent=1.0, n_points=100)
    r2 = growth_profile(path, 250.0, friction_stress=SF, coefficient=0.10, exponent=1.0, n_points=100)
    np.testing.assert_allclose(r2["dadn_um_per_cycle"], 2 * r1["dadn_um_per_cycle"])
    np.testing.assert_allclose(r2["cycles"], 0.5 * r1["cycles"])
    # φ ∝ 1/G (dislocation slip under a given stress, common practice)
    stiff = simulate_growth(path, 250.0, params=GrowthParameters(friction_stress=SF, shear_modulus=164.0),
                            n_points=100).profile
    np.testing.assert_allclose(stiff["ctsd_um"], 0.5 * r1["ctsd_um"], rtol=1e-12)
    # order of magnitude: a 20 µm crack at 250 MPa slides by 10⁻²–10⁻¹ µm (µm units, not m)
    mid = r1.iloc[(r1["crack_length_um"] - 20.0).abs().argmin()]
    assert 1e-3 < mid["ctsd_um"] < 1.0


# ------------------------------------------------------------------ bands


def test_bands_are_ordered_and_reproducible():
    path = _path()
    r1 = simulate_growth(path, 250.0, friction_stress=SF, samples=40, seed=3, n_points=300)
    r2 = simulate_growth(path, 250.0, friction_stress=SF, samples=40, seed=3, n_points=300)
    b = r1.bands
    pd.testing.assert_frame_equal(b, r2.bands)
    assert np.all(b["cycles_p05"] <= b["cycles_p50"]) and np.all(b["cycles_p50"] <= b["cycles_p95"])
    assert np.all(b["dadn_um_per_cycle_p05"] <= b["dadn_um_per_cycle_p95"])
    assert (b["cycles_p95"] > b["cycles_p05"]).any()


def test_bands_from_forecast_samples_paths():
    table = _segment_table()
    fake = type("F", (), {})()
    fake.path = table
    fake.barriers = None
    shifted = table.copy()
    shifted["s_start_um"] = shifted["s_start_um"] * 1.1
    shifted["length_um"] = shifted["length_um"] * 1.1
    fake.samples = [table, shifted]
    res = simulate_growth(fake, 250.0, friction_stress=SF, n_points=200)
    assert res.bands is not None and "forecast" in res.notes[0]


# ------------------------------------------------------------------ calibration


def test_calibration_recovers_known_constants_from_a_noisy_record():
    path = _path()
    truth = GrowthParameters(friction_stress=380.0, coefficient=0.03, exponent=1.3)
    res = simulate_growth(path, 250.0, params=truth, initial_length=3.0, final_length=190.0, n_points=3000)
    prof = res.profile
    a_rec = np.linspace(3.0, 190.0, 25)
    n_true = np.interp(a_rec, prof["crack_length_um"], prof["cycles"])
    rng = np.random.default_rng(11)
    n_rec = n_true * (1 + 0.01 * rng.standard_normal(a_rec.size))
    n_rec[0] = 0.0
    fit = calibrate(a_rec, n_rec, path, 250.0, initial=GrowthParameters(friction_stress=450.0, coefficient=0.08,
                                                                        exponent=1.8))
    assert fit.success
    tab = fit.table.set_index("parameter")
    for name, true in (("friction_stress_mpa", 380.0), ("coefficient", 0.03), ("exponent", 1.3)):
        assert tab.loc[name, "value"] == pytest.approx(true, rel=0.1)
        assert tab.loc[name, "low"] <= true <= tab.loc[name, "high"]
    assert fit.covariance.shape == (3, 3)


def test_calibration_refuses_short_or_unsorted_records():
    with pytest.raises(ParameterError, match="record_a_um"):
        calibrate([1, 2, 3], [0, 1, 2], _path(), 200.0)
    with pytest.raises(ParameterError, match="strictly increasing"):
        calibrate([1, 3, 2, 4], [0, 1, 2, 3], _path(), 200.0)


# ------------------------------------------------------------------ path adapter and bad inputs


def _segment_table() -> pd.DataFrame:
    # three straight segments: grain 4 (two segments), then grain 9
    return pd.DataFrame({
        "grain": [4, 4, 9],
        "x0_um": [0.0, 10.0, 10.0], "y0_um": [0.0, 0.0, 15.0],
        "x1_um": [10.0, 10.0, 10.0], "y1_um": [0.0, 15.0, 45.0],
        "length_um": [10.0, 15.0, 30.0],
        "s_start_um": [0.0, 10.0, 25.0],
        "system": [0, 0, 3], "plane": ["(011)", "(011)", "(101)"],
        "effective_schmid": [0.4, 0.5, 0.3], "stage": ["I", "I", "I"],
    })


def test_path_from_tables_reads_barriers_factors_and_coordinates():
    barriers = pd.DataFrame({"rank": [1, 2], "boundary_id": [17, 3], "grain_a": [4, 1], "grain_b": [9, 2],
                             "m_prime": [0.6, 0.9], "twist_deg": [25.0, 5.0], "distance_um": [25.0, 80.0],
                             "on_path": [True, False]})
    path = path_from_tables(_segment_table(), barriers)
    np.testing.assert_allclose(path.barrier_positions_um, [25.0])
    np.testing.assert_allclose(path.grain_factors, [(0.4 * 10 + 0.5 * 15) / 25, 0.3])
    assert path.m_prime[0] == 0.6 and path.twist_deg[0] == 25.0 and path.boundary_ids[0] == 17
    assert list(path.grains) == [4, 9] and path.length_um == 55.0
    x, y = path.locate([5.0, 25.0, 55.0])
    np.testing.assert_allclose(x, [5.0, 10.0, 10.0])
    np.testing.assert_allclose(y, [0.0, 15.0, 45.0])
    prof = growth_profile(path, 200.0, friction_stress=SF, n_points=100)
    assert set(prof["grain"]) <= {4, 9}


def test_bad_inputs_raise_clear_errors():
    path = _path()
    with pytest.raises(ParameterError, match="stress_amplitude should be >= 0"):
        growth_profile(path, -10.0)
    with pytest.raises(ParameterError, match="below friction_stress"):
        growth_profile(path, 450.0, friction_stress=SF)
    with pytest.raises(ParameterError, match="empty"):
        path_from_tables(_segment_table().iloc[:0])
    with pytest.raises(ParameterError, match="strictly increasing"):
        GrowthPath.from_barriers([10.0, 5.0])
    with pytest.raises(ParameterError, match="initial_length"):
        growth_profile(path, 200.0, initial_length=300.0)
    with pytest.raises(ParameterError, match="m_prime"):
        GrowthPath.from_barriers([10.0], m_prime=[1.5])
    with pytest.raises(ParameterError, match="forecast_or_path"):
        growth_profile("not a path", 200.0)
    with pytest.raises(ParameterError, match="position_um"):
        GrowthPath.from_table(pd.DataFrame({"x": [1.0]}))


# ------------------------------------------------------------------ outputs: CLI, demo step, figures


def _fake_forecast():
    fc = type("FakeForecast", (), {})()
    fc.path = _segment_table()
    fc.crossings = pd.DataFrame({"boundary_id": [17], "grain_a": [4], "grain_b": [9], "distance_um": [25.0],
                                 "m_prime": [0.7], "twist_deg": [30.0], "branch": [0]})
    fc.barriers = None
    fc.samples = None
    fc.settings = {"stress_amplitude_mpa": 220.0, "initial_crack_um": 5.0, "seed": 1}
    return fc


def test_path_from_forecast_uses_crossings_and_the_existing_crack_length():
    from slipnet.growth import path_from_forecast

    path = path_from_forecast(_fake_forecast())
    np.testing.assert_allclose(path.barrier_positions_um, [30.0])  # 25 µm ahead of a 5 µm crack
    assert path.m_prime[0] == 0.7 and path.twist_deg[0] == 30.0 and path.boundary_ids[0] == 17
    assert path.length_um == 60.0
    x, _ = path.locate([5.0])
    assert x[0] == 0.0  # the forecast tip sits at crack length 5 µm
    with pytest.raises(ParameterError, match="CrackForecast"):
        path_from_forecast(object())


def test_growth_writer_writes_tables_pictures_and_caution(tmp_path):
    from slipnet.reports.growth import write_growth

    res = simulate_growth(_fake_forecast(), 220.0, n_points=800, seed=2)
    write_growth(res, tmp_path / "growth")
    assert res.stress_amplitude == 220.0
    for name in ("growth_profile.csv", "growth_barriers.csv", "growth_dips.csv", "growth_rate.png",
                 "growth_map.png", "growth_cycles.png", "summary.md"):
        assert (tmp_path / "growth" / name).exists(), name
    from slipnet.cautions import CAUTION

    assert CAUTION in (tmp_path / "growth" / "summary.md").read_text(encoding="utf-8")
    prof = pd.read_csv(tmp_path / "growth" / "growth_profile.csv")
    assert {"crack_length_um", "cycles", "dadn_um_per_cycle"} <= set(prof.columns)


def test_cli_growth_from_a_barrier_table_and_a_record(tmp_path, capsys):
    from slipnet.cli import main

    bars = tmp_path / "bars.csv"
    pd.DataFrame({"position_um": [20.0, 45.0, 70.0], "m_prime": [1.0, 0.5, 0.9],
                  "twist_deg": [0.0, 30.0, 5.0]}).to_csv(bars, index=False)
    out = tmp_path / "out"
    assert main(["growth", "--barriers", str(bars), "--stress-amplitude", "200", "--out", str(out),
                 "--profile-points", "300", "--samples", "5"]) == 0
    prof = pd.read_csv(out / "growth_profile.csv")
    assert prof["crack_length_um"].iloc[-1] == pytest.approx(105.0)
    assert (out / "growth_bands.csv").exists()
    # a record made by the model itself, then calibrated through the command line
    path = GrowthPath.from_table(pd.read_csv(bars))
    truth = simulate_growth(path, 200.0, n_points=1500).profile
    a_rec = np.linspace(3.0, 100.0, 12)
    rec = tmp_path / "record.csv"
    pd.DataFrame({"crack_length_um": a_rec,
                  "cycles": np.interp(a_rec, truth["crack_length_um"], truth["cycles"])}).to_csv(rec, index=False)
    out2 = tmp_path / "fit"
    assert main(["growth", "--barriers", str(bars), "--stress-amplitude", "200", "--out", str(out2),
                 "--record", str(rec), "--coefficient", "0.1", "--no-figures"]) == 0
    assert main(["growth", "--barriers", str(bars), "--stress-amplitude", "200", "--out", str(tmp_path / "life"),
                 "--life", "1e5", "--profile-points", "300", "--no-figures"]) == 0
    assert "life of 100000 cycles" in (tmp_path / "life" / "summary.md").read_text(encoding="utf-8")
    cal = pd.read_csv(out2 / "growth_calibration.csv").set_index("parameter")
    assert cal.loc["coefficient", "value"] == pytest.approx(0.05, rel=0.05)
    assert not (out2 / "growth_rate.png").exists()
    capsys.readouterr()
    assert main(["growth", "--barriers", str(tmp_path / "missing.csv"), "--stress-amplitude", "200"]) == 2
    assert "not found" in capsys.readouterr().err
    # a fresh folder: --out OUT would be refused first, as it holds the complete run above
    assert main(["growth", "--barriers", str(bars), "--stress-amplitude", "-5", "--out", str(tmp_path / "bad")]) == 2
    assert ">= 0" in capsys.readouterr().err
    assert not (tmp_path / "bad").exists()


def test_growth_figures_mark_barriers_and_arrest():
    import matplotlib.pyplot as plt

    from slipnet.figures.growth import plot_growth_on_map, plot_growth_rate

    res = simulate_growth(_path(), 120.0, friction_stress=SF, n_points=300)
    fig = plot_growth_rate(res)
    ax = fig.axes[0]
    assert ax.get_xscale() == "log" and ax.get_yscale() == "log"
    labels = [t.get_text() for t in ax.texts]
    # a barrier is named by its boundary id (B<id>, as in the tables); this hand-made path has no ids,
    # so the barriers are numbered along it
    bid = int(res.barriers["boundary_id"].iloc[0])
    assert (f"B{bid}" if bid >= 0 else "#1") in labels
    assert any("arrest" in t.get_text() for t in ax.get_legend().get_texts())
    plt.close(fig)
    with pytest.raises(ParameterError, match="map coordinates"):
        plot_growth_on_map(res)


def test_example_script_runs(capsys):
    import runpy
    from pathlib import Path

    script = Path(__file__).resolve().parents[1] / "examples" / "growth" / "growth_profile.py"
    runpy.run_path(str(script), run_name="__main__")
    out = capsys.readouterr().out
    assert "arrests at 18 µm" in out and "fitted constants" in out


def test_growth_along_a_real_forecast_on_a_three_grain_map(tmp_path):
    from slipnet.cli import main as cli_main
    from slipnet.forecast import forecast_crack
    from slipnet.grains import build_grain_graph
    from slipnet.growth import path_from_forecast
    from slipnet.maps import OrientationMap
    from slipnet.reports import write_forecast

    eul = np.zeros((24, 72, 3))
    eul[:, 24:48] = [45.0, 30.0, 10.0]
    eul[:, 48:] = [10.0, 50.0, 70.0]
    gg = build_grain_graph(OrientationMap.from_euler(eul, 1.0))
    fc = forecast_crack(gg, (1.0, 12.0), (1.0, 0.0), (1.0, 0.0, 0.0), horizon=65.0)
    path = path_from_forecast(fc)
    main = fc.crossings[fc.crossings["branch"] == 0] if "branch" in fc.crossings.columns else fc.crossings
    assert path.n_barriers == len(main.drop_duplicates(["grain_a", "grain_b"]))
    assert path.n_barriers >= 1
    assert path.length_um == pytest.approx(fc.path["length_um"].sum())
    # barrier positions are where the path's grain changes; |m′| taken from the forecast's crossing
    first = main.iloc[0]
    assert path.barrier_positions_um[0] == pytest.approx(first["distance_um"], abs=1e-6)
    assert path.m_prime[0] == pytest.approx(first["m_prime"])
    res = simulate_growth(fc, 200.0, n_points=300)
    assert set(res.profile["grain"]) <= set(fc.path["grain"])
    # the same through the command line, from the forecast's saved tables
    write_forecast(fc, tmp_path / "fc", figures=False)
    assert cli_main(["growth", "--forecast", str(tmp_path / "fc"), "--out", str(tmp_path / "g"),
                     "--profile-points", "300", "--no-figures"]) == 0
    saved = pd.read_csv(tmp_path / "g" / "growth_barriers.csv")
    np.testing.assert_allclose(saved["position_um"], path.barrier_positions_um, rtol=1e-9)
    np.testing.assert_allclose(saved["m_prime"], path.m_prime, rtol=1e-9)


def test_life_amplitude_hits_the_target_life_and_falls_back_to_the_fatigue_limit():
    from slipnet.growth import life_amplitude

    path = _path()
    p = GrowthParameters(friction_stress=SF)
    s = life_amplitude(path, 2e5, params=p, n_points=600)
    prof = simulate_growth(path, s, params=p, n_points=600).profile
    assert prof["cycles"].iloc[-1] == pytest.approx(2e5, rel=1e-5)  # brentq root of the integrated life
    assert s > threshold_amplitudes(path, p).max()
    # a life longer than the crack needs even at the limit: the answer is the limit itself, eq. (7)
    assert life_amplitude(path, 1e12, params=p, n_points=600) == pytest.approx(threshold_amplitudes(path, p).max())
    with pytest.raises(ParameterError, match="cycles"):
        life_amplitude(path, 0.0)


def test_local_stress_field_factors_replace_the_forecast_schmid(monkeypatch):
    import slipnet.stress.local
    from slipnet.growth import path_from_forecast

    local = np.zeros((10, 4))
    local[4, 0] = -0.25  # grain 4 follows system 0
    local[9, 3] = 0.40  # grain 9 follows system 3
    monkeypatch.setattr(slipnet.stress.local, "grain_schmid_factors", lambda field, gg, systems=None: local)
    fc = _fake_forecast()
    path = path_from_forecast(fc, stress_field=object(), gg=object())
    np.testing.assert_allclose(path.grain_factors, [0.25, 0.40])
    with pytest.raises(ParameterError, match="gg should be given"):
        path_from_forecast(fc, stress_field=object())


# ------------------------------------------------------------------------- localisation zones
def test_a_localisation_zone_slows_the_crack_before_its_centre_and_lets_it_recover_after():
    from slipnet.growth import GrowthParameters, GrowthPath, localisation_factor, simulate_growth

    base = GrowthPath.from_barriers([], length_um=200.0)
    zoned = base.with_zones([100.0], [20.0], [0.8])
    p = GrowthParameters()
    a = np.array([40.0, 80.0, 100.0, 110.0, 130.0])
    f, z = localisation_factor(zoned, a, p)
    # the form written in localisation_factor: F = 1 − R A exp(−½((a − c)/w)²) before the centre,
    # width ρ w after it (R = 0.5, ρ = 0.5 by default)
    expect = 1.0 - 0.5 * 0.8 * np.exp(-0.5 * ((a - 100.0) / np.where(a <= 100.0, 20.0, 10.0)) ** 2)
    assert f == pytest.approx(expect)
    assert f[2] == pytest.approx(1.0 - 0.5 * 0.8)  # deepest at the centre
    assert z.tolist() == [-1, 0, 0, 0, -1]
    # the rate recovers faster past the centre than it fell on the approach
    assert f[3] > localisation_factor(zoned, [90.0], p)[0][0]
    plain = simulate_growth(base, 150.0, initial_length=10.0, n_points=400, samples=0)
    slow = simulate_growth(zoned, 150.0, initial_length=10.0, n_points=400, samples=0)
    r0 = np.interp(100.0, plain.profile["crack_length_um"], plain.profile["dadn_um_per_cycle"])
    r1 = np.interp(100.0, slow.profile["crack_length_um"], slow.profile["dadn_um_per_cycle"])
    assert r1 == pytest.approx(0.6 * r0, rel=1e-3)
    assert slow.profile["cycles"].iloc[-1] > plain.profile["cycles"].iloc[-1]
    dips = slow.dips
    assert list(dips["kind"]) == ["zone"] and dips["zone"].iloc[0] == 0
    assert dips["crack_length_um"].iloc[0] == pytest.approx(100.0, abs=1.0)
    assert 0.0 < dips["depth_ratio"].iloc[0] < 1.0


def test_zones_come_from_the_forecast_field_along_the_path():
    from slipnet.growth import zones_along_path

    field = np.zeros((10, 40))
    field[:, 18:23] = np.array([0.55, 0.7, 0.9, 0.7, 0.55])
    grid = {"origin_um": [0.0, 0.0], "step_um": 1.0, "row_spacing_um": 1.0, "hex": False}
    poly = np.array([[0.0, 0.0, 5.0], [39.0, 39.0, 5.0]])
    pos, wid, strg = zones_along_path(field, grid, poly, 0.5)
    # sampled every half step, nearest grid point: the centre within half a step of x = 20
    assert pos == pytest.approx([20.0], abs=0.5) and strg == pytest.approx([0.9]) and wid == pytest.approx([2.0])
    with pytest.raises(ParameterError, match="zone_threshold"):
        zones_along_path(field, grid, poly, 1.5)

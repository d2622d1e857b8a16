"""Tests of the crack forecast: path, crossing angles, barrier ranking, sites, Monte Carlo, outputs."""

from __future__ import annotations

import math
from dataclasses import dataclass

import networkx as nx
import numpy as np
import pytest

from slipnet.cautions import CAUTION
from slipnet.crystal import (
    effective_schmid,
    m_prime,
    quat_from_axis_angle,
    quat_rotate,
    random_quats,
    schmid_factors,
    slip_systems,
)
from slipnet.errors import ParameterError
from slipnet.forecast import (
    CLASS_FACTORS,
    BarrierWeights,
    MonteCarloNoise,
    PathWeights,
    crack_plane_angles,
    forecast_crack,
    rank_barriers,
)
from slipnet.forecast import _kernels as K
from slipnet.grains import build_grain_graph
from slipnet.maps import OrientationMap, apply_frame_rotation
from slipnet.reports import write_forecast

# The hand-built bicrystal: left grain at the identity orientation, right grain rotated 180°
# about the load axis l = (n + d)/|n + d| with n = (011)/√2, d = [11-1]/√3. The system (011)[11-1]
# then has the largest possible Schmid factor, 0.5, in both grains (l bisects n and d), and in the
# right grain its plane normal is d in the sample frame: R_l(180°) n = 2(l·n)l − n = d.
N_HAND = np.array([0.0, 1.0, 1.0]) / math.sqrt(2.0)
D_HAND = np.array([1.0, 1.0, -1.0]) / math.sqrt(3.0)
L_HAND = (N_HAND + D_HAND) / np.linalg.norm(N_HAND + D_HAND)
SCHMID_ONLY = PathWeights(schmid=1.0, m_prime=0.0, twist=0.0, tilt=0.0)


def _omap(q: np.ndarray, grid: str = "square", indexed=None) -> OrientationMap:
    ny, nx_ = q.shape[:2]
    ind = np.ones((ny, nx_), bool) if indexed is None else indexed
    q = q.copy()
    q[~ind] = np.nan
    return OrientationMap(quats=q, phase=np.where(ind, 0, -1), quality=np.ones((ny, nx_)), indexed=ind,
                          step=1.0, grid=grid)


def _bicrystal(grid: str = "square", shape=(40, 80)) -> OrientationMap:
    q = np.zeros((*shape, 4))
    q[..., 0] = 1.0
    q[:, shape[1] // 2:] = quat_from_axis_angle(L_HAND, 180.0)
    return _omap(q, grid)


@dataclass
class _StandIn:
    """Minimal grain graph over a given label image (for cases a reconstruction would merge)."""

    omap: OrientationMap
    labels: np.ndarray
    mean_quats: np.ndarray
    graph: nx.Graph


def _stand_in(omap, labels, quats, boundary_class, mis_deg, trace_deg) -> _StandIn:
    g = nx.Graph()
    g.add_nodes_from(range(len(quats)))
    a = np.r_[labels[:, :-1].ravel(), labels[:-1, :].ravel()]
    b = np.r_[labels[:, 1:].ravel(), labels[1:, :].ravel()]
    pairs = {(min(u, v), max(u, v)) for u, v in zip(a, b, strict=True) if u != v and u >= 0 and v >= 0}
    for k, (u, v) in enumerate(sorted(pairs)):
        g.add_edge(int(u), int(v), boundary_id=k, misorientation_deg=mis_deg, boundary_class=boundary_class,
                   trace_angle_deg=trace_deg)
    return _StandIn(omap, labels, np.asarray(quats, float), g)


@pytest.fixture(scope="module")
def bicrystal_gg():
    return build_grain_graph(_bicrystal())


@pytest.fixture(scope="module")
def poly_gg():
    """A small random polycrystal from our synthetic generator."""
    from slipnet.synthetic import make_specimen

    spec = make_specimen((120, 120), 1.0, grain_size_um=25.0, unindexed_fraction=0.0, noise_deg=0.0,
                         gradient_deg=0.0, seed=3)
    return build_grain_graph(spec.omap)


# ------------------------------------------------------------------------- crossing geometry
def test_crack_plane_angles_hand_cases():
    # Zhai, Wilkinson & Martin (2000), Acta Mater. 48:4917: twist = angle between the traces of the
    # two crack planes on the boundary plane, tilt = angle between their traces on the surface.
    # Boundary along y (trace 90°), vertical: n_gb = z × b = (-1, 0, 0).
    # n_in = (011)/√2: surface trace n×z ∝ (1,0,0); trace on the boundary n×n_gb ∝ (0,-1,1).
    # n_out = (111)/√3: surface trace ∝ (1,-1,0) → tilt 45°; boundary trace ∝ (0,-1,1) → twist 0.
    tw, ti = crack_plane_angles([0, 1, 1], [1, 1, 1], 90.0)
    assert float(tw) == pytest.approx(0.0, abs=1e-9)
    assert float(ti) == pytest.approx(45.0)
    # n_out = (010): surface trace ∝ (1,0,0) → tilt 0; boundary trace ∝ (0,0,1) → twist 45°.
    tw, ti = crack_plane_angles([0, 1, 1], [0, 1, 0], 90.0)
    assert float(tw) == pytest.approx(45.0)
    assert float(ti) == pytest.approx(0.0, abs=1e-9)
    # inclined boundary: 45° to the surface about its trace (y):
    # n_gb = sin45 (-1,0,0) + cos45 (0,0,1) = (-1,0,1)/√2.
    # n_in = (100): n×n_gb ∝ (0,-1,0); n_out = (001): n×n_gb ∝ (0,-1,0) → twist 0 (both contain y).
    tw, _ = crack_plane_angles([1, 0, 0], [0, 0, 1], 90.0, boundary_inclination_deg=45.0)
    assert float(tw) == pytest.approx(0.0, abs=1e-9)
    # vertical boundary, n_in = (010): n×n_gb = (0,0,1); n_out = (001): n×n_gb = (0,-1,0) → twist 90°
    tw, _ = crack_plane_angles([0, 1, 0], [0, 0, 1], 90.0)
    assert float(tw) == pytest.approx(90.0)
    # a crack plane parallel to the boundary plane has no trace on it: twist reported 0 (documented)
    tw, _ = crack_plane_angles([1, 0, 0], [0, 0, 1], 90.0)
    assert float(tw) == 0.0


# ------------------------------------------------------------------------- the path
def test_bicrystal_path_follows_hand_computed_traces(bicrystal_gg):
    # uniform stress (map mode): the hand-computed Schmid factors hold exactly
    fc = forecast_crack(bicrystal_gg, (5.0, 20.0), (1.0, 0.0), L_HAND, 100.0, zigzag_tol=0.0,
                        path_weights=SCHMID_ONLY, mode="map")
    p = fc.path
    assert list(p["grain"]) == [0, 1]
    # left grain (identity): trace of (011) is n × z ∝ (1, 0, 0): straight along +x at y = 20
    assert p["direction_deg"].iloc[0] == pytest.approx(0.0, abs=1e-9)
    assert p["y1_um"].iloc[0] == pytest.approx(20.0)
    assert p["plane"].iloc[0] == "(011)"
    # the boundary lies between columns 39 and 40 (x = 39.5 µm)
    assert p["x1_um"].iloc[0] == pytest.approx(39.5, abs=0.05)
    # right grain: plane normal d = [11-1]/√3 in the sample frame, trace d × z ∝ (1, -1, 0): -45°
    assert p["direction_deg"].iloc[1] == pytest.approx(-45.0, abs=1e-6)
    assert p["plane"].iloc[1] == "(011)"  # the same crystal plane
    assert p["effective_schmid"].to_numpy() == pytest.approx([0.5, 0.5])
    assert fc.stop_reason == "map_edge"
    # twist/tilt at the boundary by hand (Zhai et al. 2000 definitions), n_gb = (-1, 0, 0):
    # l_in = n × n_gb ∝ (0,-1,1), l_out = d × n_gb ∝ (0,1,1): perpendicular → twist 90°;
    # t_in ∝ (1,0,0), t_out ∝ (1,-1,0) → tilt 45°
    c = fc.crossings.iloc[0]
    assert c["twist_deg"] == pytest.approx(90.0)
    assert c["tilt_deg"] == pytest.approx(45.0)
    # m′ = (n·d)(d·n) = 0 for this pair (Luster & Morris 1995)
    assert c["m_prime"] == pytest.approx(0.0, abs=1e-12)
    assert fc.length_um == pytest.approx(p["length_um"].sum())
    assert p["s_start_um"].iloc[1] == pytest.approx(p["length_um"].iloc[0])


def test_hex_grid_bicrystal_gives_the_same_traces():
    gg = build_grain_graph(_bicrystal("hex", (46, 80)))
    fc = forecast_crack(gg, (5.0, 20.0 * math.sqrt(3) / 2 * 1.0), (1.0, 0.0), L_HAND, 60.0, zigzag_tol=0.0,
                        path_weights=SCHMID_ONLY)
    assert fc.path["direction_deg"].iloc[0] == pytest.approx(0.0, abs=1e-9)
    assert fc.path["direction_deg"].iloc[1] == pytest.approx(-45.0, abs=1e-6)
    assert fc.crossings["twist_deg"].iloc[0] == pytest.approx(90.0, abs=0.5)  # fitted hex trace ≈ 90°


def test_crossing_values_match_slip_and_transmission_modules(poly_gg):
    systems = slip_systems("bcc")
    fc = forecast_crack(poly_gg, (5.0, 60.0), (1.0, 0.0), (0.0, 1.0, 0.0), 150.0, mode="map")  # uniform stress
    assert len(fc.crossings) >= 2
    q = poly_gg.mean_quats
    eff = effective_schmid(schmid_factors(q, (0.0, 1.0, 0.0), systems), systems)
    for r in fc.path.itertuples():
        assert r.effective_schmid == pytest.approx(eff[r.grain, r.system])
    for r in fc.crossings[fc.crossings["branch"] == 0].itertuples():
        # |m′| from slipnet.transmission (Luster & Morris 1995) for the same system pair
        mp = m_prime(q[r.grain_a], q[r.grain_b], systems)
        assert r.m_prime == pytest.approx(mp[r.system_in, r.system_out], abs=1e-9)
        edge = poly_gg.graph.edges[r.grain_a, r.grain_b]
        assert r.boundary_id == edge["boundary_id"]
    # the first segment takes the plane of the highest effective factor in the tip grain
    g0 = fc.path["grain"].iloc[0]
    assert fc.path["effective_schmid"].iloc[0] == pytest.approx(eff[g0].max())


def test_zigzag_alternates_between_tied_planes():
    # identity orientation, load along y, {110}<111> only: (011) (trace along x) and (110)
    # (trace along 45°/135°) tie at m = 1/√6 (common practice: the Schmid factor of the cube
    # orientation under <010> loading)
    q = np.zeros((60, 200, 4))
    q[..., 0] = 1.0
    om = _omap(q)
    gg = _stand_in(om, np.zeros((60, 200), np.int64), q[:1, 0], "high_angle", 0.0, 90.0)
    sysm = slip_systems("bcc", ["{110}<111>"])
    fc = forecast_crack(gg, (5.0, 30.0), (1.0, 0.0), (0.0, 1.0, 0.0), 60.0, systems=sysm, zigzag_tol=0.01,
                        zigzag_step_fraction=0.05)
    legs = fc.path[fc.path["leg"] == "zigzag"]
    assert len(legs) >= 3
    dirs = legs["direction_deg"].to_numpy()
    assert np.all(dirs[:-1] != dirs[1:])  # alternating traces
    assert np.all(np.abs(dirs) < 90.0)  # always forward
    assert fc.path["effective_schmid"].to_numpy() == pytest.approx(1.0 / math.sqrt(6.0))


def test_stage_two_runs_normal_to_the_in_plane_load(bicrystal_gg):
    fc = forecast_crack(bicrystal_gg, (5.0, 20.0), (1.0, 0.2), (0.0, 1.0, 0.0), 50.0, stage2_after_um=0.0)
    assert set(fc.path["stage"]) == {"II"}
    assert fc.path["direction_deg"].to_numpy() == pytest.approx(0.0, abs=1e-9)
    assert fc.path["system"].eq(-1).all()


def test_polyline_tip_and_direction(bicrystal_gg):
    crack = np.array([[0.0, 22.0], [3.0, 21.0], [5.0, 20.0]])
    fc = forecast_crack(bicrystal_gg, crack, None, L_HAND, 30.0)
    assert fc.settings["tip_um"] == [5.0, 20.0]
    d = np.array([2.0, -1.0]) / math.sqrt(5.0)
    assert fc.settings["direction"] == pytest.approx(d.tolist())
    assert fc.settings["initial_crack_um"] == pytest.approx(math.hypot(3, 1) + math.hypot(2, 1))


# ------------------------------------------------------------------------- barriers
def test_identical_orientations_are_no_barrier():
    q = np.zeros((30, 60, 4))
    q[..., 0] = 1.0
    q[...] = quat_from_axis_angle([1.0, 2.0, 3.0], 25.0)
    labels = np.zeros((30, 60), np.int64)
    labels[:, 30:] = 1
    quats = np.repeat(q[:1, 0], 2, axis=0)
    gg = _stand_in(_omap(q), labels, quats, "subgrain", 0.0, 90.0)
    fc = forecast_crack(gg, (3.0, 15.0), (1.0, 0.0), (0.0, 1.0, 0.0), 200.0, zigzag_tol=0.0,
                        decay_length_um=np.inf, mode="map")
    b = fc.barriers.iloc[0]
    assert b["twist_deg"] == pytest.approx(0.0, abs=1e-9)
    assert b["m_prime"] == pytest.approx(1.0)
    assert b["term_schmid_drop"] == pytest.approx(0.0)
    # only the class term of a sub-grain boundary remains
    w = BarrierWeights()
    expect = w.boundary_class * CLASS_FACTORS["subgrain"] / (w.twist + w.transmission + w.boundary_class
                                                            + w.schmid_drop)
    assert b["resistance_score"] == pytest.approx(expect)  # the hand-set score; barrier_score is the fitted one
    assert 0.0 <= b["barrier_score"] <= 1.0
    # the straight trace carries on through the boundary unchanged
    assert fc.path["direction_deg"].nunique() == 1


def test_ninety_degree_twist_ranks_highest_in_a_constructed_set():
    import pandas as pd

    rows = [{"boundary_id": k, "grain_a": k, "grain_b": k + 1, "twist_deg": tw, "tilt_deg": 10.0, "m_prime": 0.5,
             "schmid_in": 0.45, "schmid_out": 0.45, "boundary_class": "high_angle", "distance_um": 10.0,
             "misorientation_deg": 40.0, "x_um": 0.0, "y_um": 0.0, "branch": 0}
            for k, tw in enumerate([0.0, 90.0, 30.0, 60.0, 15.0])]
    ranked = rank_barriers(pd.DataFrame(rows))
    assert list(ranked["twist_deg"]) == [90.0, 60.0, 30.0, 15.0, 0.0]
    assert list(ranked["rank"]) == [1, 2, 3, 4, 5]
    assert ranked["weight_twist"].eq(1.0).all() and ranked["term_twist"].iloc[0] == pytest.approx(1.0)
    # every term is in [0, 1] and the score is the documented weighted mean × relevance
    t = ranked.iloc[0]
    wm = (t.term_twist + t.term_transmission + 0.5 * t.term_class + 0.5 * t.term_schmid_drop) / 3.0
    assert t.barrier_score == pytest.approx(wm * t.relevance)


def test_end_to_end_high_twist_boundary_outranks_a_low_twist_one(bicrystal_gg):
    # the same left grain against a right grain that is a small rotation of it (low twist)
    q = np.zeros((40, 80, 4))
    q[..., 0] = 1.0
    q[:, 40:] = quat_from_axis_angle([0.0, 0.0, 1.0], 20.0)
    low = build_grain_graph(_omap(q))
    # the hand-set resistance ranking (barrier_model="weights") under uniform stress
    kw = dict(zigzag_tol=0.0, decay_length_um=np.inf, max_branches=0, mode="map", barrier_model="weights")
    hi_fc = forecast_crack(bicrystal_gg, (5.0, 20.0), (1.0, 0.0), L_HAND, 60.0, **kw)
    lo_fc = forecast_crack(low, (5.0, 20.0), (1.0, 0.0), L_HAND, 60.0, **kw)
    assert hi_fc.barriers["twist_deg"].iloc[0] > lo_fc.barriers["twist_deg"].iloc[0]
    assert hi_fc.barriers["barrier_score"].iloc[0] > lo_fc.barriers["barrier_score"].iloc[0]


def test_distance_decay_of_relevance(poly_gg):
    fc = forecast_crack(poly_gg, (5.0, 60.0), (1.0, 0.0), (0.0, 1.0, 0.0), 150.0, decay_length_um=40.0)
    b = fc.barriers
    assert b["relevance"].to_numpy() == pytest.approx(np.exp(-b["distance_um"].to_numpy() / 40.0))
    assert b["barrier_score"].is_monotonic_decreasing


# ------------------------------------------------------------------------- sites and field
def test_sites_are_field_peaks_with_shear_band_and_transmission(bicrystal_gg):
    # sites are the peaks of the fitted localisation field (a probability map); each reports the
    # effective resolved shear, the band of its system through the grain and the transmission into the
    # grain the band runs into, and site_score = shear × band × (1 − transmission)
    systems = slip_systems("bcc")
    fc = forecast_crack(bicrystal_gg, (5.0, 20.0), (1.0, 0.0), L_HAND, 100.0, stress_amplitude=150.0,
                        zigzag_tol=0.0, mode="map")
    f = fc.field
    assert f.shape == bicrystal_gg.labels.shape and 0.0 <= f.min() and f.max() <= 1.0
    s = fc.sites
    assert len(s) >= 1 and list(s["rank"]) == list(range(1, len(s) + 1))
    assert s["site_probability"].is_monotonic_decreasing and s["site_probability"].between(0, 1).all()
    ii, jj = bicrystal_gg.omap.index_of(s["x_um"].to_numpy(), s["y_um"].to_numpy())
    assert s["field_value"].to_numpy() == pytest.approx(f[ii, jj])
    top = s.iloc[0]
    # map mode: uniform stress, the identity grain's best system has m = 0.5 (the hand-built bicrystal)
    # times the grain's Young's modulus along the load over the Hill modulus (iso-strain anisotropy)
    from slipnet.stress import IRON_CONSTANTS, directional_modulus, voigt_reuss_hill

    q = bicrystal_gg.mean_quats
    g = int(top["grain"])
    from slipnet.crystal import quat_rotate as rot

    l_crystal = rot(q[g], L_HAND)
    e_ratio = directional_modulus(IRON_CONSTANTS, l_crystal) / voigt_reuss_hill(IRON_CONSTANTS)["young_hill_gpa"]
    eff = effective_schmid(schmid_factors(q[g], L_HAND, systems), systems)
    assert top["resolved_shear_mpa"] == pytest.approx(150.0 * eff.max() * e_ratio, rel=1e-6)
    if top["blocking_grain"] >= 0 and top["band_length_um"] > 0:
        nb = int(top["blocking_grain"])
        eff_b = effective_schmid(schmid_factors(q[nb], L_HAND, systems), systems)
        trans = np.max(m_prime(q[g], q[nb], systems)[int(top["system"])] * eff_b / eff_b.max())
        assert top["transmission_score"] == pytest.approx(trans)
    assert top["site_score_mpa_um"] == pytest.approx(top["resolved_shear_mpa"] * top["band_length_um"]
                                                     * (1.0 - top["transmission_score"]))
    # the map mode says it is the cheaper, weaker mode
    assert "cheaper, weaker" in fc.settings["mode_note"]


# ------------------------------------------------------------------------- invariance
def test_rotating_specimen_and_load_together_leaves_forecast_unchanged():
    rng = np.random.default_rng(5)
    ny, nx_ = 50, 70
    labels = np.zeros((ny, nx_), np.int64)
    labels[:, 25:] = 1
    labels[25:, 25:] = 2
    labels[:, 50:] = 3
    gq = random_quats(4, seed=11)
    q = gq[labels]
    om = _omap(q)
    gg = build_grain_graph(om)
    load = rng.normal(size=3)
    tip, d = np.array([4.0, 30.0]), np.array([1.0, 0.3])
    kw = dict(zigzag_tol=0.0, max_branches=2)
    fc = forecast_crack(gg, tip, d, load, 120.0, **kw)
    # rotate by +90° about z: (x, y) → (−y, x), shifted so the map starts at 0: new[i', j'] = old[ny-1-j', i']
    r = quat_from_axis_angle([0, 0, 1], 90.0)
    om_r = apply_frame_rotation(_omap(np.flipud(q).transpose(1, 0, 2).copy()), r)
    gg_r = build_grain_graph(om_r)
    tip_r = np.array([(ny - 1) - tip[1], tip[0]])
    d_r = np.array([-d[1], d[0]])
    load_r = quat_rotate(r, load)  # v_map' = R v_map (q v q* is the active rotation)
    fc_r = forecast_crack(gg_r, tip_r, d_r, load_r, 120.0, **kw)
    # grain ids are renumbered by the reconstruction: map them through the rotated label image
    old_rot = np.flipud(gg.labels).T
    ids = {int(a): int(b) for a, b in zip(old_rot.ravel(), gg_r.labels.ravel(), strict=True)}
    assert [ids[g] for g in fc.path["grain"]] == list(fc_r.path["grain"])
    assert fc_r.length_um == pytest.approx(fc.length_um, abs=1.0)
    assert fc_r.path["length_um"].to_numpy() == pytest.approx(fc.path["length_um"].to_numpy(), abs=1.0)
    pairs = [tuple(sorted((ids[a], ids[b]))) for a, b in zip(fc.barriers["grain_a"], fc.barriers["grain_b"],
                                                                strict=True)]
    pairs_r = [tuple(sorted((a, b))) for a, b in zip(fc_r.barriers["grain_a"], fc_r.barriers["grain_b"],
                                                     strict=True)]
    assert pairs == pairs_r
    assert fc_r.barriers["twist_deg"].to_numpy() == pytest.approx(fc.barriers["twist_deg"].to_numpy(), abs=1e-6)


# ------------------------------------------------------------------------- edge cases
def test_tip_outside_the_map_is_refused(bicrystal_gg):
    with pytest.raises(ParameterError, match="outside the map"):
        forecast_crack(bicrystal_gg, (-10.0, 20.0), (1.0, 0.0), L_HAND, 50.0)


def test_tip_on_an_unindexed_point_is_refused_and_unindexed_runs_stop_or_cross():
    q = np.zeros((30, 80, 4))
    q[..., 0] = 1.0
    q[:, 40:] = quat_from_axis_angle(L_HAND, 180.0)
    ind = np.ones((30, 80), bool)
    ind[:, 20:28] = False
    gg = build_grain_graph(_omap(q, indexed=ind))
    with pytest.raises(ParameterError, match="unindexed"):
        forecast_crack(gg, (21.0, 15.0), (0.0, 1.0), L_HAND, 50.0)
    stop = forecast_crack(gg, (5.0, 15.0), (1.0, 0.0), L_HAND, 100.0, zigzag_tol=0.0)
    assert stop.stop_reason == "unindexed"  # an 8-point run is longer than the default 5-step gap
    assert stop.path["x1_um"].iloc[-1] == pytest.approx(19.5, abs=0.05)
    walk = forecast_crack(gg, (5.0, 15.0), (1.0, 0.0), L_HAND, 100.0, zigzag_tol=0.0, unindexed_gap_um=9.0)
    # the unindexed column splits the left crystal in two grains that the graph does not join: the
    # crossing is recorded where the next grain begins, without a boundary id
    assert walk.path["x1_um"].iloc[0] == pytest.approx(27.5, abs=0.3)
    assert walk.crossings["boundary_id"].iloc[0] == -1 and walk.length_um > 30.0
    cross = forecast_crack(gg, (5.0, 15.0), (1.0, 0.0), L_HAND, 100.0, zigzag_tol=0.0, unindexed="cross")
    assert cross.length_um > 30.0 and cross.path["x1_um"].max() > 40.0


def test_tip_on_a_boundary_starts_in_the_grain_it_faces(bicrystal_gg):
    fwd = forecast_crack(bicrystal_gg, (39.5, 20.0), (1.0, 0.0), L_HAND, 20.0, zigzag_tol=0.0)
    back = forecast_crack(bicrystal_gg, (39.5, 20.0), (-1.0, 0.0), L_HAND, 20.0, zigzag_tol=0.0)
    assert fwd.path["grain"].iloc[0] == 1 and fwd.settings["start_grain"] == 1
    assert back.path["grain"].iloc[0] == 0


def test_zero_or_negative_horizon_is_refused(bicrystal_gg):
    for h in (0.0, -5.0):
        with pytest.raises(ParameterError, match="horizon"):
            forecast_crack(bicrystal_gg, (5.0, 20.0), (1.0, 0.0), L_HAND, h)


def test_bad_vectors_and_options_are_refused(bicrystal_gg):
    with pytest.raises(ParameterError, match="direction"):
        forecast_crack(bicrystal_gg, (5.0, 20.0), (0.0, 0.0), L_HAND, 10.0)
    with pytest.raises(ParameterError, match="load_axis"):
        forecast_crack(bicrystal_gg, (5.0, 20.0), (1.0, 0.0), (0.0, 0.0, 0.0), 10.0)
    with pytest.raises(ParameterError, match="stress_ratio"):
        forecast_crack(bicrystal_gg, (5.0, 20.0), (1.0, 0.0), L_HAND, 10.0, stress_ratio=1.0)
    with pytest.raises(ParameterError, match="unindexed"):
        forecast_crack(bicrystal_gg, (5.0, 20.0), (1.0, 0.0), L_HAND, 10.0, unindexed="jump")


def test_load_along_the_surface_normal(bicrystal_gg):
    # stage I is defined (Schmid factors exist) …
    fc = forecast_crack(bicrystal_gg, (5.0, 20.0), (1.0, 0.0), (0.0, 0.0, 1.0), 30.0)
    assert fc.length_um == pytest.approx(30.0) and set(fc.path["stage"]) == {"I"}
    # … but stage II has no direction: every in-plane direction is normal to the load
    with pytest.raises(ParameterError, match="surface normal"):
        forecast_crack(bicrystal_gg, (5.0, 20.0), (1.0, 0.0), (0.0, 0.0, 1.0), 30.0, stage2_after_um=10.0)


def test_horizon_stops_the_path(bicrystal_gg):
    fc = forecast_crack(bicrystal_gg, (5.0, 20.0), (1.0, 0.0), L_HAND, 12.0)
    assert fc.stop_reason == "horizon"
    assert fc.length_um == pytest.approx(12.0)
    assert len(fc.barriers) == 0


# ------------------------------------------------------------------------- Monte Carlo
def test_monte_carlo_is_seeded_and_bounded(poly_gg):
    kw = dict(samples=6, noise=MonteCarloNoise(orientation_deg=3.0, load_deg=3.0, tip_um=1.0, weights=0.3))
    a = forecast_crack(poly_gg, (5.0, 60.0), (1.0, 0.0), (0.0, 1.0, 0.0), 80.0, seed=4, **kw)
    b = forecast_crack(poly_gg, (5.0, 60.0), (1.0, 0.0), (0.0, 1.0, 0.0), 80.0, seed=4, **kw)
    c = forecast_crack(poly_gg, (5.0, 60.0), (1.0, 0.0), (0.0, 1.0, 0.0), 80.0, seed=5, **kw)
    assert a.samples.equals(b.samples)
    assert not a.samples[["tip_x_um", "load_x"]].equals(c.samples[["tip_x_um", "load_x"]])
    for col in ("p_on_path", "p_top_k"):
        assert a.barriers[col].between(0, 1).all()
    assert a.sites["p_present"].between(0, 1).all()
    assert len(a.samples) == 6


def test_monte_carlo_without_noise_reproduces_the_nominal_forecast(poly_gg):
    zero = MonteCarloNoise(orientation_deg=0.0, load_deg=0.0, tip_um=0.0, weights=0.0, fitted_weights=False)
    fc = forecast_crack(poly_gg, (5.0, 60.0), (1.0, 0.0), (0.0, 1.0, 0.0), 80.0, samples=3, noise=zero, top_k=2,
                        mode="map", barrier_model="weights")
    on = fc.barriers[fc.barriers["on_path"]]
    assert on["p_on_path"].eq(1.0).all()
    assert fc.barriers["p_top_k"].to_numpy() == pytest.approx((fc.barriers["rank"] <= 2).astype(float).to_numpy())
    # without noise every sample repeats the nominal field: each site comes back, with its own probability
    assert fc.sites["p_present"].eq(1.0).all()
    assert fc.sites["p_hit"].to_numpy() == pytest.approx(fc.sites["site_probability"].to_numpy())
    assert fc.barriers["p_drop"].to_numpy() == pytest.approx(fc.barriers["drop_probability"].to_numpy())
    assert fc.samples["path_length_um"].to_numpy() == pytest.approx(fc.length_um)


# ------------------------------------------------------------------------- kernels and outputs
def test_march_kernel_matches_its_python_version():
    rng = np.random.default_rng(0)
    labels = rng.integers(-1, 3, size=(20, 30)).astype(np.int64)
    labels[5:15, 5:25] = 1
    for hexgrid in (False, True):
        args = (labels, hexgrid, 0.0, 0.0, 1.0, 0.866 if hexgrid else 1.0, 10.0, 8.0, 0.6, 0.8, 1, 0.25, 50.0, 1.0)
        assert K.march_ray(*args) == pytest.approx(K.march_ray.py_func(*args))


def test_write_forecast_outputs_and_caution(tmp_path, bicrystal_gg):
    fc = forecast_crack(bicrystal_gg, (5.0, 20.0), (1.0, 0.0), L_HAND, 60.0, samples=2)
    out = write_forecast(fc, tmp_path, bicrystal_gg)
    for key in ("path_csv", "barriers_json", "sites_csv", "samples_csv", "map_png", "terms_png", "summary"):
        assert out[key].exists()
    assert CAUTION in (tmp_path / "summary.md").read_text(encoding="utf-8")
    import pandas as pd

    back = pd.read_csv(out["barriers_csv"])
    assert list(back["rank"]) == list(fc.barriers["rank"])


def test_private_numpy_rotations_match_the_orientation_module():
    from slipnet.crystal import matrix_from_quat, quat_multiply
    from slipnet.crystal.perturb import _qmul
    from slipnet.forecast._geometry import _matrices

    a, b = random_quats(20, seed=1), random_quats(20, seed=2)
    assert _matrices(a) == pytest.approx(matrix_from_quat(a), abs=1e-12)
    assert _qmul(a, b) == pytest.approx(quat_multiply(a, b), abs=1e-12)


@pytest.mark.slow
def test_stress_field_replaces_the_uniform_schmid_factors(bicrystal_gg):
    from slipnet.stress import grain_schmid_factors, solve_elastic

    systems = slip_systems("bcc")
    field = solve_elastic(bicrystal_gg.omap, L_HAND, 100.0, tol=1e-4)
    fc = forecast_crack(bicrystal_gg, (5.0, 20.0), (1.0, 0.0), L_HAND, 60.0, stress_field=field, zigzag_tol=0.0)
    local = effective_schmid(grain_schmid_factors(field, bicrystal_gg, systems), systems)
    for r in fc.path.itertuples():
        assert r.effective_schmid == pytest.approx(local[r.grain, r.system])
    assert fc.settings["stress_field"] is True


# ------------------------------------------------------------------------- command line and demo
def test_forecast_command_line(tmp_path):
    from slipnet.cli import main
    from slipnet.io import write_map

    src = write_map(_bicrystal(), tmp_path / "bicrystal.npz")
    out = tmp_path / "out"
    args = ["forecast", str(src), "--tip", "5", "20", "--direction", "1", "0", "--load-axis",
            *map(str, L_HAND), "--horizon", "60", "--samples", "2", "--out", str(out),
            "--save-graph", str(tmp_path / "graph.npz")]
    assert main(args) == 0
    assert (out / "forecast_barriers.csv").exists() and (out / "forecast_map.png").exists()
    assert CAUTION in (out / "summary.md").read_text(encoding="utf-8")
    # the saved graph gives the same forecast without rebuilding the grains
    out2 = tmp_path / "out2"
    assert main(["forecast", "--graph", str(tmp_path / "graph.npz"), "--tip", "5", "20", "--direction", "1",
                 "0", "--load-axis", *map(str, L_HAND), "--horizon", "60", "--samples", "2", "--out", str(out2)]) == 0
    import pandas as pd

    for table in ("path", "crossings", "barriers", "sites"):
        pd.testing.assert_frame_equal(pd.read_csv(out / f"forecast_{table}.csv"),
                                      pd.read_csv(out2 / f"forecast_{table}.csv"))
    # a clear error (exit code 2) without a tip
    assert main(["forecast", str(src), "--load-axis", *map(str, L_HAND), "--out", str(tmp_path / "x")]) == 2


def test_forecast_refuses_a_crafted_pickle_as_graph(tmp_path, capsys):
    import pickle

    from slipnet.cli import main

    class Payload:
        def __reduce__(self):  # would run code on unpickling
            return (print, ("code ran",))

    bad = tmp_path / "graph.npz"
    bad.write_bytes(pickle.dumps(Payload()))
    code = main(["forecast", "--graph", str(bad), "--tip", "5", "20", "--direction", "1", "0", "--load-axis",
                 *map(str, L_HAND), "--out", str(tmp_path / "o")])
    captured = capsys.readouterr()
    assert code == 2 and "code ran" not in captured.out
    assert "saved grain graph" in captured.err and str(bad) in captured.err
    assert not (tmp_path / "o").exists()
    # an npz archive holding a pickled object array is refused too
    import numpy as np

    np.savez(tmp_path / "objects.npz", graph_meta=np.array([Payload()], dtype=object))
    code = main(["forecast", "--graph", str(tmp_path / "objects.npz"), "--tip", "5", "20", "--direction", "1", "0",
                 "--load-axis", *map(str, L_HAND), "--out", str(tmp_path / "o")])
    captured = capsys.readouterr()
    assert code == 2 and "code ran" not in captured.out and "pickled" in captured.err


def test_forecast_writer_from_a_notch_root(tmp_path):
    from slipnet.reports.forecast import write_forecast
    from slipnet.synthetic import make_specimen

    spec = make_specimen((80, 100), 2.0, grain_size_um=30.0, notch={"depth_um": 20.0, "root_radius_um": 4.0}, seed=2)
    gg = build_grain_graph(spec.omap)
    fc = forecast_crack(gg, spec.notch_root, spec.notch_direction, spec.load_axis, 120.0, samples=8, seed=1)
    write_forecast(fc, tmp_path / "forecast", gg)
    assert fc.length_um > 0 and fc.samples is not None and len(fc.samples) == 8
    assert (tmp_path / "forecast" / "summary.md").exists()


def test_alternative_paths_branch_from_main_path_crossings(poly_gg):
    fc = forecast_crack(poly_gg, (5.0, 60.0), (1.0, 0.0), (0.0, 1.0, 0.0), 150.0, branch_tol=0.5, max_branches=3)
    alts = fc.alternatives
    assert 1 <= alts["branch"].nunique() <= 3
    starts = alts.groupby("branch").first()
    cross = fc.crossings
    for b, r in starts.iterrows():
        # each alternative starts where some path (main or earlier branch) crossed a boundary
        c = cross[cross["branch"] == b].iloc[0]
        assert (r["x0_um"], r["y0_um"]) == pytest.approx((c["x_um"], c["y_um"]))
        assert r["grain"] == c["grain_b"]
    assert set(fc.barriers["on_path"]) <= {True, False}
    assert fc.barriers.loc[fc.barriers["on_path"], "branches"].str.split(";").map(lambda b: "0" in b).all()
    none = forecast_crack(poly_gg, (5.0, 60.0), (1.0, 0.0), (0.0, 1.0, 0.0), 150.0, max_branches=0)
    assert len(none.alternatives) == 0 and none.barriers["on_path"].all()


def test_nearest_point_kernel_agrees_with_the_map(poly_gg):
    rng = np.random.default_rng(3)
    for grid in ("square", "hex"):
        om = _omap(np.tile([1.0, 0.0, 0.0, 0.0], (9, 11, 1)), grid)
        x, y = rng.uniform(-1.0, 12.0, 200), rng.uniform(-1.0, 9.0, 200)
        i, j = om.index_of(x, y)
        got = np.array([K.nearest_point(grid == "hex", 0.0, 0.0, 1.0, om.row_spacing, 9, 11, a, b)
                        for a, b in zip(x, y, strict=True)])
        # ties (points exactly halfway) are measure-zero for uniform draws
        assert np.array_equal(got[:, 0], i) and np.array_equal(got[:, 1], j)


def test_rank_barriers_of_nothing_is_an_empty_table():
    import pandas as pd

    out = rank_barriers(pd.DataFrame())
    assert len(out) == 0 and {"rank", "barrier_score", "twist_deg", "m_prime"} <= set(out.columns)
    with pytest.raises(ParameterError, match="decay_length_um"):
        rank_barriers(pd.DataFrame(), decay_length_um=0.0)


def test_geometry_is_cached_per_graph(bicrystal_gg, poly_gg):
    from slipnet.forecast._geometry import geometry_of

    a = geometry_of(bicrystal_gg)
    assert geometry_of(bicrystal_gg) is a
    b = geometry_of(poly_gg)
    assert b is not a and b.labels.shape == poly_gg.labels.shape
    fc1 = forecast_crack(bicrystal_gg, (5.0, 20.0), (1.0, 0.0), L_HAND, 60.0)
    fc2 = forecast_crack(bicrystal_gg, (5.0, 20.0), (1.0, 0.0), L_HAND, 60.0)
    assert fc1.path.equals(fc2.path) and fc1.sites.equals(fc2.sites)


def test_one_perturbation_stream_for_forecast_and_notch():
    # the forecast and the notch planner draw their Monte Carlo inputs through one helper, in one order
    import numpy as np

    from slipnet.crystal import perturb_sample

    q0 = random_quats(5, seed=3)
    a = perturb_sample(np.random.default_rng(9), q0, 1.5, [0.0, 1.0, 0.0], 2.0, (0.0, 0.0), 1.0)
    b = perturb_sample(np.random.default_rng(9), q0, 1.5, [0.0, 1.0, 0.0], 2.0, (0.0, 0.0), 1.0)
    for x, y in zip(a, b, strict=True):
        np.testing.assert_array_equal(x, y)
    # switching one spread off leaves the draws of the others unchanged
    c = perturb_sample(np.random.default_rng(9), q0, 1.5, [0.0, 1.0, 0.0], 0.0, (0.0, 0.0), 1.0)
    np.testing.assert_array_equal(c[0], a[0])
    np.testing.assert_array_equal(c[2], a[2])
    assert c[1].tolist() == [0.0, 1.0, 0.0]


# ------------------------------------------------------------------------- the rebuilt predictor
@pytest.fixture(scope="module")
def notched():
    from slipnet.maps import NotchShape
    from slipnet.synthetic import make_specimen

    spec = make_specimen((40, 40), 3.0, grain_size_um=20.0, notch=NotchShape(24.0, 7.0), notch_side="left",
                         load_axis=(0.0, 1.0, 0.0), seed=2)
    root = np.asarray(spec.notch_root)
    crack = np.stack([root, root + 9.0 * np.asarray(spec.notch_direction)])
    return build_grain_graph(spec.omap), crack


def test_elastic_mode_cuts_the_crack_in_and_peaks_ahead_of_its_tip(notched):
    gg, crack = notched
    fc = forecast_crack(gg, crack, None, (0.0, 1.0, 0.0), 60.0, stress_amplitude=150.0)
    st = fc.settings
    assert st["mode"] == "elastic" and st["crack_cut_in"] and st["free_edges"] == ["left"]
    assert "slit" in st["stress_assumptions"] and "not a validation" not in st["mode_note"]
    f = fc.field
    assert 0.0 <= f.min() and f.max() <= 1.0
    top = fc.sites.iloc[0]
    # the strongest site lies near the crack tip, within a couple of grains (the notch-tip field)
    assert math.hypot(top["x_um"] - crack[-1, 0], top["y_um"] - crack[-1, 1]) < 40.0
    assert fc.barriers["barrier_score"].between(0, 1).all()
    assert fc.barriers["barrier_score"].is_monotonic_decreasing
    # the same solve given back as stress_field gives the same forecast
    from slipnet.forecast import crack_aware_stress

    solved = crack_aware_stress(gg.omap, (0.0, 1.0, 0.0), 150.0, crack=crack)
    again = forecast_crack(gg, crack, None, (0.0, 1.0, 0.0), 60.0, stress_amplitude=150.0, stress_field=solved)
    assert again.field == pytest.approx(f)
    with pytest.raises(ParameterError, match="mode='map'"):
        forecast_crack(gg, crack, None, (0.0, 1.0, 0.0), 60.0, mode="map", stress_field=object())
    with pytest.raises(ParameterError, match="mode"):
        forecast_crack(gg, crack, None, (0.0, 1.0, 0.0), 60.0, mode="plastic")


def test_monte_carlo_probabilities_are_seeded_and_bounded_in_the_elastic_mode(notched):
    gg, crack = notched
    kw = dict(samples=3, stress_amplitude=150.0)
    a = forecast_crack(gg, crack, None, (0.0, 1.0, 0.0), 60.0, seed=2, **kw)
    b = forecast_crack(gg, crack, None, (0.0, 1.0, 0.0), 60.0, seed=2, workers=2, **kw)  # the same on threads
    assert a.sites["p_hit"].equals(b.sites["p_hit"]) and a.barriers["p_drop"].equals(b.barriers["p_drop"])
    for col in ("p_hit", "p_present", "p_top_k"):
        assert a.sites[col].between(0, 1).all()
    assert a.barriers["p_drop"].between(0, 1).all()


def test_growth_along_a_forecast_lists_boundary_and_zone_dips(notched):
    from slipnet.growth import simulate_growth

    gg, crack = notched
    fc = forecast_crack(gg, crack, None, (0.0, 1.0, 0.0), 90.0, stress_amplitude=150.0)
    g = simulate_growth(fc, 150.0, n_points=300, samples=0)
    assert set(g.dips["kind"]) == {"boundary", "zone"}  # this path meets both kinds
    assert g.path.n_zones >= 1  # the field reaches 0.5 somewhere on the path ahead of the crack
    assert (g.profile["zone_factor"] <= 1.0).all() and (g.profile["zone_factor"] > 0.0).all()


# ------------------------------------------------------------------------- the forecast window
@pytest.mark.parametrize("grid,mode,with_crack", [("square", "map", False), ("hex", "map", True),
                                                  ("square", "elastic", True)])
def test_windowed_features_equal_the_whole_map_computation(grid, mode, with_crack):
    # the forecast computes its point features on a window around the tip; inside the window they
    # must be the whole-map features (localisation_features, kept as the reference) to round-off
    from slipnet.forecast import crack_aware_stress
    from slipnet.forecast._geometry import geometry_of
    from slipnet.forecast._window import forecast_window
    from slipnet.forecast.features import localisation_features, window_features
    from slipnet.maps import NotchShape
    from slipnet.synthetic import make_specimen

    spec = make_specimen((90, 110), 1.0, grid=grid, grain_size_um=14.0, notch=NotchShape(20.0, 6.0),
                         notch_side="left", load_axis=(0.0, 1.0, 0.0), seed=6)
    gg = build_grain_graph(spec.omap)
    geo = geometry_of(gg)
    tip = np.array([45.0, 48.0])
    crack = np.stack([tip - [12.0, 2.0], tip]) if with_crack else None
    field = crack_aware_stress(gg.omap, (0.0, 1.0, 0.0), 200.0) if mode == "elastic" else None
    kw = dict(mode=mode, crack=crack, stress_field=field, systems=slip_systems("bcc"))
    full = localisation_features(gg, tip, (1.0, 0.1), (0.0, 1.0, 0.0), **kw)
    win = forecast_window(gg, geo, tip, 25.0)
    part = window_features(gg, geo, win, tip, (1.0, 0.1), (0.0, 1.0, 0.0), **kw)
    r0, r1, c0, c1 = part.window
    assert 0 < (r1 - r0) * (c1 - c0) < 0.7 * gg.labels.size  # a real window, not the map
    sl = (slice(r0, r1), slice(c0, c1))
    np.testing.assert_array_equal(part.solid, full.solid[sl])
    np.testing.assert_array_equal(part.best_system, full.best_system[sl])
    for name, values in part.features.items():
        np.testing.assert_allclose(values, full.features[name][sl], rtol=1e-12, atol=1e-15, err_msg=name)


def test_forecast_field_is_the_whole_map_field_within_the_horizon(poly_gg):
    from slipnet.forecast import load_weights
    from slipnet.forecast.features import localisation_features
    from slipnet.forecast.localise import predict_field

    tip, horizon = np.array([5.0, 60.0]), 50.0
    fc = forecast_crack(poly_gg, tip, (1.0, 0.0), (0.0, 1.0, 0.0), horizon, mode="map")
    ref = predict_field(localisation_features(poly_gg, tip, (1.0, 0.0), (0.0, 1.0, 0.0), mode="map"), load_weights())
    x, y = poly_gg.omap.coordinates()
    disc = np.hypot(x - tip[0], y - tip[1]) <= horizon + load_weights().drop_radius_um
    np.testing.assert_allclose(fc.field[disc], ref[disc], rtol=1e-12, atol=1e-15)
    # outside the window the field is not computed: 0, and the window is much smaller than the map
    assert (fc.field[x > tip[0] + 2.0 * horizon] == 0.0).all() and (ref[x > tip[0] + 2.0 * horizon] > 0).any()


def test_monte_carlo_gives_the_same_numbers_on_any_number_of_workers(poly_gg):
    kw = dict(samples=70, seed=5, noise=MonteCarloNoise(orientation_deg=3.0, load_deg=3.0, tip_um=1.5, weights=0.3))
    one = forecast_crack(poly_gg, (5.0, 60.0), (1.0, 0.0), (0.0, 1.0, 0.0), 60.0, mode="map", workers=1, **kw)
    two = forecast_crack(poly_gg, (5.0, 60.0), (1.0, 0.0), (0.0, 1.0, 0.0), 60.0, mode="map", workers=2, **kw)
    assert len(one.samples) == 70  # more than one batch of draws
    assert one.samples.equals(two.samples)
    for col in ("p_on_path", "p_top_k", "p_drop"):
        np.testing.assert_array_equal(one.barriers[col], two.barriers[col])
    for col in ("p_hit", "p_present", "p_top_k"):
        np.testing.assert_array_equal(one.sites[col], two.sites[col])
    assert 0.0 < one.barriers["p_on_path"].max() <= 1.0 and one.samples["tip_x_um"].nunique() > 60
    with pytest.raises(ParameterError, match="workers"):
        forecast_crack(poly_gg, (5.0, 60.0), (1.0, 0.0), (0.0, 1.0, 0.0), 60.0, mode="map", workers=0)


def test_peak_kernel_makes_the_greedy_choice_of_a_stable_sort():
    # field_peaks picks peaks in one kernel; the rule is the greedy suppression over a stable sort
    from slipnet.forecast.features import field_peaks
    from slipnet.forecast.localise import _GridShim

    rng = np.random.default_rng(0)
    for _ in range(60):
        ny, nx_ = (int(v) for v in rng.integers(5, 40, 2))
        v = np.round(rng.random((ny, nx_)), 1)  # many ties
        reg = rng.random((ny, nx_)) < 0.8
        jj, ii = np.meshgrid(np.arange(nx_), np.arange(ny))
        x, y = 0.7 * jj + 0.35 * (ii % 2), 0.6 * ii
        k, sep = int(rng.integers(1, 12)), float(rng.uniform(0.0, 5.0))
        got = field_peaks(v, reg, _GridShim(x, y), k, sep)
        idx = np.flatnonzero(reg.ravel())
        order = idx[np.argsort(-v.ravel()[idx], kind="stable")]
        px, py = x.ravel()[order], y.ravel()[order]
        alive, want = np.ones(order.size, bool), []
        while len(want) < k and alive.any():
            p = int(np.flatnonzero(alive)[0])
            want.append((px[p], py[p]))
            alive &= (px - px[p]) ** 2 + (py - py[p]) ** 2 >= sep ** 2
            alive[p] = False if sep > 0 else alive[p]
        np.testing.assert_array_equal(got, np.asarray(want, float).reshape(-1, 2))


def test_plane_angle_kernel_matches_crack_plane_angles():
    from slipnet.forecast._kernels import plane_angles

    rng = np.random.default_rng(4)
    for _ in range(200):
        n_in, n_out = rng.normal(size=3), rng.normal(size=(12, 3))
        n_out[0] = 2.0 * n_in  # the same plane: both angles 0
        n_out[1] = (0.0, 0.0, 1.0)  # parallel to the surface: no surface trace, tilt reported 0
        trace, incl = rng.uniform(0.0, 180.0), float(rng.choice([90.0, rng.uniform(1.0, 179.0)]))
        twist, tilt = np.empty(12), np.empty(12)
        plane_angles(n_in, n_out, trace, incl, twist, tilt)
        want = crack_plane_angles(n_in, n_out, trace, incl)
        np.testing.assert_allclose(twist, want[0], rtol=0, atol=1e-11)
        np.testing.assert_allclose(tilt, want[1], rtol=0, atol=1e-11)


def test_monte_carlo_field_plan_equals_the_window_features(poly_gg):
    # the map-mode Monte Carlo computes each sample's field in one kernel pass over the window
    from slipnet.crystal import perturb_sample
    from slipnet.forecast import load_weights
    from slipnet.forecast._geometry import geometry_of
    from slipnet.forecast._window import forecast_window
    from slipnet.forecast.features import MapFieldPlan, window_features
    from slipnet.forecast.localise import predict_field

    geo, systems, wts = geometry_of(poly_gg), slip_systems("bcc"), load_weights()
    tip = np.array([5.0, 60.0])
    win = forecast_window(poly_gg, geo, tip, 45.0)
    plan = MapFieldPlan(poly_gg, geo, win, tip, (1.0, 0.0), (0.0, 1.0, 0.0), systems)
    rng = np.random.default_rng(1)
    for rep in (None, 3, 7):
        q, _ld, dt = perturb_sample(rng, np.asarray(poly_gg.mean_quats), 2.0, (0.0, 1.0, 0.0), 2.0, tip, 1.0)
        inp = window_features(poly_gg, geo, win, tip + dt, (1.0, 0.0), (0.0, 1.0, 0.0), mode="map", systems=systems,
                              mean_quats=q)
        got_inp, got = plan.sample(q, (0.0, 1.0, 0.0), tip + dt, (1.0, 0.0), wts.model("map", "field"), rep)
        np.testing.assert_array_equal(got_inp.solid, inp.solid)
        np.testing.assert_allclose(got, predict_field(inp, wts, rep), rtol=1e-12, atol=1e-14)
        np.testing.assert_allclose(got_inp.tau, inp.tau, rtol=1e-12, atol=1e-15)

"""Tests of the slip-system catalogue, Schmid factors, resolved shear, traces and Taylor factors."""

from __future__ import annotations

import itertools

import numpy as np
import pandas as pd
import pytest
from _stubs import bicrystal_graph_stub

from slipnet.crystal import _slip_kernels as K
from slipnet.crystal import (
    effective_schmid,
    matrix_from_quat,
    plane_inclinations,
    quat_from_axis_angle,
    random_quats,
    resolved_shear,
    schmid_factors,
    schmid_summary,
    slip_systems,
    slip_trace_angles,
    taylor_factor,
)
from slipnet.errors import ParameterError
from slipnet.maps import OrientationMap, Phase
from slipnet.slip import grain_schmid_table, slip_trace_table

IDENTITY = np.array([1.0, 0.0, 0.0, 0.0])


# ------------------------------------------------------------------------------------- catalogue
@pytest.mark.parametrize(
    ("structure", "family", "count"),
    # counts of the cubic slip systems: 12, 12, 24, 12 (Hull & Bacon 2011, Introduction to
    # Dislocations, 5th ed., ch. 3; common practice)
    [("bcc", "{110}<111>", 12), ("bcc", "{112}<111>", 12), ("bcc", "{123}<111>", 24), ("fcc", "{111}<110>", 12)],
)
def test_catalogue_counts_and_orthogonality(structure, family, count):
    s = slip_systems(structure, family)
    assert len(s) == count
    assert np.allclose(np.einsum("ij,ij->i", s.normals, s.normals), 1.0)
    assert np.allclose(np.einsum("ij,ij->i", s.normals, s.directions), 0.0)
    # every system distinct, also up to the sign of both vectors
    keys = {tuple(np.round(np.outer(n, d).ravel(), 9)) for n, d in zip(s.normals, s.directions, strict=True)}
    assert len(keys) == count
    assert set(s.families) == {family}


def test_catalogue_planes_match_orix_symmetrisation():
    # orix (reference library) generates the {hkl} plane families of point group m-3m
    from orix.crystal_map import Phase as OrixPhase
    from orix.vector import Miller

    ph = OrixPhase(point_group="m-3m")
    s = slip_systems("bcc", "all")
    for fam, hkl in (("{110}<111>", [1, 1, 0]), ("{112}<111>", [1, 1, 2]), ("{123}<111>", [1, 2, 3])):
        ref = Miller(hkl=hkl, phase=ph).symmetrise(unique=True).unit.data
        ours = s.normals[s.families == fam]
        ref_set = {tuple(np.round(v * np.sign(v[np.flatnonzero(np.abs(v) > 1e-9)[0]]), 6)) for v in ref}
        our_set = {tuple(np.round(v, 6)) for v in ours}
        assert our_set == ref_set


def test_labels_and_defaults():
    s = slip_systems()
    assert s.structure == "bcc" and s.family_names == ("{110}<111>", "{112}<111>")
    assert len(s) == 24
    assert "(01-1)[111]" in set(s.labels)
    assert np.all(s.crss == 1.0) and np.all(s.crss_reverse == 1.0)
    assert s.burgers_length == pytest.approx(np.sqrt(3) / 2)  # a/2<111>, common practice
    assert slip_systems("fcc").burgers_length == pytest.approx(1 / np.sqrt(2))  # a/2<110>


def test_twinning_sense_of_112_systems_reproduces_the_bcc_twin():
    """Positive shear of 1/√2 on every {112}<111> system must carry BCC onto its mirror image.

    BCC twin: K1 = {112}, η1 = <111>, twinning shear s = 1/√2 (Christian & Mahajan 1995, Prog.
    Mater. Sci. 39:1). The opposite (anti-twinning) sense with the same shear must *not* give a
    lattice point, so this test fails if the sense convention is flipped.
    """
    s = slip_systems("bcc", "{112}<111>")
    rng = range(-2, 3)
    pts = np.array(list(itertools.product(rng, rng, rng)), float)
    pts = np.concatenate([pts, pts + 0.5])  # BCC lattice, a = 1

    def is_bcc(v):
        t = 2 * v
        ok_int = np.all(np.abs(t - np.rint(t)) < 1e-9, axis=1)
        par = np.rint(t).astype(int) % 2
        return ok_int & (np.all(par == 0, axis=1) | np.all(par == 1, axis=1))

    for n, d in zip(s.normals, s.directions, strict=True):
        mirror = np.eye(3) - 2 * np.outer(n, n)
        for sign, expect in ((1.0, True), (-1.0, False)):
            f = np.eye(3) + sign * (1 / np.sqrt(2)) * np.outer(d, n)
            twin = (pts @ f.T) @ mirror.T
            off_plane = np.abs(pts @ n) > 1e-9
            assert bool(np.all(is_bcc(twin[off_plane]))) is expect
    assert "(112)[-1-11]" in set(s.labels)


def test_crss_and_asymmetry_weights():
    s = slip_systems("bcc", "all", crss={"{112}<111>": 2.0}, twinning_asymmetry=1.5)
    m112 = s.families == "{112}<111>"
    assert np.all(s.crss[m112] == 2.0) and np.all(s.crss_reverse[m112] == 3.0)
    assert np.all(s.crss[~m112] == 1.0) and np.all(s.crss_reverse[~m112] == 1.0)
    f = np.zeros((2, len(s)))
    k = int(np.flatnonzero(m112)[0])
    f[0, k], f[1, k] = 0.3, -0.3
    e = effective_schmid(f, s)
    assert e[0, k] == pytest.approx(0.15) and e[1, k] == pytest.approx(0.1)
    assert s.max_effective == pytest.approx(0.5)


@pytest.mark.parametrize(
    ("kwargs", "match"),
    [
        ({"structure": "hcp"}, "structure"),
        ({"structure": "bcc", "families": ["{111}<110>"]}, "unknown for bcc"),
        ({"structure": "bcc", "families": []}, "at least one"),
        ({"structure": "bcc", "crss": {"{110}<111>": 0.0}}, "crss"),
        ({"structure": "bcc", "crss": {"{999}<111>": 1.0}}, "unknown for bcc"),
        ({"structure": "bcc", "twinning_asymmetry": -1}, "twinning_asymmetry"),
    ],
)
def test_bad_catalogue_inputs(kwargs, match):
    with pytest.raises(ParameterError, match=match):
        slip_systems(**kwargs)


# ------------------------------------------------------------------------------------- Schmid factors
@pytest.mark.parametrize(
    ("family", "axis", "expected"),
    [
        # Hand derivation, {110}<111>:
        # [001]: n=(011)/√2, d=[1-11]/√3 -> (1/√2)(1/√3) = 1/√6 = 0.408
        # [011]: n=(101)/√2 -> n·l = 1/2; d=[-111]/√3 -> d·l = 2/√6 -> 0.408
        # [111]: n=(101)/√2 -> n·l = 2/√6; d=[11-1]/√3 -> d·l = 1/3 -> 0.272
        # (tabulated the same in Hosford 1993, The Mechanics of Crystals and Textured
        # Polycrystals, for the equivalent FCC {111}<110> geometry -- from memory)
        ("{110}<111>", [0, 0, 1], 1 / np.sqrt(6)),
        ("{110}<111>", [0, 1, 1], 1 / np.sqrt(6)),
        ("{110}<111>", [1, 1, 1], (2 / np.sqrt(6)) / 3),
        # Hand derivation, {112}<111>:
        # [001]: n=(112)/√6 -> 2/√6; d=[-1-11]/√3 -> 1/√3 -> 2/√18 = 0.471
        # [011]: n=(211)/√6 -> 2/√12; d=[-111]/√3 -> 2/√6 -> 0.471
        # [111]: n=(112)/√6 -> 4/√18; d=[11-1]/√3 -> 1/3 -> 4/(9√2) = 0.314
        ("{112}<111>", [0, 0, 1], 2 / np.sqrt(18)),
        ("{112}<111>", [0, 1, 1], 2 / np.sqrt(18)),
        ("{112}<111>", [1, 1, 1], 4 / (9 * np.sqrt(2))),
    ],
)
def test_textbook_largest_schmid_factors(family, axis, expected):
    s = slip_systems("bcc", family)
    # a cubic-equivalent orientation gives the same largest factor
    q = np.stack([IDENTITY, quat_from_axis_angle([1, 1, 1], 120.0), quat_from_axis_angle([0, 0, 1], 90.0)])
    m = np.abs(schmid_factors(q, axis, s)).max(axis=1)
    np.testing.assert_allclose(m, expected, atol=1e-12)


def test_schmid_factors_never_exceed_half_and_summary_matches():
    s = slip_systems("bcc", "all")
    q = random_quats(3000, seed=11)
    axis = [0.3, -0.5, 0.8]
    m = schmid_factors(q, axis, s)
    assert np.abs(m).max() <= 0.5 + 1e-12  # |cos λ cos φ| ≤ 1/2 (Schmid & Boas 1935)
    summ = schmid_summary(q, axis, s)
    a = np.abs(m)
    np.testing.assert_allclose(summ["schmid_max"], a.max(axis=1))
    np.testing.assert_array_equal(summ["system_max"], a.argmax(axis=1))
    srt = np.sort(a, axis=1)
    np.testing.assert_allclose(summ["schmid_second"], srt[:, -2])
    np.testing.assert_allclose(summ["effective_max"], effective_schmid(m, s).max(axis=1))
    np.testing.assert_array_equal(summ["sense_max"], np.sign(m[np.arange(len(q)), summ["system_max"]]))
    # float32 output and tiny chunks give the same numbers
    m32 = schmid_factors(q, axis, s, dtype=np.float32, chunk_size=7)
    assert m32.dtype == np.float32
    np.testing.assert_allclose(m32, m, atol=1e-6)


def test_schmid_factors_agree_with_orix():
    # reference library: orix Orientation * Vector3d gives the crystal-frame load axis
    from orix.quaternion import Orientation
    from orix.vector import Vector3d

    s = slip_systems("bcc", "all")
    q = random_quats(200, seed=3)
    axis = np.array([1.0, 2.0, -0.5])
    lc = (Orientation(q) * Vector3d(axis / np.linalg.norm(axis))).data
    ref = (lc @ s.normals.T) * (lc @ s.directions.T)
    np.testing.assert_allclose(schmid_factors(q, axis, s), ref, atol=1e-12)


def test_sachs_factor_of_random_orientations():
    q = random_quats(40000, seed=5)
    fcc = np.abs(schmid_factors(q, [0, 0, 1], slip_systems("fcc"))).max(axis=1)
    bcc = np.abs(schmid_factors(q, [0, 0, 1], slip_systems("bcc", "{110}<111>"))).max(axis=1)
    # {110}<111> is {111}<110> with planes and directions swapped: identical largest factors
    np.testing.assert_allclose(bcc, fcc, atol=1e-12)
    # Sachs (1928, Z. Ver. Dtsch. Ing. 72:734) average of 1/m for random {111}<110>: 2.24
    # (from memory, as quoted in Hosford 1993); sampling error here ~0.002.
    assert np.mean(1.0 / bcc) == pytest.approx(2.24, abs=0.015)


def test_nan_rows_and_shapes():
    s = slip_systems()
    q = np.stack([IDENTITY, np.full(4, np.nan)]).reshape(1, 2, 4)
    m = schmid_factors(q, [0, 0, 1], s)
    assert m.shape == (1, 2, len(s))
    assert np.all(np.isfinite(m[0, 0])) and np.all(np.isnan(m[0, 1]))
    summ = schmid_summary(q, [0, 0, 1], s)
    assert summ["system_max"].shape == (1, 2) and summ["system_max"][0, 1] == -1


@pytest.mark.parametrize("axis", [[0, 0, 0], [np.nan, 0, 1], [1, 2, 3, 4]])
def test_bad_load_axis(axis):
    with pytest.raises(ParameterError, match="load_axis"):
        schmid_factors(IDENTITY, axis, slip_systems())


def test_schmid_kernel_py_func_matches_compiled():
    s = slip_systems("bcc", "all")
    q = random_quats(20, seed=1)
    q[3] = np.nan
    load = np.array([0.0, 0.6, 0.8])
    a = np.empty((20, len(s)))
    b = np.empty((20, len(s)))
    nt, dt = np.ascontiguousarray(s.normals.T), np.ascontiguousarray(s.directions.T)
    K.schmid_rows(q, load, nt, dt, a)
    K.schmid_rows.py_func(q, load, nt, dt, b)
    from slipnet.crystal import quat_rotate

    lc = quat_rotate(q, load)
    np.testing.assert_allclose(a, (lc @ s.normals.T) * (lc @ s.directions.T), equal_nan=True, atol=1e-12)
    np.testing.assert_allclose(a, b, equal_nan=True)
    outs = [[np.empty(20), np.empty(20, np.int64), np.empty(20), np.empty(20, np.int64), np.empty(20),
             np.empty(20, np.int64), np.empty(20, np.int8)] for _ in range(2)]
    K.schmid_summary_rows(q, load, nt, dt, 1 / s.crss, 1 / s.crss_reverse, *outs[0])
    K.schmid_summary_rows.py_func(q, load, nt, dt, 1 / s.crss, 1 / s.crss_reverse, *outs[1])
    for x, y in zip(*outs, strict=True):
        np.testing.assert_array_equal(x, y)


# ------------------------------------------------------------------------------------- resolved shear
def test_resolved_shear_uniaxial_equals_stress_times_schmid():
    s = slip_systems("bcc", "all")
    q = random_quats(50, seed=9)
    axis = np.array([0.2, 0.9, -0.3])
    axis /= np.linalg.norm(axis)
    tau = resolved_shear(q, 250.0 * np.outer(axis, axis), s)
    np.testing.assert_allclose(tau, 250.0 * schmid_factors(q, axis, s), atol=1e-9)


def test_resolved_shear_general_tensor_against_numpy_and_py_func():
    s = slip_systems("fcc")
    q = random_quats(30, seed=2)
    rng = np.random.default_rng(0)
    a = rng.normal(size=(30, 3, 3)) * 100
    sig = a + np.swapaxes(a, 1, 2)
    g = matrix_from_quat(q)
    sc = g @ sig @ np.swapaxes(g, 1, 2)
    ref = np.einsum("sa,nab,sb->ns", s.directions, sc, s.normals)
    np.testing.assert_allclose(resolved_shear(q, sig, s), ref, atol=1e-9)
    out = np.empty((30, len(s)))
    K.resolved_shear_rows.py_func(q, sig, s.normals, s.directions, out)
    np.testing.assert_allclose(out, ref, atol=1e-9)


def test_resolved_shear_bad_stress():
    s = slip_systems()
    with pytest.raises(ParameterError, match="symmetric"):
        resolved_shear(IDENTITY, [[0, 1, 0], [0, 0, 0], [0, 0, 0]], s)
    with pytest.raises(ParameterError, match=r"\(3, 3\)"):
        resolved_shear(IDENTITY, np.eye(2), s)
    with pytest.raises(ParameterError, match="one per orientation"):
        resolved_shear(random_quats(3, 0), np.zeros((2, 3, 3)), s)


# ------------------------------------------------------------------------------------- traces
def test_trace_angles_hand_cases():
    s = slip_systems("bcc", "{110}<111>")
    ang = slip_trace_angles(IDENTITY, s)
    inc = plane_inclinations(IDENTITY, s)
    by_plane = {tuple(h): (a, i) for h, a, i in zip(s.plane_hkl.tolist(), ang, inc, strict=True)}
    # (110): normal (1,1,0)/√2 -> trace (1,-1): 135°, perpendicular to the surface
    assert by_plane[(1, 1, 0)][0] == pytest.approx(135.0)
    assert by_plane[(1, 1, 0)][1] == pytest.approx(90.0)
    # (1-10): trace (−1,−1) ~ (1,1): 45°
    assert by_plane[(1, -1, 0)][0] == pytest.approx(45.0)
    # (101): normal (1,0,1)/√2 -> trace along y: 90°, inclined 45°
    assert by_plane[(1, 0, 1)][0] == pytest.approx(90.0)
    assert by_plane[(1, 0, 1)][1] == pytest.approx(45.0)
    # (011): trace along x: 0°
    assert by_plane[(0, 1, 1)][0] == pytest.approx(0.0)
    # plane parallel to the surface: (001) is not a slip plane, so use a rotated crystal
    q = quat_from_axis_angle([1, 0, 0], 45.0)  # brings a (011) normal onto z
    a2 = slip_trace_angles(q, s)
    assert np.isnan(a2).sum() == 2  # the two systems on that plane


def test_trace_angles_are_perpendicular_to_the_projected_normal():
    s = slip_systems("bcc", "all")
    q = random_quats(40, seed=4)
    ang = np.deg2rad(slip_trace_angles(q, s))
    g = matrix_from_quat(q)
    ns = np.einsum("nji,sj->nsi", g, s.normals)  # gᵀ n
    t = np.stack([np.cos(ang), np.sin(ang)], axis=-1)
    np.testing.assert_allclose(np.einsum("nsi,nsi->ns", t, ns[..., :2]), 0.0, atol=1e-9)
    assert np.all((ang >= 0) & (ang < np.pi))
    out_a, out_i = np.empty((40, len(s))), np.empty((40, len(s)))
    K.trace_rows.py_func(q, s.normals, out_a, out_i)
    np.testing.assert_allclose(out_a, ang, atol=1e-12)


# ------------------------------------------------------------------------------------- Taylor
def test_taylor_single_crystal_values():
    s = slip_systems("fcc")
    # Bishop & Hill (1951, Phil. Mag. 42:1298) single-crystal Taylor factors for {111}<110>:
    # <100> √6 = 2.449, <110> and <111> 3.674 (from memory)
    m = taylor_factor(np.stack([IDENTITY] * 3), [0, 0, 1], s)
    assert m == pytest.approx(np.sqrt(6))
    assert taylor_factor(IDENTITY, [1, 1, 1], s) == pytest.approx(3.674, abs=1e-3)
    assert taylor_factor(IDENTITY, [0, 1, 1], s) == pytest.approx(3.674, abs=1e-3)


def test_taylor_random_average_bishop_hill():
    q = random_quats(300, seed=21)
    m = taylor_factor(q, [0, 0, 1], slip_systems("fcc"))
    # Bishop & Hill (1951): random {111}<110> polycrystal average 3.06 (from memory; Taylor 1938
    # gave 3.1). Sampling error with 300 orientations ~0.025.
    assert np.mean(m) == pytest.approx(3.06, abs=0.06)
    # pencil-glide-like BCC with more systems can only need less shear
    mb = taylor_factor(q[:40], [0, 0, 1], slip_systems("bcc", "all"))
    mf = taylor_factor(q[:40], [0, 0, 1], slip_systems("bcc", "{110}<111>"))
    assert np.all(mb <= mf + 1e-9)


def test_taylor_nan_and_duplicates():
    q = np.stack([IDENTITY, np.full(4, np.nan), IDENTITY])
    m = taylor_factor(q, [0, 0, 1], slip_systems("fcc"))
    assert np.isnan(m[1]) and m[0] == m[2]


# ------------------------------------------------------------------------------------- grain tables
_two_grain_graph = bicrystal_graph_stub


def test_grain_schmid_table_and_trace_table():
    gg = _two_grain_graph()
    s = slip_systems("bcc", "all")
    t = grain_schmid_table(gg, [1, 0, 0], s, taylor=True)
    m = schmid_factors(gg.mean_quats, [1, 0, 0], s)
    np.testing.assert_allclose(t["schmid_max"], np.abs(m).max(axis=1))
    assert t.loc[0, "label_max"] == s.labels[t.loc[0, "system_max"]]
    assert (t["second_to_max_ratio"] <= 1).all()
    assert t["taylor_factor"].notna().all()
    tr = slip_trace_table(gg, [1, 0, 0], s, n_planes=2)
    assert len(tr) == 4 and set(tr["rank"]) == {1, 2}
    for g in (0, 1):
        rows = tr[tr["grain"] == g]
        assert s.plane_index[rows["system"].iloc[0]] != s.plane_index[rows["system"].iloc[1]]
        assert rows["effective_schmid"].iloc[0] >= rows["effective_schmid"].iloc[1]


def test_grains_of_other_structure_are_skipped():
    gg = _two_grain_graph()
    t = grain_schmid_table(gg, [1, 0, 0], slip_systems("fcc"))
    assert t["schmid_max"].isna().all() and (t["system_max"] == -1).all()


@pytest.mark.slow  # ~25 s on a cold numba cache (compiles the transmission kernel and loads matplotlib)
def test_write_slip_outputs_writes_tables_pictures_and_caution(tmp_path):
    from slipnet.cautions import CAUTION
    from slipnet.reports.slip import write_slip
    from slipnet.slip import slip_activity, with_slip_annotations

    gg = _two_grain_graph()
    act = slip_activity(gg, [1, 0, 0], slip_systems("bcc", "all"))
    files = write_slip(act, gg, tmp_path / "slip")
    assert set(files) >= {"grains", "traces", "transmission", "systems", "summary"}
    for name in ("grains_slip.csv", "slip_traces.csv", "transmission.csv", "systems.csv", "schmid_map.png",
                 "transmission_map.png", "slip_traces.png", "summary.md"):
        assert (tmp_path / "slip" / name).stat().st_size > 0
    text = (tmp_path / "slip" / "summary.md").read_text(encoding="utf-8")
    assert CAUTION in text and "ASSUMED" in text
    back = pd.read_csv(tmp_path / "slip" / "grains_slip.csv")
    np.testing.assert_allclose(back["schmid_max"], act.grains["schmid_max"])
    from slipnet.grains import build_grain_graph

    real = build_grain_graph(gg.omap)  # a real (frozen) GrainGraph of the same bicrystal
    gg = real
    act = slip_activity(real, [1, 0, 0], slip_systems("bcc", "all"))
    annotated = with_slip_annotations(real, act)
    assert "schmid_max" in annotated.graph.nodes[0] and "transmission_ab" in annotated.graph.edges[0, 1]
    assert "schmid_max" not in gg.graph.nodes[0]  # the caller's graph is left as it was


def test_point_schmid_maps_mask_unindexed_and_other_phases():
    from slipnet.crystal import point_schmid_maps

    euler = np.zeros((3, 4, 3))
    euler[:, 2:] = [45.0, 30.0, 0.0]
    euler[0, 0] = np.nan  # unindexed
    phase = np.zeros((3, 4), np.int32)
    phase[2, :] = 1  # an FCC island
    omap = OrientationMap.from_euler(euler, step=1.0, phase=phase,
                                     phases=(Phase("ferrite", "bcc", 0.2866), Phase("austenite", "fcc", 0.3591)))
    s = slip_systems("bcc")
    maps = point_schmid_maps(omap, [1, 0, 0], s)
    assert maps["schmid_max"].shape == (3, 4)
    assert np.isnan(maps["schmid_max"][0, 0]) and np.all(np.isnan(maps["schmid_max"][2]))
    assert maps["system_max"][0, 0] == -1
    ref = np.abs(schmid_factors(omap.quats[1, 3], [1, 0, 0], s)).max()
    assert maps["schmid_max"][1, 3] == pytest.approx(ref)

"""Orientation maths against orix, scipy and published crystallographic values."""

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from orix.quaternion import Orientation
from orix.quaternion.symmetry import Oh
from orix.vector import Vector3d
from scipy.spatial.transform import Rotation

from slipnet.crystal import (
    CUBIC_OPERATORS,
    disorientation,
    disorientation_angle,
    euler_from_quat,
    matrix_from_quat,
    misorientation,
    nearest_equivalent,
    quat_conjugate,
    quat_from_axis_angle,
    quat_from_euler,
    quat_from_matrix,
    quat_multiply,
    quat_rotate,
    random_quats,
    reduce_cubic,
)
from slipnet.crystal import orientation_kernels as K
from slipnet.errors import ParameterError


def _random_euler(n, seed):
    rng = np.random.default_rng(seed)
    return rng.random((n, 3)) * [360.0, 180.0, 360.0]


def test_euler_to_quat_matches_orix():
    # Reference: orix (Johnstone et al., orix, Zenodo) Orientation.from_euler, Bunge convention.
    e = _random_euler(2000, 1)
    ours = quat_from_euler(e)
    ref = Orientation.from_euler(np.deg2rad(e)).data
    ref = np.where(ref[:, :1] < 0, -ref, ref)
    np.testing.assert_allclose(ours, ref, atol=1e-12)


def test_matrix_matches_scipy_passive_bunge():
    # Reference: scipy Rotation; Bunge angles are intrinsic Z-X-Z, and the orientation matrix g
    # (sample -> crystal) is the transpose of the active rotation (Bunge 1982, Texture Analysis
    # in Materials Science).
    e = _random_euler(500, 2)
    g = matrix_from_quat(quat_from_euler(e))
    active = Rotation.from_euler("ZXZ", e, degrees=True).as_matrix()
    np.testing.assert_allclose(g, np.transpose(active, (0, 2, 1)), atol=1e-12)


def test_rotation_of_vectors_matches_orix():
    # Reference: orix, where Orientation * Vector3d maps sample vectors into the crystal frame.
    e = _random_euler(300, 3)
    q = quat_from_euler(e)
    v = np.random.default_rng(4).normal(size=(300, 3))
    ref = (Orientation.from_euler(np.deg2rad(e)) * Vector3d(v)).data
    np.testing.assert_allclose(quat_rotate(q, v), ref, atol=1e-12)
    np.testing.assert_allclose(np.einsum("nij,nj->ni", matrix_from_quat(q), v), ref, atol=1e-12)


def test_round_trips():
    e = _random_euler(1000, 5)
    q = quat_from_euler(e)
    np.testing.assert_allclose(quat_from_euler(euler_from_quat(q)), q, atol=1e-12)
    np.testing.assert_allclose(quat_from_matrix(matrix_from_quat(q)), q, atol=1e-12)
    # Degenerate Phi = 0 and 180 deg still round-trip as rotations.
    edge = np.array([[30.0, 0.0, 20.0], [10.0, 180.0, 50.0]])
    qe = quat_from_euler(edge)
    assert np.all(disorientation_angle(quat_from_euler(euler_from_quat(qe)), qe) < 1e-5)
    assert np.allclose(np.abs(np.sum(quat_from_euler(euler_from_quat(qe)) * qe, axis=-1)), 1.0)


def test_product_inverse_and_kernel_py_func():
    q = random_quats(50, seed=6)
    p = random_quats(50, seed=7)
    ident = quat_multiply(q, quat_conjugate(q))
    np.testing.assert_allclose(np.abs(ident[:, 0]), 1.0, atol=1e-12)
    # Composition: rotating by p then q equals rotating by q*p.
    v = np.random.default_rng(8).normal(size=(50, 3))
    np.testing.assert_allclose(quat_rotate(quat_multiply(q, p), v), quat_rotate(q, quat_rotate(p, v)), atol=1e-12)
    # The jitted kernel and its pure-Python source agree.
    out_jit = np.empty(50)
    out_py = np.empty(50)
    K.disorientation_angle_rows(q, p, out_jit)
    K.disorientation_angle_rows.py_func(q, p, out_py)
    np.testing.assert_allclose(out_jit, out_py, atol=1e-12)


def test_cubic_operators_form_the_group_432():
    ops = CUBIC_OPERATORS
    assert ops.shape == (24, 4)
    np.testing.assert_allclose(np.linalg.norm(ops, axis=1), 1.0)
    # Closure: every product is again one of the 24 (up to sign).
    prod = quat_multiply(ops[:, None, :], ops[None, :, :]).reshape(-1, 4)
    overlap = np.abs(prod @ ops.T).max(axis=1)
    np.testing.assert_allclose(overlap, 1.0, atol=1e-12)
    # Same set as orix's proper cubic point group 432 (Oh's proper part).
    ref = Oh.data[: len(Oh.data)][np.asarray(~Oh.improper)]
    assert np.abs(np.abs(ops @ ref.T).max(axis=1) - 1.0).max() < 1e-12


def test_disorientation_matches_orix():
    # Reference: orix Orientation.angle_with with Oh symmetry on both sides.
    e1, e2 = _random_euler(5000, 9), _random_euler(5000, 10)
    o1 = Orientation.from_euler(np.deg2rad(e1), symmetry=Oh)
    o2 = Orientation.from_euler(np.deg2rad(e2), symmetry=Oh)
    ref = np.rad2deg(o1.angle_with(o2))
    ours = disorientation_angle(quat_from_euler(e1), quat_from_euler(e2))
    assert np.abs(ours - ref).max() <= 1e-6
    ang, _axis = disorientation(quat_from_euler(e1), quat_from_euler(e2))
    assert np.abs(ang - ref).max() <= 1e-6


def test_mackenzie_distribution():
    # Mackenzie (1958), Biometrika 45:229: random cube pairs have a maximum disorientation of
    # 62.8 deg and a mean of about 40.7 deg (from memory; the mean checked here against a large
    # orix-free sample is stable to 0.1 deg).
    n = 400_000
    a = disorientation_angle(random_quats(n, seed=11), random_quats(n, seed=12))
    assert 62.0 < a.max() <= 62.81
    assert abs(a.mean() - 40.7) < 0.2
    # Mackenzie (1958): below 45 deg the density is (24/pi)(1 - cos theta), so the share of pairs
    # below t is (24/pi)(t - sin t), 0.68 % at 10 deg.
    frac = np.mean(a < 10.0)
    t = np.deg2rad(10.0)
    assert abs(frac - 24 / np.pi * (t - np.sin(t))) < 0.002


@pytest.mark.parametrize(
    ("axis", "angle", "sigma"),
    [
        # CSL misorientations for cubic lattices, angle = 2 atan(y sqrt(N) / x) with N = h²+k²+l²
        # (Ranganathan 1966, Acta Cryst. 21:197; tabulated by Grimmer, Bollmann & Warrington 1974,
        # Acta Cryst. A30:197).
        ([1, 1, 1], 2 * np.degrees(np.arctan(np.sqrt(3) / 3)), 3),  # 60.00 deg
        ([1, 0, 0], 2 * np.degrees(np.arctan(1 / 3)), 5),  # 36.87 deg
        ([1, 1, 1], 2 * np.degrees(np.arctan(np.sqrt(3) / 5)), 7),  # 38.21 deg
        ([1, 1, 0], 2 * np.degrees(np.arctan(np.sqrt(2) / 4)), 9),  # 38.94 deg
        ([1, 1, 0], 2 * np.degrees(np.arctan(np.sqrt(2) / 3)), 11),  # 50.48 deg
    ],
)
def test_csl_misorientations_reduce_to_tabulated_angles(axis, angle, sigma):
    tabulated = {3: 60.0, 5: 36.87, 7: 38.21, 9: 38.94, 11: 50.48}[sigma]
    assert abs(angle - tabulated) < 0.01
    qa = random_quats(200, seed=sigma)
    dq = quat_from_axis_angle(axis, angle)
    qb = quat_multiply(dq, qa)
    # Scramble both sides with symmetry operators: the disorientation must not change.
    rng = np.random.default_rng(sigma)
    qa_s = quat_multiply(CUBIC_OPERATORS[rng.integers(0, 24, 200)], qa)
    qb_s = quat_multiply(CUBIC_OPERATORS[rng.integers(0, 24, 200)], qb)
    ang, ax = disorientation(qa_s, qb_s)
    np.testing.assert_allclose(ang, angle, atol=1e-6)
    ref_axis = np.sort(np.abs(axis) / np.linalg.norm(axis))[::-1]
    np.testing.assert_allclose(ax, np.broadcast_to(ref_axis, ax.shape), atol=1e-6)


def test_reduce_and_nearest_equivalent():
    q = random_quats(1000, seed=13)
    r = reduce_cubic(q)
    assert np.all(disorientation_angle(q, r) < 1e-4)
    # The reduced copy has the smallest rotation angle: its w is the closed-form maximum.
    w_max = np.array([K.cubic_max_w_single(x) for x in q])
    np.testing.assert_allclose(r[:, 0], w_max, atol=1e-12)
    ref = random_quats(1, seed=14)[0]
    n = nearest_equivalent(q, ref)
    np.testing.assert_allclose(np.abs(n @ ref), np.cos(np.deg2rad(disorientation_angle(q, ref)) / 2), atol=1e-9)


def test_misorientation_convention():
    qa = random_quats(10, seed=15)
    qb = random_quats(10, seed=16)
    dq = misorientation(qa, qb)
    # dq maps crystal A vectors into crystal B: dq * (qa v) == qb v.
    v = np.random.default_rng(17).normal(size=(10, 3))
    np.testing.assert_allclose(quat_rotate(dq, quat_rotate(qa, v)), quat_rotate(qb, v), atol=1e-12)


def test_broadcasting():
    qa = random_quats(6, seed=18).reshape(2, 3, 4)
    qb = random_quats(1, seed=19)[0]
    out = disorientation_angle(qa, qb)
    assert out.shape == (2, 3)
    np.testing.assert_allclose(out[1, 2], disorientation_angle(qa[1, 2], qb))


def test_bad_inputs():
    with pytest.raises(ParameterError, match="3 components"):
        quat_from_euler([1.0, 2.0])
    with pytest.raises(ParameterError, match="finite"):
        quat_from_euler([np.nan, 0, 0])
    with pytest.raises(ParameterError, match="4 components"):
        disorientation_angle(np.zeros(3), np.zeros(4))
    with pytest.raises(ParameterError, match="non-zero"):
        quat_from_axis_angle([0, 0, 0], 10)
    with pytest.raises(ParameterError, match="unit quaternions"):
        euler_from_quat([2.0, 0, 0, 0])
    with pytest.raises(ParameterError, match="proper rotations"):
        quat_from_matrix(np.diag([1.0, 1.0, -1.0]))


quat_strategy = st.tuples(*[st.floats(-1, 1, allow_nan=False)] * 4).filter(
    lambda t: 0.1 < sum(x * x for x in t)
)


def _unit(t):
    q = np.asarray(t, dtype=float)
    return q / np.linalg.norm(q)


@settings(max_examples=200, deadline=None)
@given(quat_strategy, quat_strategy, st.integers(0, 23), st.integers(0, 23))
def test_disorientation_properties(a, b, i, j):
    # Properties of a disorientation under the cubic group (common practice).
    qa, qb = _unit(a), _unit(b)
    d = float(disorientation_angle(qa, qb))
    assert 0.0 <= d <= 62.81
    assert abs(d - float(disorientation_angle(qb, qa))) < 1e-6
    qa2 = quat_multiply(CUBIC_OPERATORS[i], qa)
    qb2 = quat_multiply(CUBIC_OPERATORS[j], qb)
    assert abs(d - float(disorientation_angle(qa2, qb2))) < 1e-6


def test_closed_form_angle_by_atan_equals_the_atan2_form():
    # issue 17: the closed form takes atan(|v|/w) (w >= 1/2 for the best equivalent of a unit
    # quaternion) instead of atan2(|v|, w); the same angle to rounding, near zero and at the largest
    # disorientations, and 0 for the zero quaternion as atan2 gives
    rng = np.random.default_rng(4)
    small = quat_from_axis_angle(rng.normal(size=(2000, 3)), 10.0 ** rng.uniform(-9, 0, 2000))
    q = np.concatenate([random_quats(20000, seed=3), small, reduce_cubic(random_quats(2000, seed=5))])
    srt = -np.sort(-np.abs(q), axis=1)
    a, b, c, d = srt.T
    w = np.maximum.reduce([a, (a + b) / np.sqrt(2), 0.5 * (a + b + c + d)])
    v2 = np.where(w == 0.5 * (a + b + c + d), 0.25 * ((a - b) ** 2 + (a - c) ** 2 + (a - d) ** 2 + (b - c) ** 2
                                                       + (b - d) ** 2 + (c - d) ** 2),
                  np.where(w == (a + b) / np.sqrt(2), 0.5 * (a - b) ** 2 + c * c + d * d, b * b + c * c + d * d))
    ref = 2.0 * np.arctan2(np.sqrt(v2), w)
    got = np.array([K.closed_form_angle(*r) for r in srt[:3000]])
    np.testing.assert_allclose(got, ref[:3000], rtol=1e-15, atol=1e-18)
    out = np.empty(len(q))
    K.disorientation_angle_rows(q, np.tile([1.0, 0.0, 0.0, 0.0], (len(q), 1)), out)
    np.testing.assert_allclose(out, ref, rtol=1e-14, atol=1e-17)
    assert K.closed_form_angle(0.0, 0.0, 0.0, 0.0) == 0.0
    assert np.isnan(K.closed_form_angle(np.nan, 0.0, 0.0, 0.0))


def test_csl_deviation_picks_the_closest_equivalent_like_the_full_search():
    from slipnet.crystal.csl import csl_rotations

    table = csl_rotations()
    cq = table[["qw", "qx", "qy", "qz"]].to_numpy()
    equiv = np.ascontiguousarray(quat_multiply(cq[:, None, :], CUBIC_OPERATORS[None, :, :]))
    rng = np.random.default_rng(8)
    near = quat_multiply(cq[rng.integers(0, len(cq), 300)],
                         quat_from_axis_angle(rng.normal(size=(300, 3)), rng.uniform(0, 4, 300)))
    dq = np.concatenate([misorientation(random_quats(300, seed=1), random_quats(300, seed=2)), near])
    angle = disorientation_angle(dq, [1.0, 0.0, 0.0, 0.0])
    limit = 3 * table["brandon_limit_deg"].to_numpy()
    out = np.empty((len(dq), len(table)))
    K.csl_deviation(dq, angle, equiv, table["angle_deg"].to_numpy(), limit, out)
    # the full search: the smallest disorientation between dq and every C·S (numpy, no kernel)
    full = disorientation_angle(np.repeat(dq[:, None, None, :], len(table), 1), equiv[None])
    ref = full.min(axis=2)
    skip = np.abs(angle[:, None] - table["angle_deg"].to_numpy()[None]) > limit[None]
    assert np.all(np.isinf(out[skip]))
    np.testing.assert_allclose(out[~skip], ref[~skip], atol=1e-9)
    assert (~skip).sum() > 300  # the near-CSL cases are compared, not skipped

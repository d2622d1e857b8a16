"""Tests of the synthetic specimen generator and the demo specimen."""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import stats
from scipy.sparse import coo_matrix
from scipy.sparse.csgraph import connected_components
from scipy.spatial.transform import Rotation

from slipnet.crystal import CUBIC_OPERATORS, disorientation_angle, quat_multiply, quat_rotate
from slipnet.errors import ParameterError
from slipnet.maps import NotchShape
from slipnet.synthetic import demo_specimen, make_specimen

# ------------------------------------------------------------------------------------------ helpers


def _grain_ecd(spec, *, interior: bool = True) -> np.ndarray:
    """Equivalent circle diameters (µm) of the truth grains, optionally without edge-cut grains."""
    lab = spec.truth_labels
    area = np.bincount(lab[lab >= 0], minlength=spec.n_grains) * spec.omap.point_area
    ecd = np.sqrt(4.0 * area / math.pi)
    if not interior:
        return ecd
    edge = np.zeros(spec.n_grains, dtype=bool)
    for side in (lab[0], lab[-1], lab[:, 0], lab[:, -1]):
        edge[side[side >= 0]] = True
    return ecd[~edge]


def _neighbour_pairs(shape, grid):
    """Flat index pairs of grid neighbours (4 on square, 6 on hexagonal grids), built by hand."""
    ny, nx = shape
    idx = np.arange(ny * nx).reshape(ny, nx)
    pairs = [(idx[:, :-1], idx[:, 1:])]
    if grid == "square":
        pairs.append((idx[:-1], idx[1:]))
    else:
        for i in range(ny - 1):  # per row: rows are few; hex lower neighbours depend on row parity
            if i % 2 == 0:
                pairs += [(idx[i], idx[i + 1]), (idx[i, 1:], idx[i + 1, :-1])]
            else:
                pairs += [(idx[i], idx[i + 1]), (idx[i, :-1], idx[i + 1, 1:])]
    a = np.concatenate([p[0].ravel() for p in pairs])
    b = np.concatenate([p[1].ravel() for p in pairs])
    return a, b


def _mackenzie_cdf(theta_deg):
    """Mackenzie (1958, Biometrika 45:229) CDF of cubic disorientation angles, valid up to 60°.

    Density pieces (per radian; from memory, and they match the histogram of our disorientation
    angles, which test_orientation checks against orix): 24/π·(1 − cos θ) below 45°,
    24/π·[3(√2 − 1) sin θ − 2(1 − cos θ)] from 45° to 60°.
    """
    t = np.radians(np.asarray(theta_deg, dtype=float))
    q = math.pi / 4
    c1 = lambda x: x - np.sin(x)  # noqa: E731  ∫(1 − cos)
    k = 3 * (math.sqrt(2) - 1)
    c2 = lambda x: -k * np.cos(x) - 2 * (x - np.sin(x))  # noqa: E731
    low = c1(np.minimum(t, q))
    high = np.where(t > q, c2(np.maximum(t, q)) - c2(q), 0.0)
    return 24 / math.pi * (low + high)


# ------------------------------------------------------------------------------------------ grains


@pytest.mark.parametrize("grid", ["square", "hex"])
@pytest.mark.parametrize("size", [12.0, 25.0])
def test_mean_grain_size_is_the_requested_equivalent_circle_diameter(grid, size):
    spec = make_specimen((360, 360), 1.0, grid=grid, grain_size_um=size, gradient_deg=0.0, noise_deg=0.0,
                         unindexed_fraction=0.0, seed=11)
    ecd = _grain_ecd(spec)
    assert ecd.size > 80
    # Mean ECD of the grains not cut by the map edge: common practice in grain sizing from
    # orientation maps (ASTM E2627 counts only whole grains; from memory).
    assert ecd.mean() == pytest.approx(size, rel=0.08)
    # log-normal-like spread, neither a uniform honeycomb nor wildly dispersed
    assert 0.12 < np.std(np.log(ecd)) < 0.45


def test_grains_are_connected_on_both_grids():
    for grid in ("square", "hex"):
        spec = make_specimen((150, 150), 1.0, grid=grid, grain_size_um=15.0, unindexed_fraction=0.0, seed=2)
        lab = spec.truth_labels.ravel()
        a, b = _neighbour_pairs(spec.omap.shape, grid)
        same = lab[a] == lab[b]
        n = lab.size
        graph = coo_matrix((np.ones(same.sum()), (a[same], b[same])), shape=(n, n))
        n_comp, _ = connected_components(graph, directed=False)
        # power cells are convex: each grain is one connected patch of grid points
        assert n_comp == spec.n_grains


def test_labels_and_orientations_reproducible_per_seed():
    kw = dict(grain_size_um=15.0, second_phase_fraction=0.05, notch={"depth_um": 30.0, "opening_deg": 45.0},
              notch_side="bottom")
    s1 = make_specimen((120, 140), 1.0, seed=5, **kw)
    s2 = make_specimen((120, 140), 1.0, seed=5, **kw)
    s3 = make_specimen((120, 140), 1.0, seed=6, **kw)
    assert np.array_equal(s1.truth_labels, s2.truth_labels)
    assert np.array_equal(s1.omap.quats, s2.omap.quats, equal_nan=True)
    assert np.array_equal(s1.omap.quality, s2.omap.quality)
    assert not np.array_equal(s1.truth_labels, s3.truth_labels)
    # each stage draws from its own stream: other noise leaves the grains alone
    s4 = make_specimen((120, 140), 1.0, seed=5, noise_deg=2.0, **kw)
    assert np.array_equal(s1.truth_labels, s4.truth_labels)


def test_chunk_size_does_not_change_the_result():
    kw = dict(grid="hex", grain_size_um=10.0, unindexed_fraction=0.03, seed=9)
    a = make_specimen((90, 70), 1.0, **kw)
    b = make_specimen((90, 70), 1.0, chunk_points=500, **kw)
    assert np.array_equal(a.truth_labels, b.truth_labels)
    assert np.array_equal(a.omap.quats, b.omap.quats, equal_nan=True)
    assert np.array_equal(a.omap.quality, b.omap.quality)


def test_truth_labels_match_the_map_mask_and_ids_are_compact():
    spec = make_specimen((100, 120), 1.0, grain_size_um=12.0, unindexed_fraction=0.05,
                         second_phase_fraction=0.1, notch=NotchShape(depth_um=30.0, opening_deg=45.0),
                         notch_side="right", seed=3)
    lab = spec.truth_labels
    assert np.array_equal(lab < 0, ~spec.omap.indexed)
    assert set(np.unique(lab[lab >= 0])) == set(range(spec.n_grains))
    assert spec.grain_quats.shape == (spec.n_grains, 4)
    # the phase of every point is its grain's phase
    assert np.array_equal(spec.omap.phase[lab >= 0], spec.grain_phase[lab[lab >= 0]])


# ------------------------------------------------------------------------------------------ orientations


def test_noise_angle_follows_the_maxwell_distribution():
    sigma = 1.5
    spec = make_specimen((200, 200), 1.0, grain_size_um=20.0, gradient_deg=0.0, noise_deg=sigma,
                         unindexed_fraction=0.0, seed=22)
    lab = spec.truth_labels.ravel()
    ang = disorientation_angle(spec.omap.quats.reshape(-1, 4), spec.grain_quats[lab])
    # The norm of an isotropic 3-D Gaussian vector (per-axis σ) is Maxwell distributed, mean
    # 2σ√(2/π) (Papoulis & Pillai 2002, Probability, Random Variables and Stochastic Processes;
    # from memory); reference: scipy.stats.maxwell.
    assert stats.maxwell(scale=sigma).mean() == pytest.approx(2 * sigma * math.sqrt(2 / math.pi))
    se = stats.maxwell(scale=sigma).std() / math.sqrt(ang.size)
    assert abs(ang.mean() - stats.maxwell(scale=sigma).mean()) < 4 * se
    assert stats.kstest(ang, stats.maxwell(scale=sigma).cdf).pvalue > 1e-3
    # reference library: the rotation angle of scipy Rotation objects built from such vectors
    rv = np.random.default_rng(0).normal(0.0, math.radians(sigma), size=(200_000, 3))
    mc = np.degrees(Rotation.from_rotvec(rv).magnitude()).mean()
    assert abs(ang.mean() - mc) < 5 * se


def test_without_bend_and_noise_points_carry_their_grain_orientation():
    spec = make_specimen((80, 80), 1.0, grain_size_um=15.0, gradient_deg=0.0, noise_deg=0.0,
                         unindexed_fraction=0.0, seed=1)
    lab = spec.truth_labels.ravel()
    ang = disorientation_angle(spec.omap.quats.reshape(-1, 4), spec.grain_quats[lab])
    assert ang.max() < 1e-5


def test_intra_grain_bend_is_a_few_degrees_and_smooth():
    grad = 6.0
    spec = make_specimen((300, 300), 1.0, grain_size_um=40.0, gradient_deg=grad, noise_deg=0.0,
                         unindexed_fraction=0.0, seed=4)
    lab = spec.truth_labels.ravel()
    ang = disorientation_angle(spec.omap.quats.reshape(-1, 4), spec.grain_quats[lab])
    largest = np.zeros(spec.n_grains)
    np.maximum.at(largest, lab, ang)
    # a linear bend of `grad` across the diameter, referenced near the grain centre: about grad/2
    # at the far edge of the grain
    assert 0.35 * grad < np.median(largest) < 0.9 * grad
    # smooth: neighbouring points within a grain differ by about grad·step/diameter, far below 1°
    q = spec.omap.quats
    same = spec.truth_labels[:, 1:] == spec.truth_labels[:, :-1]
    step_ang = disorientation_angle(q[:, 1:][same], q[:, :-1][same])
    assert step_ang.max() < 0.5


def test_untextured_grains_reproduce_the_mackenzie_distribution():
    spec = make_specimen((400, 400), 1.0, grain_size_um=8.0, unindexed_fraction=0.0, seed=8)
    q = spec.grain_quats
    assert q.shape[0] > 1500
    rng = np.random.default_rng(1)
    i = rng.integers(0, q.shape[0], 300_000)
    j = rng.integers(0, q.shape[0], 300_000)
    keep = i != j
    ang = disorientation_angle(q[i[keep]], q[j[keep]])
    n = ang.size
    # Mackenzie (1958, Biometrika 45:229): mean about 40.7°, maximum 62.8° (from memory)
    assert ang.mean() == pytest.approx(40.7, abs=0.3)
    assert ang.max() <= 62.81
    edges = np.arange(0.0, 61.0, 5.0)
    observed = np.histogram(ang, bins=edges)[0] / n
    expected = np.diff(_mackenzie_cdf(edges))
    sd = np.sqrt(expected * (1 - expected) / n)
    assert np.all(np.abs(observed - expected) < 5 * sd + 1e-4)
    # the rest of the mass lies between 60° and the maximum
    assert np.mean(ang > 60.0) == pytest.approx(1 - _mackenzie_cdf(60.0), abs=0.003)


def test_fibre_texture_aligns_the_crystal_direction_within_the_spread():
    spread = 8.0
    spec = make_specimen((300, 300), 1.0, grain_size_um=10.0, texture="fibre", fibre_axis=(0, 0, 1),
                         fibre_hkl=(1, 1, 1), fibre_spread_deg=spread, seed=12)
    # crystal direction along the specimen normal, nearest ⟨111⟩
    c = quat_rotate(spec.grain_quats, np.broadcast_to([0.0, 0.0, 1.0], (spec.n_grains, 3)))
    tilt = np.degrees(np.arccos(np.clip(np.abs(c).sum(axis=1) / math.sqrt(3.0), -1, 1)))
    # The tilt is the norm of a 2-D isotropic Gaussian (σ = spread/√2 per axis), a Rayleigh
    # variable with RMS = spread (common practice; reference: scipy.stats.rayleigh).
    assert np.sqrt(np.mean(tilt**2)) == pytest.approx(spread, rel=0.08)
    assert stats.kstest(tilt, stats.rayleigh(scale=spread / math.sqrt(2)).cdf).pvalue > 1e-3
    # rotation about the fibre axis stays uniform: the crystal ⟨111⟩ fibre leaves x spread over angles
    cx = quat_rotate(spec.grain_quats, np.broadcast_to([1.0, 0.0, 0.0], (spec.n_grains, 3)))
    assert np.abs(cx.mean(axis=0)).max() < 0.1


def test_fibre_along_another_axis_and_direction():
    spec = make_specimen((150, 150), 1.0, grain_size_um=10.0, texture="fibre", fibre_axis=(1, 0, 0),
                         fibre_hkl=(1, 1, 0), fibre_spread_deg=3.0, seed=13)
    c = quat_rotate(spec.grain_quats, np.broadcast_to([1.0, 0.0, 0.0], (spec.n_grains, 3)))
    # angle to the nearest ⟨110⟩: the two largest |components| sum to √2 at exact alignment
    top2 = np.sort(np.abs(c), axis=1)[:, 1:].sum(axis=1)
    tilt = np.degrees(np.arccos(np.clip(top2 / math.sqrt(2.0), -1, 1)))
    assert np.percentile(tilt, 99) < 4 * 3.0


def test_grain_orientations_change_under_symmetry_only_by_equivalence():
    # an exact cubic symmetry operator applied to every grain leaves all disorientations unchanged
    spec = make_specimen((80, 80), 1.0, grain_size_um=12.0, seed=4)
    q = spec.grain_quats
    q2 = quat_multiply(CUBIC_OPERATORS[7], q)
    assert np.allclose(disorientation_angle(q[:-1], q[1:]), disorientation_angle(q2[:-1], q2[1:]), atol=1e-6)


# ------------------------------------------------------------------------------------------ masks


def test_unindexed_fraction_with_clusters_and_isolated_points():
    spec = make_specimen((200, 200), 1.0, grain_size_um=15.0, unindexed_fraction=0.04, seed=2)
    assert (~spec.omap.indexed).mean() == pytest.approx(0.04, rel=0.05)
    # clusters: many unindexed points have an unindexed 4-neighbour; isolated ones do not
    u = ~spec.omap.indexed
    nb = np.zeros_like(u)
    nb[1:] |= u[:-1]
    nb[:-1] |= u[1:]
    nb[:, 1:] |= u[:, :-1]
    nb[:, :-1] |= u[:, 1:]
    clustered = (u & nb).sum() / u.sum()
    assert 0.3 < clustered < 0.8
    iso = make_specimen((200, 200), 1.0, grain_size_um=15.0, unindexed_fraction=0.04, unindexed_clusters=0.0,
                        seed=2)
    assert (~iso.omap.indexed).mean() == pytest.approx(0.04, rel=0.05)
    # unindexed points carry quality near zero
    assert spec.omap.quality[u].max() < 0.2 < spec.omap.quality[~u].min()


@pytest.mark.parametrize("grid", ["square", "hex"])
def test_second_phase_fraction_and_structure(grid):
    spec = make_specimen((200, 200), 1.0, grid=grid, grain_size_um=20.0, second_phase_fraction=0.12,
                         unindexed_fraction=0.0, seed=6)
    assert spec.omap.phases[1].structure == "fcc"
    assert (spec.omap.phase == 1).mean() == pytest.approx(0.12, rel=0.12)
    assert set(np.unique(spec.omap.phase)) == {0, 1}
    assert np.array_equal(np.unique(spec.grain_phase), [0, 1])


def _notch_area(depth, rho, opening_deg):
    """Area of a V-notch with a rounded root (exact plane geometry)."""
    a = math.radians(opening_deg / 2)
    uc = depth - rho
    h = rho / math.cos(a)
    ut = uc + rho * math.sin(a)  # where the flanks touch the root circle
    w0 = h + uc * math.tan(a)  # half width at the mouth
    wt = rho * math.cos(a)  # half width at the tangent points
    phi = math.pi - 2 * a  # angle subtended by the root arc
    return ut * (w0 + wt) + 0.5 * rho**2 * (phi - math.sin(phi))


@pytest.mark.parametrize("grid", ["square", "hex"])
@pytest.mark.parametrize(("side", "opening"), [("left", 45.0), ("top", 60.0), ("right", 0.0), ("bottom", 90.0)])
def test_notch_points_unindexed_and_root_at_the_tip(grid, side, opening):
    notch = NotchShape(depth_um=40.0, root_radius_um=8.0, opening_deg=opening)
    spec = make_specimen((160, 180), 0.5, grid=grid, grain_size_um=15.0, unindexed_fraction=0.0, notch=notch,
                         notch_side=side, seed=1)
    om = spec.omap
    x0, x1, y0, y1 = om.extent
    rx, ry = spec.notch_root
    assert x0 <= rx <= x1 and y0 <= ry <= y1
    d = spec.notch_direction
    assert np.linalg.norm(d) == pytest.approx(1.0)
    # the notch area matches plane geometry (V with a circular root), within the grid resolution
    area = (~om.indexed).sum() * om.point_area
    assert area == pytest.approx(_notch_area(40.0, 8.0, opening), rel=0.04)
    # just behind the root lies the notch, just ahead the material
    i, j = om.index_of(rx - 2 * om.step * d[0], ry - 2 * om.step * d[1])
    assert not om.indexed[i, j]
    i, j = om.index_of(rx + 2 * om.step * d[0], ry + 2 * om.step * d[1])
    assert om.indexed[i, j]
    # the notch opens at its edge: the root sits depth_um in from it
    edge = {"left": x0, "right": x1, "top": y0, "bottom": y1}[side]
    coord = rx if side in ("left", "right") else ry
    assert abs(coord - edge) == pytest.approx(40.0, abs=om.step)
    # mode I: the default load axis lies across the notch axis, in the map plane
    assert abs(np.dot(spec.load_axis[:2], d)) < 1e-12 and spec.load_axis[2] == 0


def test_notch_accepts_a_dict_and_position():
    spec = make_specimen((100, 100), 1.0, grain_size_um=15.0, notch={"depth_um": 60.0},
                         notch_side="left", notch_position_um=30.0, seed=0)
    assert spec.notch_root == (60.0, 30.0)


def test_parameter_errors_name_the_parameter():
    with pytest.raises(ParameterError, match="grid"):
        make_specimen((20, 20), grid="triangle")
    with pytest.raises(ParameterError, match="texture"):
        make_specimen((20, 20), texture="rolled")
    with pytest.raises(ParameterError, match="shape"):
        make_specimen((1, 20))
    with pytest.raises(ParameterError, match="grain_size_um"):
        make_specimen((20, 20), grain_size_um=-1)
    with pytest.raises(ParameterError, match="unindexed_fraction"):
        make_specimen((20, 20), unindexed_fraction=0.9)
    with pytest.raises(ParameterError, match="depth_um"):
        make_specimen((20, 20), notch={"depth_um": 50.0, "root_radius_um": 2.0}, notch_side="left")
    with pytest.raises(ParameterError, match="notch should be"):
        make_specimen((20, 20), notch={"edge": "left"})
    with pytest.raises(ParameterError, match="position_um"):
        make_specimen((20, 20), notch={"depth_um": 5.0, "root_radius_um": 1.0}, notch_side="top",
                      notch_position_um=99.0)
    with pytest.raises(ParameterError, match="fibre_axis"):
        make_specimen((20, 20), texture="fibre", fibre_axis=(0, 0, 0))
    with pytest.raises(ParameterError, match="notch_side"):
        make_specimen((20, 20), notch={"depth_um": 5.0, "root_radius_um": 1.0}, notch_side="middle")
    with pytest.raises(ParameterError, match="root_radius_um"):
        NotchShape(depth_um=5.0, root_radius_um=10.0)


# ------------------------------------------------------------------------------------------ demo


@pytest.mark.parametrize("quick", [False, True])
def test_demo_specimen_scenario(quick):
    spec = demo_specimen(seed=7, quick=quick)
    om = spec.omap
    assert om.shape == ((150, 200) if quick else (299, 399))
    assert 70 <= spec.n_grains <= 130
    assert "synthetic" in spec.name.lower() and "invented" in spec.description.lower()
    assert np.allclose(spec.load_axis, [0.0, 1.0, 0.0])
    assert np.allclose(spec.notch_direction, [1.0, 0.0])
    rx, ry = spec.notch_root
    assert rx == pytest.approx(60.0) and ry == pytest.approx(0.5 * om.extent[3])
    assert (~om.indexed).mean() == pytest.approx(0.02 + 0.004, abs=0.004)  # 2 % plus the notch
    # a crack forecast needs variety ahead of the notch: several grains along 300 µm of the notch
    # axis, each disoriented from the previous one by a high angle
    xs = np.arange(rx + om.step, rx + 300.0, om.step)
    i, j = om.index_of(xs, np.full_like(xs, ry))
    seq = spec.truth_labels[i, j]
    seq = seq[seq >= 0]
    grains = seq[np.r_[True, seq[1:] != seq[:-1]]]
    assert len(set(grains.tolist())) >= 3
    mis = disorientation_angle(spec.grain_quats[grains[:-1]], spec.grain_quats[grains[1:]])
    assert np.all(mis > 15.0)


def test_quick_demo_is_the_same_field_at_half_resolution():
    full, quick = demo_specimen(seed=7), demo_specimen(seed=7, quick=True)
    assert full.omap.extent == quick.omap.extent
    assert full.notch_root == quick.notch_root
    a, b = full.truth_labels[::2, ::2], quick.truth_labels
    ok = (a >= 0) & (b >= 0)
    assert np.array_equal(full.grain_quats[a[ok]], quick.grain_quats[b[ok]])


@pytest.mark.slow
def test_large_map_runs_and_keeps_the_grain_size():
    spec = make_specimen((1000, 1000), 1.0, grain_size_um=20.0, seed=3)
    assert _grain_ecd(spec).mean() == pytest.approx(20.0, rel=0.05)
    assert (~spec.omap.indexed).mean() == pytest.approx(0.02, rel=0.05)


def test_specimen_example_runs(tmp_path, capsys):
    import runpy
    from pathlib import Path

    script = Path(__file__).resolve().parents[1] / "examples" / "specimens" / "make_specimen.py"
    written = runpy.run_path(str(script))["main"](tmp_path)
    assert all(p.stat().st_size > 0 for p in written)
    assert "requested spread 12°" in capsys.readouterr().out


@pytest.mark.parametrize("grid", ["square", "hex"])
def test_power_cell_kernel_matches_a_lifted_nearest_neighbour_query(grid):
    from scipy.spatial import cKDTree

    from slipnet.synthetic import _kernels as _synthetic_kernels
    from slipnet.synthetic._geometry import _grid_xy, _power_cells

    rng = np.random.default_rng(0)
    lo, hi = np.array([-30.0, -30.0]), np.array([160.0, 130.0])
    centres = rng.uniform(lo, hi, (150, 2))
    w = rng.uniform(0.0, 400.0, 150)
    lab = _power_cells((100, 120), 1.0, grid, centres, w, lo, hi, 12.0)
    # reference: with a third coordinate √(w_max − w) the power distance |p − s|² − w becomes a
    # plain squared distance (plus a constant), so scipy's cKDTree finds the same cell
    x, y = _grid_xy(np.arange(100), 120, 1.0, grid)
    tree = cKDTree(np.column_stack([centres, np.sqrt(w.max() - w)]))
    ref = tree.query(np.column_stack([x.ravel(), y.ravel(), np.zeros(x.size)]))[1].reshape(100, 120)
    assert np.array_equal(lab, ref)
    # the pure-Python body of the kernel gives the same rows
    nbx, nby = 16, 14
    bx = np.clip(((centres[:, 0] - lo[0]) / 12.0).astype(np.int64), 0, nbx - 1)
    by = np.clip(((centres[:, 1] - lo[1]) / 12.0).astype(np.int64), 0, nby - 1)
    key = by * nbx + bx
    order = np.argsort(key, kind="stable")
    start = np.searchsorted(key[order], np.arange(nbx * nby + 1))
    out = np.empty((3, 120), dtype=np.int64)
    rs = math.sqrt(3) / 2 if grid == "hex" else 1.0
    _synthetic_kernels.power_cell_labels.py_func(
        5, 8, 120, 1.0, rs, grid == "hex", centres[:, 0].copy(), centres[:, 1].copy(), w, w.max(), lo[0], lo[1],
        12.0, nbx, nby, start, order, out)
    assert np.array_equal(out, ref[5:8])

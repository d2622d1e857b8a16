"""Tests of slipnet.grains: reconstruction, tables, graph, geometry, exports and errors."""

from __future__ import annotations

import math

import networkx as nx
import numpy as np
import pandas as pd
import pytest
from _reference import kam_sums, pair_disorientation
from scipy import sparse, stats
from scipy.optimize import linear_sum_assignment
from scipy.sparse.csgraph import connected_components
from scipy.spatial import cKDTree

from slipnet.crystal import (
    BOUNDARY_CLASSES,
    CSL_TABLE,
    CUBIC_OPERATORS,
    csl_rotations,
    disorientation_angle,
    mackenzie_cdf,
    matrix_from_quat,
    nearest_equivalent,
    quat_from_axis_angle,
    quat_from_euler,
    quat_multiply,
    random_quats,
)
from slipnet.errors import ParameterError
from slipnet.grains import _boundary_kernels as bk
from slipnet.grains import _pair_kernels as pk
from slipnet.grains import _sum_kernels as sk
from slipnet.grains import build_grain_graph
from slipnet.grains._steps import _neighbour_pairs
from slipnet.maps import OrientationMap, Phase
from slipnet.reports.grains import write_grains

SQ3 = math.sqrt(3.0)


# ----------------------------------------------------------------------------- helpers
def make_map(q, grid="square", step=1.0, indexed=None, phase=None, quality=None, phases=None):
    q = np.asarray(q, dtype=float)
    shape = q.shape[:2]
    ind = np.all(np.isfinite(q), axis=-1) if indexed is None else np.asarray(indexed, bool)
    kw = {}
    if phases is not None:
        kw["phases"] = phases
    return OrientationMap(
        quats=q, phase=np.zeros(shape, int) if phase is None else phase,
        quality=np.ones(shape) if quality is None else quality, indexed=ind, step=step, grid=grid, **kw,
    )


def region_map(region, quats, grid="square", step=1.0, **kw):
    """Map whose orientation is exactly ``quats[region]`` (NaN where region < 0)."""
    region = np.asarray(region)
    q = np.full((*region.shape, 4), np.nan)
    q[region >= 0] = np.asarray(quats)[region[region >= 0]]
    return make_map(q, grid=grid, step=step, **kw)


def voronoi_map(ny, nx, n_cells, grid="square", seed=0, noise_deg=0.5, unindexed=0.02):
    """Voronoi map with random cell orientations, Gaussian noise rotations and scattered holes."""
    rng = np.random.default_rng(seed)
    proto = region_map(np.zeros((ny, nx), int), [[1.0, 0, 0, 0]], grid=grid)
    x, y = proto.coordinates()
    seeds = np.column_stack((rng.uniform(x.min(), x.max(), n_cells), rng.uniform(y.min(), y.max(), n_cells)))
    _, lab = cKDTree(seeds).query(np.column_stack((x.ravel(), y.ravel())))
    gq = random_quats(n_cells, seed=seed)
    noise = quat_from_axis_angle(rng.normal(size=(lab.size, 3)), np.abs(rng.normal(0, noise_deg, lab.size)))
    q = quat_multiply(noise, gq[lab])
    ind = rng.random(lab.size) >= unindexed
    return make_map(q.reshape(ny, nx, 4), grid=grid, indexed=ind.reshape(ny, nx)), lab.reshape(ny, nx), gq


def slow_union_find(om, threshold):
    """Obvious Python union-find over 4/6-neighbour pairs (reference for the kernels)."""
    ny, nx = om.shape
    parent = list(range(ny * nx))

    def find(i):
        while parent[i] != i:
            i = parent[i]
        return i

    def nbrs(i, j):
        if om.grid == "square":
            cand = [(i, j + 1), (i + 1, j)]
        elif i % 2 == 0:
            cand = [(i, j + 1), (i + 1, j - 1), (i + 1, j)]
        else:
            cand = [(i, j + 1), (i + 1, j), (i + 1, j + 1)]
        return [(a, b) for a, b in cand if 0 <= a < ny and 0 <= b < nx]

    for i in range(ny):
        for j in range(nx):
            if not om.indexed[i, j]:
                continue
            for a, b in nbrs(i, j):
                if not om.indexed[a, b] or om.phase[i, j] != om.phase[a, b]:
                    continue
                if disorientation_angle(om.quats[i, j], om.quats[a, b]) < threshold:
                    ra, rb = find(i * nx + j), find(a * nx + b)
                    parent[max(ra, rb)] = min(ra, rb)
    out = np.full((ny, nx), -1)
    seen = {}
    for p in range(ny * nx):
        if om.indexed.flat[p]:
            r = find(p)
            out.flat[p] = seen.setdefault(r, len(seen))
    return out


def same_partition(a, b):
    """True if two label images define the same partition (labels may be permuted)."""
    m = (a >= 0) | (b >= 0)
    if not np.array_equal(a >= 0, b >= 0):
        return False
    pairs = np.unique(np.column_stack((a[m], b[m])), axis=0)
    return len(np.unique(pairs[:, 0])) == len(pairs) == len(np.unique(pairs[:, 1]))


def effective_truth(truth, grain_quats, grid, threshold, band=0.0, labels=None):
    """Truth grains joined where adjacent grains are closer than the threshold (they are one grain).

    For adjacent pairs whose angle lies within ``band`` of the threshold, noise makes either
    answer right: there the reconstruction's decision (``labels``: do most points of both truth
    grains carry the same label?) is adopted.
    """
    lab = truth
    om = region_map(np.zeros(truth.shape, int), [[1.0, 0, 0, 0]], grid=grid)
    a, b = _pairs(om)
    la, lb = lab.ravel()[a], lab.ravel()[b]
    ok = (la >= 0) & (lb >= 0) & (la != lb)
    la, lb = la[ok], lb[ok]
    ang = disorientation_angle(grain_quats[la], grain_quats[lb])
    close = ang < threshold
    unsure = np.abs(ang - threshold) < band
    n = grain_quats.shape[0]
    if labels is not None and unsure.any():
        m = (lab >= 0) & (labels >= 0)
        cont = sparse.coo_matrix((np.ones(m.sum()), (lab[m], labels[m])), shape=(n, labels.max() + 1)).tocsr()
        major = np.asarray(cont.argmax(axis=1)).ravel()
        close = np.where(unsure, major[la] == major[lb], close)
    adj = sparse.coo_matrix((np.ones(close.sum()), (la[close], lb[close])), shape=(n, n))
    _, comp = connected_components(adj, directed=False)
    return np.where(lab >= 0, comp[np.maximum(lab, 0)], -1)


def _pairs(om):
    return _neighbour_pairs(om.shape, om.grid)


def best_match_fraction(truth, labels, indexed):
    """Share of indexed points whose label matches the truth under the best one-to-one labelling."""
    m = indexed & (truth >= 0)
    t, r = truth[m], labels[m]
    ok = r >= 0
    tu, ti = np.unique(t, return_inverse=True)
    ru, ri = np.unique(r[ok], return_inverse=True)
    cont = sparse.coo_matrix((np.ones(ok.sum()), (ti[ok], ri)), shape=(tu.size, ru.size)).toarray()
    rows, cols = linear_sum_assignment(-cont)  # scipy (Virtanen et al. 2020, Nat. Methods 17:261)
    return cont[rows, cols].sum() / m.sum()


# ----------------------------------------------------------------------------- neighbour pairs
@pytest.mark.parametrize("grid", ["square", "hex"])
def test_neighbour_pairs_are_the_nearest_grid_points(grid):
    om = region_map(np.zeros((7, 9), int), [[1.0, 0, 0, 0]], grid=grid, step=1.5)
    a, b = _pairs(om)
    x, y = om.coordinates()
    pts = np.column_stack((x.ravel(), y.ravel()))
    # scipy's k-d tree (Virtanen et al. 2020): all point pairs at exactly one step
    ref = cKDTree(pts).query_pairs(1.5 * 1.0001)
    got = {tuple(sorted(p)) for p in zip(a.tolist(), b.tolist(), strict=True)}
    assert got == {tuple(sorted(p)) for p in ref}
    assert a.dtype == np.int32 and np.all(b > a)
    # the fused pairs-and-angles kernel gives the same pairs and the angles of the pair kernel
    q = random_quats(om.shape[0] * om.shape[1], seed=1)
    valid = np.ones(q.shape[0], bool)
    valid[5] = False
    phase = np.zeros(q.shape[0], np.int32)
    a2, b2, ang = _neighbour_pairs(om.shape, grid, q, valid, phase)
    ref = np.empty(a.size, np.float32)
    pair_disorientation(q, valid, phase, a, b, ref)
    assert np.array_equal(a, a2) and np.array_equal(b, b2)
    np.testing.assert_array_equal(ang, ref)
    offsets = pk.FORWARD_OFFSETS[grid]
    start = np.concatenate(([0], np.cumsum(pk.row_pair_counts(*om.shape, offsets))))
    a3, b3, ang3 = np.empty_like(a), np.empty_like(b), np.empty_like(ang)
    pk.fill_pairs_with_angles.py_func(*om.shape, offsets, start[:-1], q, valid, phase, a3, b3, ang3)
    assert np.array_equal(a3, a) and np.array_equal(b3, b)
    np.testing.assert_allclose(ang3, ang, atol=1e-4)


# ----------------------------------------------------------------------------- union-find kernels
@pytest.mark.parametrize("grid", ["square", "hex"])
def test_kernel_union_find_matches_slow_python_union_find(grid):
    rng = np.random.default_rng(3)
    region = rng.integers(0, 4, size=(9, 11))
    om = region_map(region, random_quats(4, seed=1), grid=grid, indexed=rng.random((9, 11)) > 0.15)
    gg = build_grain_graph(om, 10.0)
    ref = slow_union_find(om, 10.0)
    assert np.array_equal(gg.labels, ref)  # same ids too: both number grains in raster order


def test_union_kernels_py_func_agree_with_compiled():
    rng = np.random.default_rng(5)
    n = 60
    a = rng.integers(0, n, 80).astype(np.int32)
    b = rng.integers(0, n, 80).astype(np.int32)
    ang = rng.uniform(0, 20, 80).astype(np.float32)
    p1 = np.arange(n, dtype=np.int32)
    p2 = p1.copy()
    pk.union_below(p1, a, b, ang, np.float32(10.0))
    pk.union_below.py_func(p2, a, b, ang, np.float32(10.0))
    assert np.array_equal(p1, p2)
    # roots are the smallest member: the union with scipy's connected components partitions alike
    j = ang < 10
    adj = sparse.coo_matrix((np.ones(j.sum()), (a[j], b[j])), shape=(n, n))
    _, comp = connected_components(adj, directed=False)  # scipy (Virtanen et al. 2020)
    assert same_partition(p1, comp)
    out1 = np.empty(n, np.int32)
    out2 = np.empty(n, np.int32)
    keep = rng.random(n) > 0.2
    assert pk.compact_labels(p1, keep, out1) == pk.compact_labels.py_func(p1, keep, out2)
    assert np.array_equal(out1, out2)


def test_pair_disorientation_kernel_against_orix():
    from orix.quaternion import Orientation
    from orix.quaternion.symmetry import O

    q = random_quats(50, seed=11)
    valid = np.ones(50, bool)
    valid[3] = False
    phase = np.zeros(50, np.int32)
    phase[7] = 1
    a = np.arange(0, 49, dtype=np.int32)
    b = np.arange(1, 50, dtype=np.int32)
    out = np.empty(49, np.float32)
    out_py = np.empty(49, np.float32)
    pair_disorientation(q, valid, phase, a, b, out)
    pair_disorientation.py_func(q, valid, phase, a, b, out_py)
    # orix Orientation.angle_with with point group 432 (Johnstone et al., orix, J. Appl. Cryst. 2020)
    ref = Orientation(q[a], symmetry=O).angle_with(Orientation(q[b], symmetry=O), degrees=True)
    bad = ~valid[a] | ~valid[b] | (phase[a] != phase[b])
    assert np.all(np.isnan(out[bad]))
    np.testing.assert_allclose(out[~bad], ref[~bad], atol=1e-4)
    np.testing.assert_allclose(out_py[~bad], out[~bad], atol=1e-5)


def test_labels_match_scikit_image_on_constant_regions():
    from skimage.measure import label

    rng = np.random.default_rng(2)
    region = rng.integers(0, 6, size=(30, 40))
    region = np.repeat(np.repeat(region, 2, axis=0), 2, axis=1)[:40, :50]
    quats = random_quats(6, seed=4)
    assert disorientation_angle(quats[:, None], quats[None]).ravel()[~np.eye(6, dtype=bool).ravel()].min() > 1.0
    gg = build_grain_graph(region_map(region, quats), 1.0)
    # scikit-image connected components, 4-connectivity (van der Walt et al. 2014, PeerJ 2:e453)
    ref = label(region + 1, connectivity=1, background=0) - 1
    assert same_partition(gg.labels, ref)


# ----------------------------------------------------------------------------- synthetic specimens
@pytest.mark.parametrize("grid", ["square", "hex"])
def test_synthetic_specimen_reconstructed(grid):
    from slipnet.synthetic import make_specimen

    spec = make_specimen((160, 160), 1.0, grid=grid, grain_size_um=14.0, noise_deg=0.5, unindexed_fraction=0.02,
                         gradient_deg=0.0, seed=4)
    gg = build_grain_graph(spec.omap, 15.0)
    # truth grain pairs within 2.5° (a few noise standard deviations) of the threshold are
    # ambiguous (either answer is right): left out of the score
    truth = effective_truth(spec.truth_labels, spec.grain_quats, grid, 15.0, band=2.5, labels=gg.labels)
    frac = best_match_fraction(truth, gg.labels, spec.omap.indexed)
    assert frac >= 0.995, frac  # target of the issue: 99.5 % of indexed points
    # areas sum to the indexed area (no filling)
    assert gg.grains["area_um2"].sum() == pytest.approx(spec.omap.indexed.sum() * spec.omap.point_area)


@pytest.mark.parametrize("grid", ["square", "hex"])
def test_voronoi_reconstruction_and_fill(grid):
    om, lab, gq = voronoi_map(120, 120, 80, grid=grid, seed=1)
    gg = build_grain_graph(om, 15.0)
    truth = effective_truth(np.where(om.indexed, lab, -1), gq, grid, 15.0, band=2.5, labels=gg.labels)
    assert best_match_fraction(truth, gg.labels, om.indexed) >= 0.995
    filled = build_grain_graph(om, 15.0, fill_unindexed=True)
    assert (filled.labels >= 0).all()
    assert filled.grains["area_um2"].sum() == pytest.approx(om.shape[0] * om.shape[1] * om.point_area)
    # filled points carry no orientation statistics
    assert np.isnan(filled.kam_deg[~om.indexed]).all()
    assert any("filled" in line for line in filled.log)


# ----------------------------------------------------------------------------- bicrystals
@pytest.mark.parametrize("grid", ["square", "hex"])
def test_half_planes_one_boundary_of_exact_length_and_angle(grid):
    ny, nx = 12, 17
    region = np.zeros((ny, nx), int)
    region[6:] = 1  # horizontal split between rows 5 and 6
    qa = quat_from_euler([10.0, 20.0, 30.0])
    qb = quat_multiply(quat_from_axis_angle([1.0, 2.0, 3.0], 25.0), qa)
    gg = build_grain_graph(region_map(region, [qa, qb], grid=grid, step=2.0), 15.0)
    assert gg.n_grains == 2 and len(gg.boundaries) == 1
    row = gg.boundary(0, 1)
    if grid == "square":
        # nx vertical pairs cross, each sharing an edge of one step
        assert row["length_um"] == pytest.approx(nx * 2.0)
        assert row["trace_angle_deg"] == pytest.approx(0.0, abs=1e-9) or row["trace_angle_deg"] == pytest.approx(180)
    else:
        # each point of row 5 has two lower neighbours but one falls off the left edge: 2nx-1
        # pairs, each sharing a hexagon side of step/√3 (geometry of the hexagonal cell)
        assert row["length_um"] == pytest.approx((2 * nx - 1) * 2.0 / SQ3)
        assert min(row["trace_angle_deg"], 180 - row["trace_angle_deg"]) < 1.0
    assert row["misorientation_deg"] == pytest.approx(25.0, abs=1e-6)
    assert row["boundary_class"] == "high_angle"
    lines = row["polylines"]
    assert len(lines) == 1
    y_line = 5.5 * gg.omap.row_spacing
    np.testing.assert_allclose(lines[0][1:-1, 1], y_line, atol=1e-9)  # midpoints on the mid-line
    assert np.all(np.diff(lines[0][:, 0]) > 0) or np.all(np.diff(lines[0][:, 0]) < 0)  # ordered


def _clipped_length(c, d, box) -> float:
    """Length of the line c + t·d inside the box (x0, x1, y0, y1) (Liang & Barsky 1984, ACM TOG 3:1)."""
    t0, t1 = -np.inf, np.inf
    for p, q0, lo, hi in ((d[0], c[0], box[0], box[1]), (d[1], c[1], box[2], box[3])):
        if abs(p) > 1e-12:
            a, b = (lo - q0) / p, (hi - q0) / p
            t0, t1 = max(t0, min(a, b)), min(t1, max(a, b))
    return t1 - t0


@pytest.mark.parametrize("grid", ["square", "hex"])
def test_straight_boundaries_at_any_angle_measure_their_true_length(grid):
    # issue 18 item 6: the raw midpoint polyline overstates a straight boundary by up to 8 % (square)
    # and 15 % (hex) depending on its angle; the smoothed trace is within 3 % at every angle.
    # Reference: the exact length of the straight line inside the map's cell domain (plain geometry).
    n = 80
    qa = quat_from_euler([10.0, 20.0, 30.0])
    qb = quat_multiply(quat_from_axis_angle([1.0, 2.0, 3.0], 25.0), qa)
    proto = region_map(np.zeros((n, n), int), [qa], grid=grid)
    x, y = proto.coordinates()
    box = (x.min() - 0.5, x.max() + 0.5, y.min() - proto.row_spacing / 2, y.max() + proto.row_spacing / 2)
    c = np.array([x.mean(), y.mean()])
    errors = []
    for deg in np.arange(2.5, 90.0, 7.5) + 0.37:
        d = np.array([np.cos(np.radians(deg)), np.sin(np.radians(deg))])
        above = ((x - c[0]) * d[1] - (y - c[1]) * d[0]) > 0
        gg = build_grain_graph(region_map(above.astype(int), [qa, qb], grid=grid), 15.0)
        assert gg.n_grains == 2
        errors.append(gg.boundary(0, 1)["trace_length_um"] / _clipped_length(c, d, box) - 1.0)
    assert np.abs(errors).max() < 0.03, np.round(100 * np.asarray(errors), 1)


def test_vertical_boundary_trace_and_segment_query():
    region = np.zeros((10, 20), int)
    region[:, 8:] = 1
    qa = quat_from_euler([0.0, 0.0, 0.0])
    qb = quat_from_euler([40.0, 30.0, 0.0])
    gg = build_grain_graph(region_map(region, [qa, qb], step=0.5), 15.0)
    row = gg.boundary(1, 0)
    assert row["length_um"] == pytest.approx(10 * 0.5)
    assert row["trace_angle_deg"] == pytest.approx(90.0)
    assert gg.grain_at(0.2, 1.0) == 0 and gg.grain_at(9.0, 1.0) == 1 and gg.grain_at(50.0, 1.0) == -1
    segs = gg.grains_on_segment((0.0, 2.0), (9.5, 2.0))
    assert [s[0] for s in segs] == [0, 1]
    # the boundary lies at x = 3.75 µm (between columns 7 and 8); sampling at ≤ step/2
    assert segs[0][2] == pytest.approx(3.75, abs=0.25) and segs[1][1] == segs[0][2]
    assert segs[1][2] == pytest.approx(9.5)
    assert gg.grains_within(3.75, 2.0, 0.3) == [0, 1]
    assert gg.grains_within(1.0, 2.0, 0.3) == [0]
    assert gg.neighbours(0) == [1]


CSL_CASES = [
    # CSL misorientations (Grimmer, Bollmann & Warrington 1974, Acta Cryst. A30:197; from memory):
    ("sigma3", (1, 1, 1), 60.0),
    ("sigma5", (1, 0, 0), 36.87),
    ("sigma9", (1, 1, 0), 38.94),
]


@pytest.mark.parametrize(("name", "axis", "angle"), CSL_CASES)
@pytest.mark.parametrize("grid", ["square", "hex"])
def test_csl_pairs_classified_by_brandon(name, axis, angle, grid):
    rng = np.random.default_rng(7)
    qa = random_quats(1, seed=3)[0]
    # misorientation qb·qa⁻¹ = R; hide it behind symmetry: left crystal operator on qb
    qb = quat_multiply(quat_from_axis_angle(axis, angle), qa)
    qb = quat_multiply(CUBIC_OPERATORS[rng.integers(24)], qb)
    region = np.zeros((8, 10), int)
    region[:, 5:] = 1
    gg = build_grain_graph(region_map(region, [qa, qb], grid=grid), 15.0)
    assert gg.boundaries["boundary_class"].tolist() == [name]
    sigma = int(name[5:])
    # Brandon (1966, Acta Metall. 14:1479): tolerance 15°·Σ^(-1/2); 0.6 of it still matches
    tol = 15.0 / math.sqrt(sigma)
    near = quat_multiply(quat_from_axis_angle([0.3, -0.5, 0.8], 0.6 * tol), qb)
    gg = build_grain_graph(region_map(region, [qa, near], grid=grid), 15.0)
    assert gg.boundaries["boundary_class"].iloc[0] == name
    assert gg.boundaries["csl_deviation_deg"].iloc[0] == pytest.approx(0.6 * tol, abs=0.01)  # table angles: 0.01°
    far = quat_multiply(quat_from_axis_angle([0.3, -0.5, 0.8], 1.5 * tol), qb)
    gg = build_grain_graph(region_map(region, [qa, far], grid=grid), 15.0)
    assert gg.boundaries["boundary_class"].iloc[0] != name


def test_three_degree_pair_is_low_angle_and_subgrain_rules():
    region = np.zeros((8, 10), int)
    region[:, 5:] = 1
    qa = quat_from_euler([5.0, 10.0, 15.0])
    qb = quat_multiply(quat_from_axis_angle([0.0, 0.0, 1.0], 3.0), qa)
    gg = build_grain_graph(region_map(region, [qa, qb]), 2.0)
    assert gg.boundaries["boundary_class"].tolist() == ["low_angle"]
    # with 15° grains and a 2° sub-grain threshold the 3° boundary lies inside one grain
    gg = build_grain_graph(region_map(region, [qa, qb]), 15.0, subgrain_deg=2.0)
    assert gg.n_grains == 1 and len(gg.boundaries) == 0
    assert len(np.unique(gg.subgrain_labels)) == 2
    sb = gg.subgrain_boundaries
    assert len(sb) == 1 and sb["length_um"].iloc[0] == pytest.approx(8.0)
    assert sb["misorientation_deg"].iloc[0] == pytest.approx(3.0, abs=1e-6)
    # a grain-level boundary below the sub-grain threshold is classed "subgrain"
    gg = build_grain_graph(region_map(region, [qa, qb]), 2.0, subgrain_deg=1.0)
    assert gg.boundaries["boundary_class"].tolist() == ["low_angle"]
    gg = build_grain_graph(region_map(region, [qa, qb]), 2.5, subgrain_deg=2.4)
    assert set(gg.boundaries["boundary_class"]) <= set(BOUNDARY_CLASSES)


def test_phase_change_always_separates_grains():
    region = np.zeros((6, 6), int)
    region[:, 3:] = 1
    q = quat_from_euler([10.0, 10.0, 10.0])
    phases = (Phase("ferrite", "bcc"), Phase("austenite", "fcc", 0.3591))
    gg = build_grain_graph(region_map(region, [q, q], phase=region, phases=phases), 15.0)
    assert gg.n_grains == 2
    assert gg.boundaries["boundary_class"].tolist() == ["phase_boundary"]
    assert gg.grains["phase"].tolist() == [0, 1]


def test_csl_table_is_coincidence_rotations():
    tab = csl_rotations()
    assert [r[0] for r in CSL_TABLE] == tab["boundary_class"].tolist()
    for _, row in tab.iterrows():
        r = matrix_from_quat(row[["qw", "qx", "qy", "qz"]].to_numpy(float))
        # Ranganathan (1966, Acta Cryst. 21:197): Σ·R is an integer matrix for a CSL rotation,
        # and Σ is the smallest such odd integer
        s = row["sigma"]
        np.testing.assert_allclose(s * r, np.rint(s * r), atol=1e-9)
        assert np.gcd.reduce(np.rint(s * r).astype(int).ravel()) == 1
    # tabulated angles (Grimmer, Bollmann & Warrington 1974, Acta Cryst. A30:197; from memory)
    tabulated = {"sigma3": 60.0, "sigma5": 36.87, "sigma7": 38.21, "sigma9": 38.94, "sigma11": 50.48,
                 "sigma13a": 22.62, "sigma13b": 27.80, "sigma15": 48.19, "sigma17a": 28.07, "sigma17b": 61.93,
                 "sigma19a": 26.53, "sigma19b": 46.83, "sigma21a": 21.79, "sigma21b": 44.41, "sigma23": 40.45,
                 "sigma25a": 16.26, "sigma25b": 51.68, "sigma27a": 31.59, "sigma27b": 35.43, "sigma29a": 43.60,
                 "sigma29b": 46.40}
    got = dict(zip(tab["boundary_class"], tab["angle_deg"], strict=True))
    for k, v in tabulated.items():
        assert got[k] == pytest.approx(v, abs=0.01), k


# ----------------------------------------------------------------------------- geometry
def _hex_ball(ny, nx, ci, cj, k):
    """Points of a hex grid within k lattice steps of (ci, cj) (a hexagon of 'radius' k)."""
    i, j = np.indices((ny, nx))
    # axial coordinates for rows shifted right on odd rows
    q_ax = j - (i - (i & 1)) // 2
    qc = cj - (ci - (ci & 1)) // 2
    dq, dr = q_ax - qc, i - ci
    return (np.abs(dq) + np.abs(dr) + np.abs(dq + dr)) // 2 <= k


def test_hexagonal_grain_perimeter_on_hex_grid():
    ny, nx, k, step = 31, 31, 8, 1.0
    inside = _hex_ball(ny, nx, 14, 15, k)
    assert inside.sum() == 3 * k * (k + 1) + 1  # centred hexagonal number
    qa, qb = quat_from_euler([0.0, 0.0, 0.0]), quat_from_euler([30.0, 40.0, 10.0])
    gg = build_grain_graph(region_map(inside.astype(int), [qa, qb], grid="hex", step=step), 15.0)
    g_in = gg.grain_at(*gg.omap.coordinates()[0][14, 15:16], gg.omap.coordinates()[1][14, 15])
    row = gg.boundary(int(g_in), 1 - int(g_in))
    # the union of hexagonal cells has 6(2k+1) sides of step/√3 on its outline
    assert row["n_edges"] == 6 * (2 * k + 1)
    # geometric perimeter: hexagon with corners at (k + ½) steps, sides along lattice rows, is
    # 6(k + ½)·step; cell sides zig-zag at ±30° to it, so the edge count is 2/√3 longer
    # (plain geometry) — within one cell side per corner of that
    perimeter = 6 * (k + 0.5) * step
    assert abs(row["length_um"] - 2 / SQ3 * perimeter) <= 6 * step / SQ3
    # the chained midpoint polyline follows the hexagon itself
    assert row["trace_length_um"] == pytest.approx(perimeter, rel=0.04)
    assert gg.grains.loc[g_in, "n_points"] == inside.sum()
    assert gg.grains.loc[g_in, "area_um2"] == pytest.approx(inside.sum() * step**2 * SQ3 / 2)
    assert not gg.grains.loc[g_in, "touches_edge"]
    assert gg.grains.loc[1 - g_in, "touches_edge"]


def test_triple_junction_of_three_grains():
    region = np.zeros((10, 12), int)
    region[5:, :6] = 1
    region[5:, 6:] = 2
    quats = [quat_from_euler([0, 0, 0]), quat_from_euler([30, 30, 0]), quat_from_euler([10, 45, 70])]
    assert disorientation_angle(quats[1], quats[2]) > 20 and disorientation_angle(quats[0], quats[2]) > 20
    gg = build_grain_graph(region_map(region, quats, step=1.0), 15.0)
    tj = gg.triple_junctions
    assert len(tj) == 1
    # cell corner between rows 4|5 and columns 5|6
    assert (tj["x_um"].iloc[0], tj["y_um"].iloc[0]) == (5.5, 4.5)
    assert sorted(tj[["grain_1", "grain_2", "grain_3"]].iloc[0]) == [0, 1, 2]
    lengths = dict(zip(zip(gg.boundaries.grain_a, gg.boundaries.grain_b, strict=True), gg.boundaries.length_um,
                       strict=True))
    assert lengths == {(0, 1): 6.0, (0, 2): 6.0, (1, 2): 5.0}
    b12 = gg.boundary(1, 2)
    np.testing.assert_allclose(b12["triple_junctions"], [[5.5, 4.5]])
    line = b12["polylines"][0]
    assert sorted([tuple(line[0]), tuple(line[-1])]) == [(5.5, 4.5), (5.5, 9.5)]


def test_hex_triple_junctions_at_lattice_triangle_centres():
    # three 120° sectors around a point of a hex grid meet at the centroid of a lattice triangle
    om0 = region_map(np.zeros((14, 14), int), [[1.0, 0, 0, 0]], grid="hex", step=1.0)
    x, y = om0.coordinates()
    ang = np.degrees(np.arctan2(y - 6.3, x - 6.6)) % 360
    region = (ang // 120).astype(int)
    quats = random_quats(3, seed=21)
    gg = build_grain_graph(region_map(region, quats, grid="hex"), 5.0)
    assert gg.n_grains == 3
    tj = gg.triple_junctions
    assert len(tj) == 1 and tj["n_grains"].iloc[0] == 3
    # the junction is a cell vertex: equidistant (step/√3) from the three surrounding points
    d = np.hypot(x - tj["x_um"].iloc[0], y - tj["y_um"].iloc[0]).ravel()
    np.testing.assert_allclose(np.sort(d)[:3], 1 / SQ3, atol=1e-9)
    assert len({int(gg.labels.ravel()[k]) for k in np.argsort(d)[:3]}) == 3
    # kernel and pure-Python versions agree
    args = (gg.labels.ravel().astype(np.int32), 14, 14, True, 1.0, om0.row_spacing, 64)
    for u, v in zip(bk.triple_junctions(*args), bk.triple_junctions.py_func(*args), strict=True):
        np.testing.assert_array_equal(u, v)


def test_grain_shape_against_scikit_image_regionprops():
    from skimage.measure import regionprops

    rng = np.random.default_rng(8)
    region = np.zeros((40, 50), int)
    yy, xx = np.indices(region.shape)
    region[((xx - 22) / 14.0) ** 2 + ((yy - 18) / 7.0) ** 2 <= 1] = 1
    region[(xx > 38) & (yy > 25)] = 2
    gg = build_grain_graph(region_map(region, random_quats(3, seed=int(rng.integers(100))), step=1.0), 15.0)
    # scikit-image region properties (van der Walt et al. 2014, PeerJ 2:e453); µm = pixels at step 1
    props = regionprops(gg.labels + 1)
    for p in props:
        g = gg.grains.loc[p.label - 1]
        assert g["n_points"] == p.area
        assert (g["centroid_y_um"], g["centroid_x_um"]) == pytest.approx(p.centroid)
        assert g["major_axis_um"] == pytest.approx(p.axis_major_length, rel=1e-9)
        assert g["minor_axis_um"] == pytest.approx(p.axis_minor_length, rel=1e-9)
        assert g["ecd_um"] == pytest.approx(p.equivalent_diameter_area)


# ----------------------------------------------------------------------------- orientation statistics
def test_mean_orientation_is_symmetry_aware_and_kernel_matches_vectorised_reference():
    rng = np.random.default_rng(9)
    q0 = quat_from_euler([35.0, 50.0, 70.0])
    n = 64
    noise = quat_from_axis_angle(rng.normal(size=(n, 3)), rng.uniform(0, 2.0, n))
    pts = quat_multiply(noise, q0)
    # store every point as a random symmetric equivalent with a random sign
    pts = quat_multiply(CUBIC_OPERATORS[rng.integers(0, 24, n)], pts) * rng.choice([-1.0, 1.0], (n, 1))
    pts = np.where(pts[:, :1] < 0, -pts, pts)
    gg = build_grain_graph(make_map(pts.reshape(8, 8, 4)), 15.0)
    assert gg.n_grains == 1
    # reference: nearest_equivalent then the principal eigenvector of Σ q qᵀ (Markley et al.
    # 2007, J. Guid. Control Dyn. 30:1193), written with np.add.at
    al = nearest_equivalent(pts, pts[0])
    m = np.zeros((4, 4))
    np.add.at(m, (slice(None), slice(None)), np.einsum("ni,nj->ij", al, al))
    ref = np.linalg.eigh(m)[1][:, -1]
    assert disorientation_angle(gg.mean_quats[0], ref) < 1e-6
    assert disorientation_angle(gg.mean_quats[0], q0) < 1.0
    acc = np.zeros((1, 10))
    lab = np.zeros(n, np.int32)
    sk.quat_moment_sums.py_func(pts, np.ones(n, bool), lab, pts[:1].copy(), np.ones(1, bool), CUBIC_OPERATORS, acc)
    np.testing.assert_allclose(acc[0], m[np.triu_indices(4)], atol=1e-12)


def test_kam_and_gos_of_a_linear_gradient():
    ny, nx, d = 6, 9, 0.4
    # orientation turns by d degrees per column about the sample z axis: horizontal pairs d, vertical 0
    q = quat_multiply(quat_from_euler([10.0, 20.0, 30.0]),
                      quat_from_axis_angle([0.0, 0.0, 1.0], d * np.arange(nx)))
    gg = build_grain_graph(make_map(np.broadcast_to(q, (ny, nx, 4)).copy()), 15.0)
    kam = gg.kam_deg
    # interior point: two horizontal pairs at d, two vertical at 0 → d/2 (KAM: common practice)
    np.testing.assert_allclose(kam[1:-1, 1:-1], d / 2, atol=1e-4)
    np.testing.assert_allclose(kam[0, 1:-1], 2 * d / 3, atol=1e-4)  # edge row: 2 horizontal + 1 vertical
    # GOS: mean angle to the mean orientation, the middle column → mean |j − 4|·d
    assert gg.grains["gos_deg"].iloc[0] == pytest.approx(np.mean(np.abs(np.arange(nx) - 4)) * d, abs=1e-3)
    np.testing.assert_allclose(gg.misorientation_to_mean_deg[:, 4], 0.0, atol=1e-3)


# ----------------------------------------------------------------------------- clean-up
def test_small_grain_merges_into_longest_shared_boundary_neighbour():
    region = np.zeros((8, 10), int)
    region[:, 5:] = 1
    region[3, 4] = 2  # an island of 2 points: 3 edges with grain 0, 1 edge with grain 1...
    region[4, 4] = 2  # ...per point: column 4 touches column 5 (grain 1) on one side
    quats = [quat_from_euler([0, 0, 0]), quat_from_euler([40, 30, 0]), quat_from_euler([70, 50, 20])]
    om = region_map(region, quats)
    assert build_grain_graph(om, 15.0).n_grains == 3
    gg = build_grain_graph(om, 15.0, min_grain_size=3)
    assert gg.n_grains == 2
    assert gg.labels[3, 4] == gg.labels[0, 0]  # shares 4 edges with grain 0, 2 with grain 1
    assert any("merged 1 grains" in line for line in gg.log)
    # the same limit given as an area (point area 1 µm² at step 1)
    assert np.array_equal(build_grain_graph(om, 15.0, min_grain_area_um2=2.5).labels, gg.labels)
    assert gg.grains["area_um2"].sum() == pytest.approx(80.0)


def test_min_quality_leaves_points_out_and_fill_restores_them():
    region = np.zeros((6, 6), int)
    qual = np.ones((6, 6))
    qual[2, 2] = 0.1
    om = region_map(region, [quat_from_euler([1, 2, 3])], quality=qual)
    gg = build_grain_graph(om, 15.0, min_quality=0.5)
    assert gg.labels[2, 2] == -1 and gg.grains["n_points"].iloc[0] == 35
    gg = build_grain_graph(om, 15.0, min_quality=0.5, fill_unindexed=True)
    assert gg.labels[2, 2] == 0 and gg.grains["n_points"].iloc[0] == 36
    assert gg.grains["n_indexed"].iloc[0] == 35


def test_fill_kernel_majority_and_py_func():
    lab = np.array([[0, 1, 1], [0, -1, 1], [2, 1, 1]], dtype=np.int32).ravel()
    lab2 = lab.copy()
    n1, s1 = pk.fill_majority(lab, 3, 3, pk.ALL_OFFSETS["square"], 10)
    n2, s2 = pk.fill_majority.py_func(lab2, 3, 3, pk.ALL_OFFSETS["square"], 10)
    assert lab[4] == 1 and (n1, s1) == (n2, s2) == (1, 2)  # neighbours 0, 1, 1, 1: majority 1
    assert np.array_equal(lab, lab2)
    tie = np.array([[-1, 3, -1], [5, -1, 5], [-1, 3, -1]], dtype=np.int32).ravel()
    pk.fill_majority(tie, 3, 3, pk.ALL_OFFSETS["square"], 1)
    assert tie[4] == 3  # 3, 3, 5, 5: a tie goes to the smaller id


def test_chain_kernel_py_func_agrees():
    om, _, _ = voronoi_map(40, 40, 12, seed=3, unindexed=0.0)
    gg = build_grain_graph(om, 15.0)
    for bid in range(len(gg.boundaries)):
        lines = gg.boundary_polylines[bid]
        pts = sum(len(line) - 2 for line in lines)
        assert pts == gg.boundaries["n_edges"].iloc[bid]
        for line in lines:
            # chained cell edges touch: consecutive midpoints are one step apart on a straight run,
            # step/√2 round a corner, step/2 from an end vertex (square grid, step 1)
            gaps = np.hypot(*np.diff(line, axis=0).T)
            assert np.all(np.isclose(gaps, 1.0) | np.isclose(gaps, 1 / math.sqrt(2)) | np.isclose(gaps, 0.5))
    # compiled and pure-Python chaining give the same polylines on a tiny case
    from slipnet.grains._steps import _edge_geometry

    a, b = _pairs(om)
    lab = gg.labels.ravel()
    sel = (lab[a] != lab[b])
    ea, eb = a[sel], b[sel]
    key = np.minimum(lab[ea], lab[eb]) * 100 + np.maximum(lab[ea], lab[eb])
    o = np.argsort(key, kind="stable")
    key, ea, eb = key[o], ea[o], eb[o]
    _, bstart = np.unique(key, return_index=True)
    bstart = np.append(bstart, key.size)
    *_, v0, v1, _, _ = _edge_geometry(ea, eb, om)
    outs = []
    for fn in (bk.chain_edges, bk.chain_edges.py_func):
        res = [np.empty(ea.size, np.int64), np.zeros(ea.size, bool), np.zeros(ea.size, np.int64),
               np.zeros(ea.size, np.int64)]
        fn(bstart, v0, v1, *res)
        outs.append(res)
    for x, y in zip(*outs, strict=True):
        assert np.array_equal(x, y)


# ----------------------------------------------------------------------------- Mackenzie
def test_numerical_mackenzie_curve_matches_analytic_part():
    # Mackenzie (1958, Biometrika 45:229): below 45° the density of random cubic
    # disorientations is (24/π)(1 − cos θ), so P(θ ≤ x) = (24/π)(x − sin x)
    for deg in (20.0, 35.0, 45.0):
        x = math.radians(deg)
        assert mackenzie_cdf(deg) == pytest.approx(24 / math.pi * (x - math.sin(x)), abs=2.5e-3)
    assert mackenzie_cdf(62.81) == 1.0  # largest disorientation 62.8° (Mackenzie 1958)


def test_untextured_boundary_misorientations_follow_mackenzie():
    from slipnet.synthetic import make_specimen

    spec = make_specimen((200, 200), 1.0, grain_size_um=8.0, noise_deg=0.5, gradient_deg=0.0, seed=12)
    gg = build_grain_graph(spec.omap, 15.0)
    ang = gg.boundaries["misorientation_deg"].to_numpy()
    assert ang.size > 500
    lo = mackenzie_cdf(15.0)

    def cdf(x):  # Mackenzie (1958) conditioned on exceeding the grain threshold
        return np.clip((mackenzie_cdf(x) - lo) / (1 - lo), 0, 1)

    # Kolmogorov–Smirnov test (scipy.stats.kstest) against the numerical Mackenzie curve
    assert stats.kstest(ang, cdf).pvalue > 0.01
    # the test can fail: a textured specimen's boundaries do not follow the curve
    tex = make_specimen((200, 200), 1.0, grain_size_um=8.0, texture="fibre", fibre_spread_deg=15.0,
                        gradient_deg=0.0, seed=12)
    ang_t = build_grain_graph(tex.omap, 15.0).boundaries["misorientation_deg"].to_numpy()
    assert stats.kstest(ang_t, cdf).pvalue < 1e-6


# ----------------------------------------------------------------------------- graph and exports
def test_graph_attributes_and_exports(tmp_path):
    om, _, _ = voronoi_map(50, 60, 15, seed=6)
    gg = build_grain_graph(om, 15.0, subgrain_deg=3.0)
    g = gg.graph
    assert g.number_of_nodes() == gg.n_grains and g.number_of_edges() == len(gg.boundaries)
    for _, attrs in g.nodes(data=True):
        assert all(isinstance(v, (int, float, str, bool)) for v in attrs.values())
    for _, _, attrs in g.edges(data=True):
        assert all(isinstance(v, (int, float, str)) for v in attrs.values())
        assert 0 <= attrs["trace_angle_deg"] < 180
    files = write_grains(gg, tmp_path, figures=False)
    back = nx.read_graphml(files["graph"], node_type=int)
    assert back.number_of_edges() == g.number_of_edges()
    e = next(iter(g.edges))
    assert back.edges[e]["boundary_class"] == g.edges[e]["boundary_class"]
    assert back.edges[e]["length_um"] == pytest.approx(g.edges[e]["length_um"])
    tab = pd.read_csv(files["boundaries"])
    assert (tab["grain_a"] < tab["grain_b"]).all() and len(tab) == len(gg.boundaries)
    assert np.array_equal(np.load(files["labels"]), gg.labels)
    assert gg.labels.dtype == np.int64


def test_write_outputs_with_pictures_and_caution(tmp_path):
    from slipnet.cautions import CAUTION

    om, _, _ = voronoi_map(40, 40, 10, grid="hex", seed=2)
    gg = build_grain_graph(om, 15.0)
    paths = write_grains(gg, tmp_path)
    names = {p.name for p in paths.values()}
    assert {"grains.csv", "boundaries.csv", "grain_graph.graphml", "grain_labels.npy", "grain_map.png",
            "misorientation_histogram.png", "summary.md"} <= names
    assert CAUTION in (tmp_path / "summary.md").read_text(encoding="utf-8")


def test_boundary_between_non_neighbours_is_refused():
    region = np.zeros((4, 9), int)
    region[:, 3:6] = 1
    region[:, 6:] = 2
    quats = [quat_from_euler([0, 0, 0]), quat_from_euler([40, 30, 0]), quat_from_euler([70, 50, 20])]
    gg = build_grain_graph(region_map(region, quats), 15.0)
    with pytest.raises(ParameterError, match="share no boundary"):
        gg.boundary(0, 2)
    with pytest.raises(ParameterError, match="grain id"):
        gg.neighbours(7)


# ----------------------------------------------------------------------------- bad parameters
@pytest.mark.parametrize("thr", [0.0, -5.0, 62.8, 70.0, float("nan")])
def test_bad_threshold_refused(thr):
    om = region_map(np.zeros((3, 3), int), [[1.0, 0, 0, 0]])
    with pytest.raises(ParameterError, match="threshold_deg"):
        build_grain_graph(om, thr)


def test_bad_inputs_refused():
    om = region_map(np.zeros((3, 3), int), [[1.0, 0, 0, 0]])
    with pytest.raises(ParameterError, match="subgrain_deg"):
        build_grain_graph(om, 10.0, subgrain_deg=12.0)
    for bad in (0, 2.5, "x", True):
        with pytest.raises(ParameterError, match="min_grain_size should be a whole number"):
            build_grain_graph(om, 10.0, min_grain_size=bad)
    with pytest.raises(ParameterError, match="fill_sweeps"):
        build_grain_graph(om, 10.0, fill_unindexed=True, fill_sweeps=0)
    with pytest.raises(ParameterError, match="min_grain_area_um2"):
        build_grain_graph(om, 10.0, min_grain_area_um2=-1.0)
    with pytest.raises(ParameterError, match="min_quality should be a finite number"):
        build_grain_graph(om, 10.0, min_quality="high")
    with pytest.raises(ParameterError, match="min_quality"):
        build_grain_graph(om, 10.0, min_quality=5.0)
    with pytest.raises(ParameterError, match="OrientationMap"):
        build_grain_graph(np.zeros((3, 3, 4)), 10.0)
    with pytest.raises(ParameterError, match="no indexed point"):
        build_grain_graph(region_map(-np.ones((3, 3), int), [[1.0, 0, 0, 0]]), 10.0)
    with pytest.raises(ParameterError, match="empty"):
        build_grain_graph(make_map(np.zeros((0, 4, 4))), 10.0)


def test_cli_grains_writes_outputs_and_reports_errors(tmp_path, capsys):
    from slipnet.cli import main
    from slipnet.io import write_map

    om, _, _ = voronoi_map(40, 50, 10, seed=4)
    path = write_map(om, tmp_path / "m.npz")
    out = tmp_path / "out"
    assert main(["grains", str(path), "--out", str(out), "--fill", "--min-points", "2", "--subgrain", "2"]) == 0
    assert {"grains.csv", "boundaries.csv", "grain_graph.graphml", "grain_labels.npy", "grain_map.png",
            "summary.md", "subgrain_boundaries.csv"} <= {p.name for p in out.iterdir()}
    assert (np.load(out / "grain_labels.npy") >= 0).all()
    assert main(["grains", str(path), "--threshold", "70"]) == 2
    assert "threshold_deg should lie in" in capsys.readouterr().err


@pytest.mark.parametrize("grid", ["square", "hex"])
def test_chunked_parallel_sums_equal_serial(grid):
    om, _, _ = voronoi_map(30, 40, 12, grid=grid, seed=9)
    gg = build_grain_graph(om, 15.0)
    lab = gg.labels.ravel().astype(np.int32)
    n = gg.n_grains
    valid = om.indexed.ravel()
    phase = om.phase.ravel()
    q = om.quats.reshape(-1, 4)

    def geometry(fn, *extra):
        out = [np.zeros((n, 7)), np.empty((n, 4)), np.empty(n, np.int64), np.empty(n, np.int32), np.empty(n, bool)]
        fn(lab, valid, phase, 30, 40, 1.0, om.row_spacing, grid == "hex", n, *out, *extra)
        return out

    for u, v in zip(geometry(sk.grain_point_sums), geometry(sk.grain_point_sums_parallel, 3), strict=True):
        np.testing.assert_allclose(u, v, rtol=1e-12)
    a, b, ang = _neighbour_pairs(om.shape, grid, q, valid, phase)
    start = np.concatenate(([0], np.cumsum(pk.row_pair_counts(30, 40, pk.FORWARD_OFFSETS[grid]))))
    k1 = [np.zeros(lab.size), np.zeros(lab.size, np.int32)]
    kam_sums(a, b, ang, lab, np.float32(15.0), *k1)
    with np.errstate(invalid="ignore", divide="ignore"):
        ref = (k1[0] / k1[1]).astype(np.float32)
    for fn in (sk.kam_rows, sk.kam_rows.py_func):
        kam = np.empty(lab.size, np.float32)
        fn(a, b, ang, np.float32(15.0), start, 40, kam)
        np.testing.assert_allclose(kam, ref, rtol=1e-6)
    np.testing.assert_allclose(gg.kam_deg.ravel(), ref, rtol=1e-6)
    acc1, acc3 = np.zeros((n, 10)), np.zeros((n, 10))
    sel = np.ones(n, bool)
    sk.quat_moment_sums(q, valid, lab, gg.mean_quats, sel, CUBIC_OPERATORS, acc1)
    sk.quat_moment_sums_parallel(q, valid, lab, gg.mean_quats, sel, CUBIC_OPERATORS, acc3, 3)
    np.testing.assert_allclose(acc1, acc3, rtol=1e-12)

"""The fast paths of the grain build against the plain versions they replaced (same values, bit for bit)."""

from __future__ import annotations

import networkx as nx
import numpy as np
import pytest

from slipnet.crystal import quat_from_axis_angle, quat_multiply, random_quats
from slipnet.grains import build_grain_graph
from slipnet.maps import OrientationMap
from slipnet.maps.grain_graph import EDGE_KEYS, NODE_KEYS


def voronoi(ny: int, nx_: int, n_cells: int, grid: str = "square", seed: int = 0) -> OrientationMap:
    """Voronoi cells (in index space) with random orientations, 0.5° noise and 2 % holes."""
    rng = np.random.default_rng(seed)
    centres = rng.uniform(0, 1, (n_cells, 2)) * (ny, nx_)
    ii, jj = np.indices((ny, nx_))
    d2 = (ii[..., None] - centres[:, 0]) ** 2 + (jj[..., None] - centres[:, 1]) ** 2
    lab = np.argmin(d2, axis=-1).ravel()
    gq = random_quats(n_cells, seed=seed)
    noise = quat_from_axis_angle(rng.normal(size=(lab.size, 3)), np.abs(rng.normal(0.0, 0.5, lab.size)))
    q = quat_multiply(noise, gq[lab])
    ind = rng.random(lab.size) >= 0.02
    q[~ind] = np.nan
    shape = (ny, nx_)
    return OrientationMap(q.reshape(ny, nx_, 4), np.zeros(shape, np.int32), np.ones(shape, np.float32),
                          ind.reshape(shape), 1.0, grid=grid)


def public_graph(gg) -> nx.Graph:
    """The graph as networkx's public calls build it (the reference of the direct assembly)."""
    g = nx.Graph(**gg.graph.graph)
    grains, bd = gg.grains, gg.boundaries
    g.add_nodes_from((int(r["grain"]), {k: r[k] for k in NODE_KEYS}) for r in grains.to_dict("records"))
    g.add_edges_from((int(r["grain_a"]), int(r["grain_b"]), {k: r[k] for k in EDGE_KEYS})
                     for r in bd.to_dict("records"))
    return g


@pytest.mark.parametrize("grid", ["square", "hex"])
def test_graph_equals_the_one_built_through_networkx_calls(grid):
    gg = build_grain_graph(voronoi(60, 70, 25, grid, seed=3))
    ref = public_graph(gg)
    g = gg.graph
    assert g.graph == ref.graph
    assert list(g.nodes(data=True)) == list(ref.nodes(data=True))
    assert list(g.edges(data=True)) == list(ref.edges(data=True))
    assert [list(g.adj[u]) for u in g] == [list(ref.adj[u]) for u in ref]  # neighbour order too
    # both directions of an edge share one attribute dict, as after add_edges_from
    u, v = next(iter(g.edges()))
    assert g.adj[u][v] is g.adj[v][u]
    g.edges[u, v]["extra"] = 1.0
    assert g.edges[v, u]["extra"] == 1.0
    assert len(g) == gg.n_grains and g.number_of_edges() == len(gg.boundaries)
    assert all(isinstance(val, (int, float, str, bool)) for _, d in g.nodes(data=True) for val in d.values())


def reference_lines(bnd, geo, omap, k):
    """The array code the polyline kernel replaced: chains laid out, smoothed by one cumulative sum,
    lengths by bincount (kept here as the reference, bit for bit)."""
    from slipnet.grains import _boundary_kernels as bk

    m_edges = bnd.ea.size
    eorder = np.empty(m_edges, dtype=np.int64)
    first = np.zeros(m_edges, dtype=np.bool_)
    start_v = np.zeros(m_edges, dtype=np.int64)
    end_v = np.zeros(m_edges, dtype=np.int64)
    bk.chain_edges(bnd.bstart, geo.v0, geo.v1, eorder, first, start_v, end_v)
    width, off, ys, half_step = geo.lattice

    def vxy(v):
        r, c = np.divmod(v, width)
        return (c - 2) * half_step, (r - off) / ys

    chain_id = np.cumsum(first) - 1
    n_chains = int(first.sum())
    cstart = np.flatnonzero(first)
    cend = np.append(cstart[1:], m_edges) - 1
    xy = np.empty((m_edges + 2 * n_chains, 2))
    pos_mid = np.arange(m_edges) + 2 * chain_id + 1
    xy[pos_mid, 0], xy[pos_mid, 1] = geo.mx[eorder], geo.my[eorder]
    sxv, syv = vxy(start_v[cstart])
    exv, eyv = vxy(end_v[cstart])
    ps = cstart + 2 * np.arange(n_chains)
    pe = cend + 2 * np.arange(n_chains) + 2
    xy[ps, 0], xy[ps, 1] = sxv, syv
    xy[pe, 0], xy[pe, 1] = exv, eyv
    xy += np.asarray(omap.origin)
    chain_off = np.append(ps, xy.shape[0]).astype(np.int64)
    chain_b = bnd.bid[eorder[cstart]]
    boundary_chains = np.searchsorted(chain_b, np.arange(bnd.n + 1)).astype(np.int64)
    clen = cend - cstart + 1
    ordc = np.lexsort((-clen, chain_b))
    firstc = ordc[np.concatenate(([True], chain_b[ordc][1:] != chain_b[ordc][:-1]))]
    ends = np.column_stack((sxv[firstc], syv[firstc], exv[firstc], eyv[firstc])) + np.tile(omap.origin, 2)
    idx = np.arange(xy.shape[0])
    chain = np.searchsorted(chain_off, idx, side="right") - 1
    h = np.minimum(np.minimum(idx - chain_off[chain], chain_off[chain + 1] - 1 - idx), k)
    cs = np.vstack((np.zeros((1, 2)), np.cumsum(xy, axis=0)))
    sm = (cs[idx + h + 1] - cs[idx - h]) / (2 * h + 1)[:, None] if k > 0 else xy
    seg = np.hypot(*np.diff(sm, axis=0).T)
    seg_ok = np.ones(seg.size, dtype=bool)
    seg_ok[ps[1:] - 1] = False
    seg_chain = np.repeat(np.arange(n_chains), np.diff(chain_off))[:-1]
    chain_len = np.bincount(seg_chain[seg_ok], seg[seg_ok], n_chains)
    return xy, chain_off, boundary_chains, ends, np.bincount(chain_b, chain_len, bnd.n)


@pytest.mark.parametrize(("grid", "k"), [("square", 4), ("hex", 4), ("square", 0), ("hex", 2)])
def test_polyline_kernel_equals_the_array_code(grid, k):
    from slipnet.grains import _boundaries as bo
    from slipnet.grains._steps import _edge_geometry, _neighbour_pairs

    om = voronoi(70, 80, 30, grid, seed=5)
    om = OrientationMap(om.quats, om.phase, om.quality, om.indexed, 0.7, grid=grid, origin=(-3.25, 11.5))
    gg = build_grain_graph(om)
    a, b = _neighbour_pairs(om.shape, grid)
    bnd = bo.group_boundaries(a, b, gg.labels.ravel().astype(np.int32), gg.n_grains)
    geo = bo.EdgeGeometry(*_edge_geometry(bnd.ea, bnd.eb, om))
    ref = reference_lines(bnd, geo, om, k)
    saved = bo.TRACE_SMOOTHING
    try:
        bo.TRACE_SMOOTHING = k
        got = bo.boundary_lines(bnd, geo, om)
    finally:
        bo.TRACE_SMOOTHING = saved
    xy, off, bc = got.polylines.arrays
    for r, g in zip(ref, (xy, off, bc, got.ends_xy, got.trace_length), strict=True):
        assert r.shape == g.shape and r.dtype == g.dtype
        assert np.array_equal(r, g)
    assert got.n_chains == off.size - 1 and np.array_equal(got.n_lines, np.diff(bc))
    if k == 4:  # the build used the same lines
        assert np.array_equal(gg.boundaries["trace_length_um"].to_numpy(), got.trace_length)


@pytest.mark.parametrize("grid", ["square", "hex"])
@pytest.mark.parametrize("n_bands", [1, 2, 3, 7, 1000])
def test_union_find_in_bands_equals_the_serial_one(grid, n_bands):
    from slipnet.grains import _pair_kernels as pk
    from slipnet.grains._steps import _neighbour_pairs

    om = voronoi(45, 38, 12, grid, seed=n_bands)
    q, ok = om.quats.reshape(-1, 4), om.indexed.ravel()
    a, b, ang = _neighbour_pairs(om.shape, grid, q, ok, om.phase.ravel())
    # long winding sets that cross many bands, and thresholds that join nearly nothing or everything
    for thr in (0.3, 2.0, 15.0, 62.0):
        ref = np.arange(ok.size, dtype=np.int32)
        pk.union_below(ref, a, b, ang, np.float32(thr))
        row_start = np.zeros(om.shape[0] + 1, dtype=np.int64)
        np.cumsum(pk.row_pair_counts(*om.shape, pk.FORWARD_OFFSETS[grid]), out=row_start[1:])
        got = np.arange(ok.size, dtype=np.int32)
        pk.union_below_bands(got, a, b, ang, np.float32(thr), row_start, om.shape[1], n_bands)
        assert np.array_equal(got, ref), thr


@pytest.mark.parametrize("grid", ["square", "hex"])
def test_second_mean_pass_over_the_grains_rows_equals_the_whole_map_pass(grid):
    from slipnet.grains._steps import _mean_orientations

    gg = build_grain_graph(voronoi(50, 60, 20, grid, seed=11))
    om, n = gg.omap, gg.n_grains
    q, ok = om.quats.reshape(-1, 4), om.indexed.ravel()
    labels = gg.labels.ravel().astype(np.int32)
    rows_of = np.indices(om.shape)[0].ravel()
    first_row = np.array([rows_of[labels == g].min() for g in range(n)])
    last_row = np.array([rows_of[labels == g].max() for g in range(n)])
    only = np.random.default_rng(1).random(n) < 0.3
    # references far from the means, so the 24-operator search runs too
    ref = np.asarray(quat_multiply(gg.mean_quats, quat_from_axis_angle(np.tile([1.0, 2.0, 3.0], (n, 1)),
                                                                       np.full(n, 40.0))))
    whole = _mean_orientations(q, ok, labels, n, ref, only=only)
    some = _mean_orientations(q, ok, labels, n, ref, only=only, rows=(om.shape[1], first_row, last_row))
    assert np.array_equal(whole, some)
    assert np.array_equal(some[~only], np.where(ref[~only, :1] < 0, -ref[~only], ref[~only]))

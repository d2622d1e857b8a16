"""Boundary steps of :func:`slipnet.grains.build_grain_graph`: point pairs grouped into boundaries,
trace directions, misorientations and classes, boundary polylines and triple junctions.

Private helpers of :mod:`slipnet.grains.build`; the hot loops are in
:mod:`slipnet.grains._boundary_kernels`.
"""

from __future__ import annotations

from collections.abc import Callable
from typing import TYPE_CHECKING, NamedTuple

import numpy as np

from slipnet.crystal.csl import classify_boundaries
from slipnet.crystal.orientation import disorientation, misorientation
from slipnet.grains import _boundary_kernels as _bk
from slipnet.maps.grain_graph import BoundaryPolylines
from slipnet.maps.orientation_map import OrientationMap

if TYPE_CHECKING:  # pandas is imported where a table is made, so `import slipnet.grains` stays cheap
    import pandas as pd


class Boundaries(NamedTuple):
    """The boundary point pairs (cell edges), sorted by grain pair, and the boundaries they make."""

    ea: np.ndarray  #: (m,) int32 first point of each edge
    eb: np.ndarray  #: (m,) int32 second point of each edge
    bstart: np.ndarray  #: (nbd + 1,) int64 edge range of each boundary
    bid: np.ndarray  #: (m,) boundary of each edge
    counts: np.ndarray  #: (nbd,) edges per boundary
    grain_a: np.ndarray  #: (nbd,) smaller grain id
    grain_b: np.ndarray  #: (nbd,) larger grain id

    @property
    def n(self) -> int:
        """Number of boundaries."""
        return int(self.counts.size)


class EdgeGeometry(NamedTuple):
    """Midpoints, unit directions and vertex ids of the boundary cell edges (see ``_edge_geometry``)."""

    mx: np.ndarray
    my: np.ndarray
    tx: np.ndarray
    ty: np.ndarray
    v0: np.ndarray
    v1: np.ndarray
    vxy: Callable[[np.ndarray], tuple[np.ndarray, np.ndarray]]
    edge_len: float


class Lines(NamedTuple):
    """Boundary polylines and what the boundary table takes from them."""

    polylines: BoundaryPolylines
    ends_xy: np.ndarray  #: (nbd, 4) start x, y and end x, y of each boundary's longest line, µm
    n_lines: np.ndarray  #: (nbd,) lines per boundary
    trace_length: np.ndarray  #: (nbd,) length along the smoothed midpoint polylines, µm
    n_chains: int


def group_boundaries(a: np.ndarray, b: np.ndarray, labels: np.ndarray, n: int) -> Boundaries:
    """Keep the pairs across two grains and group them by grain pair, in (grain_a, grain_b) order."""
    ea, eb = _bk.boundary_pairs(a, b, labels)
    ga, gb = labels[ea].astype(np.int64), labels[eb].astype(np.int64)
    lo, hi = np.minimum(ga, gb), np.maximum(ga, gb)
    key = lo * max(n, 1) + hi
    order = _bk.order_by_key(lo, hi, max(n, 1))
    key, ea, eb = key[order], ea[order], eb[order]
    del order, lo, hi, ga, gb
    # key is sorted: unique values from the positions where it changes
    bstart_ = np.flatnonzero(np.concatenate(([True], key[1:] != key[:-1]))) if key.size else np.zeros(0, np.int64)
    ukey = key[bstart_]
    counts = np.diff(np.append(bstart_, key.size))
    nbd = ukey.size
    bstart = np.append(bstart_, key.size).astype(np.int64)
    bid = np.repeat(np.arange(nbd), counts)
    del key
    grain_a, grain_b = ukey // max(n, 1), ukey % max(n, 1)
    return Boundaries(ea, eb, bstart, bid, counts, grain_a, grain_b)


def trace_angles(bnd: Boundaries, geo: EdgeGeometry) -> np.ndarray:
    """Trace direction of each boundary, degrees in [0, 180), from the second moment of its edge segments."""
    bid, nbd, counts = bnd.bid, bnd.n, bnd.counts
    mx, my, tx, ty, edge_len = geo.mx, geo.my, geo.tx, geo.ty, geo.edge_len
    # trace: second moment of the union of edge segments = cov(midpoints) + ℓ²/12 · mean(t tᵀ)
    w = np.maximum(counts, 1)
    sx, sy = np.bincount(bid, mx, nbd) / w, np.bincount(bid, my, nbd) / w
    cxx = np.bincount(bid, mx * mx, nbd) / w - sx * sx + edge_len**2 / 12 * np.bincount(bid, tx * tx, nbd) / w
    cyy = np.bincount(bid, my * my, nbd) / w - sy * sy + edge_len**2 / 12 * np.bincount(bid, ty * ty, nbd) / w
    cxy = np.bincount(bid, mx * my, nbd) / w - sx * sy + edge_len**2 / 12 * np.bincount(bid, tx * ty, nbd) / w
    return np.degrees(0.5 * np.arctan2(2.0 * cxy, cxx - cyy)) % 180.0


def boundary_misorientations(bnd: Boundaries, means: np.ndarray, gphase: np.ndarray, sub: float | None):
    """Disorientation angle and axis of each boundary from the grain means, its class and CSL deviation."""
    mq_a, mq_b = means[bnd.grain_a], means[bnd.grain_b]
    angle, axis = disorientation(mq_a, mq_b)
    same_phase = gphase[bnd.grain_a] == gphase[bnd.grain_b]
    bclass, deviation = classify_boundaries(angle, misorientation(mq_a, mq_b), same_phase, sub)
    return angle, axis, bclass, deviation


#: Half-width (points) of the moving average the trace length is measured along.
TRACE_SMOOTHING = 4


def _smoothed_chains(xy: np.ndarray, chain_off: np.ndarray, k: int) -> np.ndarray:
    """Centred moving average of each chain's points over up to ``2k + 1`` points, end points kept.

    The window shrinks symmetrically near a chain's ends, so no chain reads another's points.
    """
    n = xy.shape[0]
    if n == 0 or k <= 0:
        return xy
    idx = np.arange(n)
    chain = np.searchsorted(chain_off, idx, side="right") - 1
    start, end = chain_off[chain], chain_off[chain + 1] - 1
    h = np.minimum(np.minimum(idx - start, end - idx), k)
    cs = np.vstack((np.zeros((1, 2)), np.cumsum(xy, axis=0)))
    return (cs[idx + h + 1] - cs[idx - h]) / (2 * h + 1)[:, None]


def boundary_lines(bnd: Boundaries, geo: EdgeGeometry, omap: OrientationMap) -> Lines:
    """Chain each boundary's cell edges through shared vertices into polylines (µm, map origin added)."""
    bid, nbd, mx, my, vxy = bnd.bid, bnd.n, geo.mx, geo.my, geo.vxy
    m_edges = bnd.ea.size
    eorder = np.empty(m_edges, dtype=np.int64)
    first_of_chain = np.zeros(m_edges, dtype=np.bool_)
    start_v = np.zeros(m_edges, dtype=np.int64)
    end_v = np.zeros(m_edges, dtype=np.int64)
    if m_edges:
        _bk.chain_edges(bnd.bstart, geo.v0, geo.v1, eorder, first_of_chain, start_v, end_v)
    chain_id = np.cumsum(first_of_chain) - 1
    n_chains = int(first_of_chain.sum())
    cstart = np.flatnonzero(first_of_chain)
    cend = np.append(cstart[1:], m_edges) - 1
    xy = np.empty((m_edges + 2 * n_chains, 2))
    pos_mid = np.arange(m_edges) + 2 * chain_id + 1
    xy[pos_mid, 0] = mx[eorder]
    xy[pos_mid, 1] = my[eorder]
    sxv, syv = vxy(start_v[cstart])
    exv, eyv = vxy(end_v[cstart])
    ps = cstart + 2 * np.arange(n_chains)
    pe = cend + 2 * np.arange(n_chains) + 2
    xy[ps, 0], xy[ps, 1] = sxv, syv
    xy[pe, 0], xy[pe, 1] = exv, eyv
    xy += np.asarray(omap.origin)
    chain_off = np.append(ps, xy.shape[0]).astype(np.int64)
    chain_b = bid[eorder[cstart]] if n_chains else np.zeros(0, dtype=np.int64)
    boundary_chains = np.searchsorted(chain_b, np.arange(nbd + 1)).astype(np.int64)
    polylines = BoundaryPolylines(xy, chain_off, boundary_chains)
    # end points: those of the longest chain of each boundary
    clen = cend - cstart + 1
    ordc = np.lexsort((-clen, chain_b))
    firstc = ordc[np.concatenate(([True], chain_b[ordc][1:] != chain_b[ordc][:-1]))] if n_chains else ordc
    ends_xy = np.column_stack((sxv[firstc], syv[firstc], exv[firstc], eyv[firstc])) + np.tile(omap.origin, 2)
    n_chain_per_b = np.diff(boundary_chains)
    # length along the chained midpoint polylines, each first smoothed by a moving average over up
    # to 2 * TRACE_SMOOTHING + 1 points (ends fixed): the raw midpoints zigzag on the grid, which
    # overstates a straight boundary by up to 8 % on square and 15 % on hex grids; smoothed, every
    # angle measures within about 1 % (tests/test_grains.py)
    sm = _smoothed_chains(xy, chain_off, TRACE_SMOOTHING)
    seg = np.hypot(*np.diff(sm, axis=0).T) if xy.shape[0] > 1 else np.zeros(0)
    seg_ok = np.ones(seg.size, dtype=bool)
    seg_ok[ps[1:] - 1] = False
    seg_chain = np.repeat(np.arange(n_chains), np.diff(chain_off))[:-1] if n_chains else np.zeros(0, np.int64)
    chain_len = np.bincount(seg_chain[seg_ok], seg[seg_ok], n_chains)
    trace_length = np.bincount(chain_b, chain_len, nbd) if n_chains else np.zeros(nbd)
    return Lines(polylines, ends_xy, n_chain_per_b, trace_length, n_chains)


def junction_table(labels: np.ndarray, omap: OrientationMap, m_edges: int) -> pd.DataFrame:
    """Triple-junction table: cell vertices where three or more grains meet, one pass over the labels."""
    import pandas as pd

    ny, nx_ = omap.shape
    # 2x2 cells on square grids, lattice triangles on hex grids
    jx, jy, jg, jn = _bk.triple_junctions(labels, ny, nx_, omap.grid == "hex", omap.step, omap.row_spacing,
                                          m_edges + 16)  # each junction has >= 2 boundary edges
    return pd.DataFrame({
        "junction_id": np.arange(jx.size), "x_um": jx + omap.origin[0], "y_um": jy + omap.origin[1],
        "n_grains": jn, "grain_1": jg[:, 0], "grain_2": jg[:, 1], "grain_3": jg[:, 2], "grain_4": jg[:, 3],
    })

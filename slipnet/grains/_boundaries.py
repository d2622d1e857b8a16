"""Boundary steps of :func:`slipnet.grains.build_grain_graph`: point pairs grouped into boundaries,
trace directions, misorientations and classes, boundary polylines and triple junctions.

Private helpers of :mod:`slipnet.grains.build`; the hot loops are in
:mod:`slipnet.grains._boundary_kernels`.
"""

from __future__ import annotations

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
    #: vertex lattice ``(width, off, ys, half_step)``: id ``v`` sits at x = (v % width − 2) · half_step,
    #: y = (v // width − off) / ys, µm from point 0
    lattice: tuple[int, int, float, float]
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


def boundary_lines(bnd: Boundaries, geo: EdgeGeometry, omap: OrientationMap) -> Lines:
    """Chain each boundary's cell edges through shared vertices into polylines (µm, map origin added).

    The trace length is measured along the chained midpoint polylines, each first smoothed by a
    moving average over up to 2 * TRACE_SMOOTHING + 1 points (ends fixed): the raw midpoints
    zigzag on the grid, which overstates a straight boundary by up to 8 % on square and 15 % on
    hex grids; smoothed, every angle measures within about 1 % (tests/test_grains.py).
    """
    m_edges = bnd.ea.size
    eorder = np.empty(m_edges, dtype=np.int64)
    first_of_chain = np.zeros(m_edges, dtype=np.bool_)
    start_v = np.zeros(m_edges, dtype=np.int64)
    end_v = np.zeros(m_edges, dtype=np.int64)
    if m_edges:
        _bk.chain_edges(bnd.bstart, geo.v0, geo.v1, eorder, first_of_chain, start_v, end_v)
    width, off, ys, half_step = geo.lattice
    ox, oy = (float(v) for v in omap.origin)
    xy, chain_off, boundary_chains, ends_xy, trace_length = _bk.chain_polylines(
        bnd.bstart, eorder, first_of_chain, start_v, end_v, geo.mx, geo.my, width, off, ys, half_step, ox, oy,
        TRACE_SMOOTHING)
    polylines = BoundaryPolylines(xy, chain_off, boundary_chains)
    return Lines(polylines, ends_xy, np.diff(boundary_chains), trace_length, int(chain_off.size - 1))


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

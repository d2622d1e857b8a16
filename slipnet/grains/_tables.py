"""Per-grain and table steps of :func:`slipnet.grains.build_grain_graph`: grain sums and
orientation statistics, the grain and boundary tables, sub-grains and the networkx graph.

Private helpers of :mod:`slipnet.grains.build`; the hot loops are in
:mod:`slipnet.grains._sum_kernels` and :mod:`slipnet.grains._pair_kernels`.
"""

from __future__ import annotations

from itertools import repeat
from typing import TYPE_CHECKING, NamedTuple

import numpy as np

from slipnet.crystal.orientation import disorientation_angle, euler_from_quat
from slipnet.grains import _pair_kernels as _pk
from slipnet.grains import _sum_kernels as _sk
from slipnet.grains._boundaries import Boundaries, Lines
from slipnet.grains._steps import _compact, _grain_means, _mean_orientations, _n_chunks, _union_below
from slipnet.maps.grain_graph import EDGE_KEYS, NODE_KEYS
from slipnet.maps.orientation_map import OrientationMap

if TYPE_CHECKING:  # pandas and networkx (~1 s) are imported where a table or graph is made
    import networkx as nx
    import pandas as pd


class GrainStats(NamedTuple):
    """Per-grain sums and orientation statistics, and the per-point KAM and GOS terms."""

    sums: np.ndarray  #: (n, 7) count, Σx, Σy, Σxx, Σxy, Σyy, valid count (µm, origin at point 0)
    bbox: np.ndarray  #: (n, 4) x_min, x_max, y_min, y_max
    gphase: np.ndarray  #: (n,) phase of each grain's first valid point
    edge: np.ndarray  #: (n,) whether the grain touches the map edge
    means: np.ndarray  #: (n, 4) mean orientations
    mis: np.ndarray  #: (npts,) float32 disorientation to the grain mean, degrees
    gos: np.ndarray  #: (n,) grain orientation spread, degrees
    kam: np.ndarray  #: (npts,) float32 kernel average misorientation, degrees


def grain_stats(omap: OrientationMap, labels: np.ndarray, n: int, valid: np.ndarray, a: np.ndarray,
                b: np.ndarray, ang: np.ndarray, thr: float) -> GrainStats:
    """Per-grain point sums, mean orientations, disorientation to the mean (GOS) and KAM."""
    ny, nx_ = omap.shape
    npts = ny * nx_
    qflat = omap.quats.reshape(-1, 4)
    phase_flat = omap.phase.reshape(-1)
    sums = np.zeros((n, 7))
    bbox = np.empty((n, 4))
    first = np.empty(n, dtype=np.int64)
    gphase = np.empty(n, dtype=np.int32)
    edge = np.empty(n, dtype=np.bool_)
    _sk.grain_point_sums_parallel(labels, valid, phase_flat, ny, nx_, omap.step, omap.row_spacing,
                                  omap.grid == "hex", n, sums, bbox, first, gphase, edge, _n_chunks(npts, ny))
    # the last row of each grain from its bounding box (y = row · row spacing), one row to spare
    last_row = np.minimum(np.rint(np.nan_to_num(bbox[:, 3], posinf=ny, neginf=ny) / omap.row_spacing) + 1,
                          ny - 1).astype(np.int64)
    means = _grain_means(qflat, valid, labels, n, first, nx_, last_row)
    mis = np.empty(npts, dtype=np.float32)
    _sk.point_to_reference(qflat, valid, labels, means, mis)
    gos = _sk.grain_means_of(labels, mis, n)  # mis is NaN where a point has no orientation
    row_start = np.zeros(ny + 1, dtype=np.int64)
    np.cumsum(_pk.row_pair_counts(ny, nx_, _pk.FORWARD_OFFSETS[omap.grid]), out=row_start[1:])
    kam = np.empty(npts, dtype=np.float32)
    _sk.kam_rows(a, b, ang, np.float32(thr), row_start, nx_, kam)
    return GrainStats(sums, bbox, gphase, edge, means, mis, gos, kam)


def grain_table(omap: OrientationMap, st: GrainStats, labels: np.ndarray, n: int, bnd: Boundaries) -> pd.DataFrame:
    """The grain table: size, shape (second moments), bounding box, mean orientation, GOS, KAM, neighbours."""
    import pandas as pd

    sums, bbox, means = st.sums, st.bbox, st.means
    cnt = sums[:, 0]
    cx, cy = sums[:, 1] / cnt, sums[:, 2] / cnt
    vxx = sums[:, 3] / cnt - cx * cx
    vxy_ = sums[:, 4] / cnt - cx * cy
    vyy = sums[:, 5] / cnt - cy * cy
    half_tr = 0.5 * (vxx + vyy)
    disc = np.sqrt(np.maximum(0.25 * (vxx - vyy) ** 2 + vxy_**2, 0.0))
    lam1, lam2 = half_tr + disc, np.maximum(half_tr - disc, 0.0)
    major, minor = 4.0 * np.sqrt(lam1), 4.0 * np.sqrt(lam2)
    with np.errstate(divide="ignore", invalid="ignore"):
        aspect = np.where(minor > 0, major / np.where(minor > 0, minor, 1.0), np.inf)
    major_angle = np.degrees(0.5 * np.arctan2(2.0 * vxy_, vxx - vyy)) % 180.0
    area = cnt * omap.point_area
    eul = euler_from_quat(means) if n else np.zeros((0, 3))
    kam_grain = _sk.grain_means_of(labels, st.kam, n)
    n_nb = np.bincount(np.concatenate((bnd.grain_a, bnd.grain_b)), minlength=n)
    phase_names = np.array([p.name for p in omap.phases], dtype=object)
    x0, y0 = omap.origin
    return pd.DataFrame({
        "grain": np.arange(n, dtype=np.int64),
        "phase": st.gphase.astype(np.int64),
        "phase_name": phase_names[st.gphase],
        "n_points": cnt.astype(np.int64),
        "n_indexed": sums[:, 6].astype(np.int64),
        "area_um2": area,
        "ecd_um": 2.0 * np.sqrt(area / np.pi),
        "centroid_x_um": cx + x0,
        "centroid_y_um": cy + y0,
        "major_axis_um": major,
        "minor_axis_um": minor,
        "major_axis_angle_deg": major_angle,
        "aspect_ratio": aspect,
        "x_min_um": bbox[:, 0] + x0, "x_max_um": bbox[:, 1] + x0,
        "y_min_um": bbox[:, 2] + y0, "y_max_um": bbox[:, 3] + y0,
        "touches_edge": st.edge.astype(bool),
        "mean_qw": means[:, 0], "mean_qx": means[:, 1], "mean_qy": means[:, 2], "mean_qz": means[:, 3],
        "mean_phi1_deg": eul[:, 0], "mean_Phi_deg": eul[:, 1], "mean_phi2_deg": eul[:, 2],
        "gos_deg": st.gos,
        "kam_mean_deg": kam_grain,
        "n_neighbours": n_nb.astype(np.int64),
    })


def boundary_table(bnd: Boundaries, lines: Lines, edge_len: float, trace: np.ndarray, angle: np.ndarray,
                   axis: np.ndarray, bclass: np.ndarray, deviation: np.ndarray) -> pd.DataFrame:
    """The boundary table: grains, lengths, misorientation, class, trace and end points."""
    import pandas as pd

    ends_xy = lines.ends_xy
    return pd.DataFrame({
        "boundary_id": np.arange(bnd.n, dtype=np.int64),
        "grain_a": bnd.grain_a.astype(np.int64),
        "grain_b": bnd.grain_b.astype(np.int64),
        "n_edges": bnd.counts.astype(np.int64),
        "length_um": bnd.counts * edge_len,
        "trace_length_um": lines.trace_length,
        "misorientation_deg": angle,
        "axis_h": axis[:, 0], "axis_k": axis[:, 1], "axis_l": axis[:, 2],
        "boundary_class": bclass.astype(str),
        "csl_deviation_deg": deviation,
        "trace_angle_deg": trace,
        "x_start_um": ends_xy[:, 0], "y_start_um": ends_xy[:, 1],
        "x_end_um": ends_xy[:, 2], "y_end_um": ends_xy[:, 3],
        "n_lines": lines.n_lines.astype(np.int64),
    })


def subgrains(omap: OrientationMap, labels: np.ndarray, valid: np.ndarray, a: np.ndarray, b: np.ndarray,
              ang: np.ndarray, sub: float, edge_len: float, log) -> tuple[np.ndarray, pd.DataFrame]:
    """Sub-grains joined below ``sub`` inside each grain: their label image and boundary table."""
    import pandas as pd

    ny, nx_ = omap.shape
    npts = ny * nx_
    qflat = omap.quats.reshape(-1, 4)
    parent = np.arange(npts, dtype=np.int32)
    _union_below(parent, a, b, ang, sub, omap.shape, omap.grid)
    sl, n_sub = _compact(np.where(valid & (labels >= 0), parent, -1).astype(np.int32))
    del parent
    sfirst = np.full(n_sub, npts, dtype=np.int64)
    okp = sl >= 0
    np.minimum.at(sfirst, sl[okp], np.flatnonzero(okp))
    smeans = _mean_orientations(qflat, valid, sl, n_sub, _mean_orientations(
        qflat, valid, sl, n_sub, qflat[sfirst]))
    sa_, sb_ = sl[a], sl[b]
    ssel = (sa_ >= 0) & (sb_ >= 0) & (sa_ != sb_) & (labels[a] == labels[b])
    s_lo = np.minimum(sa_[ssel], sb_[ssel]).astype(np.int64)
    s_hi = np.maximum(sa_[ssel], sb_[ssel]).astype(np.int64)
    skey, scount = np.unique(s_lo * n_sub + s_hi, return_counts=True)
    s_a, s_b = skey // n_sub, skey % n_sub
    sub_table = pd.DataFrame({
        "subgrain_boundary_id": np.arange(skey.size, dtype=np.int64),
        "subgrain_a": s_a, "subgrain_b": s_b,
        "grain": labels[sfirst[s_a]].astype(np.int64),
        "length_um": scount * edge_len,
        "misorientation_deg": disorientation_angle(smeans[s_a], smeans[s_b]),
    })
    sub_labels = sl.astype(np.int64).reshape(ny, nx_)
    log(f"sub-grains below {sub:g}°: {n_sub} sub-grains, {skey.size} sub-grain boundaries inside grains")
    return sub_labels, sub_table


def grain_networkx(omap: OrientationMap, thr: float, grains: pd.DataFrame, boundaries: pd.DataFrame) -> nx.Graph:
    """The networkx graph: one node per grain, one edge per boundary, plain-number attributes.

    Parameters
    ----------
    omap
        The map (its step in µm, grid and name become graph attributes).
    thr
        Grain threshold, degrees (a graph attribute).
    grains, boundaries
        The grain and boundary tables; nodes take :data:`NODE_KEYS`, edges :data:`EDGE_KEYS`.

    Returns
    -------
    networkx.Graph
        Nodes 0..n−1 in grain order, edges in boundary order.

    Notes
    -----
    The attribute dicts are made from the table columns in one pass each and put straight into
    the graph's node and adjacency dicts, the layout ``add_nodes_from`` / ``add_edges_from``
    produce (one attribute dict shared by both directions of an edge). Through those two calls
    each dict was copied into a fresh one, row by row, which was most of this step on large maps
    (``tests/test_grains.py`` holds the two graphs equal). The cyclic garbage collector is held
    off while the dicts are made: none of them can form a cycle, yet each collection it starts
    on the way walks every dict made so far.
    """
    import gc

    import networkx as nx

    graph = nx.Graph(threshold_deg=thr, step_um=float(omap.step), grid=omap.grid, name=str(omap.name))
    n = len(grains)
    node_rows = zip(*(grains[k].tolist() for k in NODE_KEYS), strict=True)
    edge_rows = zip(*(boundaries[k].tolist() for k in EDGE_KEYS), strict=True)
    ends = zip(boundaries["grain_a"].tolist(), boundaries["grain_b"].tolist(), strict=True)
    was_enabled = gc.isenabled()
    gc.disable()
    try:
        node_attrs = graph._node  # the dicts networkx's own add_* methods fill
        node_attrs.update(zip(range(n), map(dict, map(zip, repeat(NODE_KEYS), node_rows)), strict=True))
        adj = graph._adj
        adj.update(zip(range(n), map(dict, repeat((), n)), strict=True))
        for (u, v), attrs in zip(ends, map(dict, map(zip, repeat(EDGE_KEYS), edge_rows)), strict=True):
            adj[u][v] = attrs
            adj[v][u] = attrs
    finally:
        if was_enabled:
            gc.enable()
    return graph

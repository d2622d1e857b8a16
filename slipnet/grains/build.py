"""Grains and grain boundaries of an orientation map, as a graph.

:func:`build_grain_graph` turns an :class:`~slipnet.maps.OrientationMap` into a :class:`GrainGraph`:
a label image, a grain table, a boundary table, a triple-junction table and a networkx graph with
one node per grain and one edge per boundary (attributes are plain numbers and strings, so the
graph exports to GraphML).

Method
------
1. Neighbour pairs are listed from an explicit offset table (square grid: 2 forward offsets;
   hexagonal grid: 3 forward offsets that depend on the row parity, odd rows shifted +step/2).
2. The cubic disorientation of every pair is computed in one numba kernel call (float32, degrees).
3. Union–find joins pairs below ``threshold_deg``; points of different phases never join, and
   unindexed / below-quality points take part in nothing (label −1).
4. Optional clean-up, each step logged (python ``logging`` and :attr:`GrainGraph.log`):
   grains smaller than ``min_grain_size`` points (or ``min_grain_area_um2``) merge into the
   same-phase neighbour with which they share the longest boundary; then, if
   ``fill_unindexed``, unlabelled points take the majority label of their labelled neighbours,
   sweep by sweep.
5. Grain mean orientations: every point is brought to the cubic equivalent nearest a reference
   (first the grain's first point, then the first mean), and the principal eigenvector of
   Σ q qᵀ is taken (Markley, Cheng, Crassidis & Oshman 2007, J. Guid. Control Dyn. 30:1193,
   doi:10.2514/1.28949).
6. Boundaries: one per adjacent grain pair. Length from shared point edges (square: ``step`` per
   4-neighbour pair; hexagonal: ``step/√3`` per 6-neighbour pair, the side of the hexagonal cell).
   Misorientation angle and axis from the two mean orientations. Geometry: the shared cell edges
   are chained through their common vertices into polylines whose points are the chain's start
   vertex, the midpoints of its edges in order, and its end vertex (µm). The trace direction is
   the principal axis of the second moment of the boundary's edge segments.

Boundary classes (:data:`BOUNDARY_CLASSES`, defined in :mod:`slipnet.crystal.csl`): phase
boundary, sub-grain, low-angle (< 15°), CSL Σ3…Σ29b by the Brandon criterion, high-angle.
Writing the outputs lives in :mod:`slipnet.reports.grains`; the container in :mod:`slipnet.maps.grain_graph`.
"""

from __future__ import annotations

import logging
import math

import networkx as nx
import numpy as np
import pandas as pd

from slipnet._checks import check_positive, check_range
from slipnet._progress import StepProgress
from slipnet.crystal.csl import classify_boundaries
from slipnet.crystal.orientation import disorientation, disorientation_angle, euler_from_quat, misorientation
from slipnet.errors import ParameterError
from slipnet.grains import _kernels as _k
from slipnet.grains._steps import (
    _compact,
    _edge_geometry,
    _grain_means,
    _mean_orientations,
    _merge_small,
    _n_chunks,
    _neighbour_pairs,
)
from slipnet.maps.grain_graph import EDGE_KEYS, NODE_KEYS, BoundaryPolylines, GrainGraph
from slipnet.maps.orientation_map import OrientationMap

__all__ = ["MAX_THRESHOLD_DEG", "build_grain_graph"]

logger = logging.getLogger(__name__)

#: Largest cubic disorientation is 62.8° (Mackenzie 1958); a threshold at or above it joins everything.
MAX_THRESHOLD_DEG = 62.8

def _whole(value, name: str) -> int:
    """``value`` as an int >= 1, or a ParameterError naming ``name``."""
    try:
        ok = not isinstance(value, bool) and int(value) == value and value >= 1
    except (TypeError, ValueError):
        ok = False
    if not ok:
        raise ParameterError(f"{name} should be a whole number >= 1; got {value!r}")
    return int(value)


# ============================================================================ public entry
def build_grain_graph(
    omap: OrientationMap,
    threshold_deg: float = 15.0,
    *,
    subgrain_deg: float | None = None,
    min_quality: float | None = None,
    fill_unindexed: bool = False,
    min_grain_size: int | None = None,
    min_grain_area_um2: float | None = None,
    fill_sweeps: int | None = None,
    progress: bool = False,
) -> GrainGraph:
    """Reconstruct grains and boundaries of an orientation map as a graph.

    Parameters
    ----------
    omap
        The orientation map (square or hexagonal grid, cubic phases).
    threshold_deg
        Neighbouring points join one grain when their cubic disorientation is below this,
        degrees, in (0, 62.8).
    subgrain_deg
        Optional lower threshold in (0, threshold_deg): sub-grains inside each grain are the
        components joined below it (:attr:`GrainGraph.subgrain_labels`,
        :attr:`GrainGraph.subgrain_boundaries`).
    min_quality
        Points with quality below this are left out like unindexed points.
    fill_unindexed
        Give unlabelled points the majority label of their labelled neighbours, sweep by sweep
        (after the small-grain merge). Filled points count towards areas and boundaries, never
        towards orientation statistics.
    min_grain_size
        Grains with fewer points merge into the same-phase neighbour with the longest shared
        boundary.
    min_grain_area_um2
        The same limit as an area in µm² (converted to points with the point area; the larger
        of the two limits applies).
    fill_sweeps
        Largest number of fill sweeps (default: until nothing changes).
    progress
        Show a progress bar over the steps.

    Returns
    -------
    GrainGraph

    Raises
    ------
    ParameterError
        Threshold out of range, no usable point, or a malformed option.

    Notes
    -----
    Memory is dominated by the neighbour-pair arrays: 12 bytes per pair (two int32 indices and a
    float32 angle), 2 pairs per point on square grids and 3 on hexagonal ones. Union–find is
    near-linear in the number of pairs.
    """
    if not isinstance(omap, OrientationMap):
        raise ParameterError(f"omap should be an OrientationMap; got {type(omap).__name__}")
    thr = check_range(threshold_deg, "threshold_deg", 0.0, MAX_THRESHOLD_DEG, inclusive=False)
    sub = None
    if subgrain_deg is not None:
        sub = check_range(subgrain_deg, "subgrain_deg", 0.0, thr, inclusive=False)
    min_points = 0
    if min_grain_size is not None:
        min_points = _whole(min_grain_size, "min_grain_size")
    if min_grain_area_um2 is not None:
        area = check_positive(min_grain_area_um2, "min_grain_area_um2")
        min_points = max(min_points, math.ceil(area / omap.point_area - 1e-9))
    max_sweeps = 1 << 30
    if fill_sweeps is not None:
        max_sweeps = _whole(fill_sweeps, "fill_sweeps")

    log_lines: list[str] = []

    def log(msg: str) -> None:
        logger.info(msg)
        log_lines.append(msg)

    ny, nx_ = omap.shape
    npts = ny * nx_
    valid = omap.indexed.reshape(-1)
    if not valid.any():
        raise ParameterError(f"the map {omap.name!r} has no indexed point (all {npts} unindexed); nothing to build")
    if min_quality is not None:
        try:
            mq = float(min_quality)
        except (TypeError, ValueError) as err:
            raise ParameterError(f"min_quality should be a finite number; got {min_quality!r}") from err
        if not math.isfinite(mq):
            raise ParameterError(f"min_quality should be a finite number; got {min_quality!r}")
        valid = valid & (omap.quality.reshape(-1) >= mq)
        if not valid.any():
            raise ParameterError(
                f"min_quality={min_quality!r} leaves no point; the map's quality ranges "
                f"{float(omap.quality.min()):g}..{float(omap.quality.max()):g}"
            )
        log(f"left out {int(omap.indexed.sum() - valid.sum())} indexed points with quality below {mq:g}")
    log(f"{int(valid.sum())} of {npts} points carry an orientation "
        f"({omap.grid} grid {ny}x{nx_}, step {omap.step:g} µm)")

    steps = StepProgress(9, progress, "grains")
    qflat = omap.quats.reshape(-1, 4)
    phase_flat = omap.phase.reshape(-1)

    # 1-2. neighbour pairs and their disorientations
    a, b, ang = _neighbour_pairs((ny, nx_), omap.grid, qflat, valid, phase_flat)
    steps("pairs")

    # 3. union-find below the threshold
    parent = np.arange(npts, dtype=np.int32)
    _k.union_below(parent, a, b, ang, np.float32(thr))
    if min_points > 1 or fill_unindexed:
        labels = np.where(valid, parent, -1).astype(np.int32)
    else:  # nothing to clean: number the union-find roots directly
        labels = parent
        parent = None
        lab_c = np.empty(npts, dtype=np.int32)
        n = int(_k.compact_labels(labels, valid, lab_c))
        labels = lab_c
    del parent
    n_raw = int(np.count_nonzero(labels == np.arange(npts, dtype=np.int32)))
    log(f"union-find below {thr:g}°: {n_raw} grains")
    steps("union-find")

    # 4. clean-up
    if min_points > 1:
        labels = _merge_small(labels, a, b, phase_flat, min_points, log)
    if fill_unindexed:
        n_fill, sweeps = _k.fill_majority(labels, ny, nx_, _k.ALL_OFFSETS[omap.grid], max_sweeps)
        log(f"filled {int(n_fill)} unlabelled points from the majority of their neighbours ({int(sweeps)} sweeps)")
    if min_points > 1 or fill_unindexed:
        labels, n = _compact(labels)
    log(f"{n} grains after clean-up")
    steps("clean-up")

    # 5. per-grain sums and mean orientations
    sums = np.zeros((n, 7))
    bbox = np.empty((n, 4))
    first = np.empty(n, dtype=np.int64)
    gphase = np.empty(n, dtype=np.int32)
    edge = np.empty(n, dtype=np.bool_)
    _k.grain_point_sums_parallel(labels, valid, phase_flat, ny, nx_, omap.step, omap.row_spacing,
                                 omap.grid == "hex", n, sums, bbox, first, gphase, edge, _n_chunks(npts, ny))
    means = _grain_means(qflat, valid, labels, n, first)
    mis = np.empty(npts, dtype=np.float32)
    _k.point_to_reference(qflat, valid, labels, means, mis)
    gos = _k.grain_means_of(labels, mis, n)  # mis is NaN where a point has no orientation
    row_start = np.zeros(ny + 1, dtype=np.int64)
    np.cumsum(_k.row_pair_counts(ny, nx_, _k.FORWARD_OFFSETS[omap.grid]), out=row_start[1:])
    kam = np.empty(npts, dtype=np.float32)
    _k.kam_rows(a, b, ang, np.float32(thr), row_start, nx_, kam)
    steps("orientations")

    # 6. boundaries
    ea, eb = _k.boundary_pairs(a, b, labels)
    ga, gb = labels[ea].astype(np.int64), labels[eb].astype(np.int64)
    lo, hi = np.minimum(ga, gb), np.maximum(ga, gb)
    key = lo * max(n, 1) + hi
    order = _k.order_by_key(lo, hi, max(n, 1))
    key, ea, eb, ga, gb = key[order], ea[order], eb[order], ga[order], gb[order]
    del order, lo, hi
    # key is sorted: unique values from the positions where it changes
    bstart_ = np.flatnonzero(np.concatenate(([True], key[1:] != key[:-1]))) if key.size else np.zeros(0, np.int64)
    ukey = key[bstart_]
    counts = np.diff(np.append(bstart_, key.size))
    nbd = ukey.size
    bstart = np.append(bstart_, key.size).astype(np.int64)
    bid = np.repeat(np.arange(nbd), counts)
    del key
    grain_a, grain_b = ukey // max(n, 1), ukey % max(n, 1)
    mx, my, tx, ty, v0, v1, vxy, edge_len = _edge_geometry(ea, eb, omap)
    length = counts * edge_len
    # trace: second moment of the union of edge segments = cov(midpoints) + ℓ²/12 · mean(t tᵀ)
    w = np.maximum(counts, 1)
    sx, sy = np.bincount(bid, mx, nbd) / w, np.bincount(bid, my, nbd) / w
    cxx = np.bincount(bid, mx * mx, nbd) / w - sx * sx + edge_len**2 / 12 * np.bincount(bid, tx * tx, nbd) / w
    cyy = np.bincount(bid, my * my, nbd) / w - sy * sy + edge_len**2 / 12 * np.bincount(bid, ty * ty, nbd) / w
    cxy = np.bincount(bid, mx * my, nbd) / w - sx * sy + edge_len**2 / 12 * np.bincount(bid, tx * ty, nbd) / w
    trace = np.degrees(0.5 * np.arctan2(2.0 * cxy, cxx - cyy)) % 180.0
    mq_a, mq_b = means[grain_a], means[grain_b]
    angle, axis = disorientation(mq_a, mq_b)
    same_phase = gphase[grain_a] == gphase[grain_b]
    bclass, deviation = classify_boundaries(angle, misorientation(mq_a, mq_b), same_phase, sub)
    steps("boundaries")

    # chains of edges → polylines
    m_edges = ea.size
    eorder = np.empty(m_edges, dtype=np.int64)
    first_of_chain = np.zeros(m_edges, dtype=np.bool_)
    start_v = np.zeros(m_edges, dtype=np.int64)
    end_v = np.zeros(m_edges, dtype=np.int64)
    if m_edges:
        _k.chain_edges(bstart, v0, v1, eorder, first_of_chain, start_v, end_v)
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
    # length along the chained midpoint polylines: follows the boundary itself rather than the
    # cell-edge staircase, so it is a less grid-biased length estimate
    seg = np.hypot(*np.diff(xy, axis=0).T) if xy.shape[0] > 1 else np.zeros(0)
    seg_ok = np.ones(seg.size, dtype=bool)
    seg_ok[ps[1:] - 1] = False
    seg_chain = np.repeat(np.arange(n_chains), np.diff(chain_off))[:-1] if n_chains else np.zeros(0, np.int64)
    chain_len = np.bincount(seg_chain[seg_ok], seg[seg_ok], n_chains)
    trace_length = np.bincount(chain_b, chain_len, nbd) if n_chains else np.zeros(nbd)
    del mx, my, tx, ty, eorder, first_of_chain, chain_id
    steps("polylines")

    # triple junctions: cell vertices where >= 3 distinct grains meet (2x2 cells on square grids,
    # lattice triangles on hex grids), one pass over the label image
    jx, jy, jg, jn = _k.triple_junctions(labels, ny, nx_, omap.grid == "hex", omap.step, omap.row_spacing,
                                         m_edges + 16)  # each junction has >= 2 boundary edges
    tj = pd.DataFrame({
        "junction_id": np.arange(jx.size), "x_um": jx + omap.origin[0], "y_um": jy + omap.origin[1],
        "n_grains": jn, "grain_1": jg[:, 0], "grain_2": jg[:, 1], "grain_3": jg[:, 2], "grain_4": jg[:, 3],
    })
    del v0, v1
    log(f"{nbd} boundaries, {n_chains} boundary lines, {jx.size} triple junctions")
    steps("junctions")

    # 7. tables
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
    kam_grain = _k.grain_means_of(labels, kam, n)
    n_nb = np.bincount(np.concatenate((grain_a, grain_b)), minlength=n)
    phase_names = np.array([p.name for p in omap.phases], dtype=object)
    x0, y0 = omap.origin
    grains = pd.DataFrame({
        "grain": np.arange(n, dtype=np.int64),
        "phase": gphase.astype(np.int64),
        "phase_name": phase_names[gphase],
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
        "touches_edge": edge.astype(bool),
        "mean_qw": means[:, 0], "mean_qx": means[:, 1], "mean_qy": means[:, 2], "mean_qz": means[:, 3],
        "mean_phi1_deg": eul[:, 0], "mean_Phi_deg": eul[:, 1], "mean_phi2_deg": eul[:, 2],
        "gos_deg": gos,
        "kam_mean_deg": kam_grain,
        "n_neighbours": n_nb.astype(np.int64),
    })
    boundaries = pd.DataFrame({
        "boundary_id": np.arange(nbd, dtype=np.int64),
        "grain_a": grain_a.astype(np.int64),
        "grain_b": grain_b.astype(np.int64),
        "n_edges": counts.astype(np.int64),
        "length_um": length,
        "trace_length_um": trace_length,
        "misorientation_deg": angle,
        "axis_h": axis[:, 0], "axis_k": axis[:, 1], "axis_l": axis[:, 2],
        "boundary_class": bclass.astype(str),
        "csl_deviation_deg": deviation,
        "trace_angle_deg": trace,
        "x_start_um": ends_xy[:, 0], "y_start_um": ends_xy[:, 1],
        "x_end_um": ends_xy[:, 2], "y_end_um": ends_xy[:, 3],
        "n_lines": n_chain_per_b.astype(np.int64),
    })
    counts_by_class = boundaries["boundary_class"].value_counts().to_dict()
    log("boundary classes: " + ", ".join(f"{k} {v}" for k, v in sorted(counts_by_class.items())))

    # sub-grains
    sub_labels = sub_table = None
    if sub is not None:
        parent = np.arange(npts, dtype=np.int32)
        _k.union_below(parent, a, b, ang, np.float32(sub))
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
    steps("tables")

    # 8. graph
    graph = nx.Graph(threshold_deg=thr, step_um=float(omap.step), grid=omap.grid, name=str(omap.name))
    ncols = {k: grains[k].tolist() for k in NODE_KEYS}
    graph.add_nodes_from((g, {k: ncols[k][g] for k in NODE_KEYS}) for g in range(n))
    ecols = {k: boundaries[k].tolist() for k in EDGE_KEYS}
    ga_l, gb_l = boundaries["grain_a"].tolist(), boundaries["grain_b"].tolist()
    graph.add_edges_from((ga_l[i], gb_l[i], {k: ecols[k][i] for k in EDGE_KEYS}) for i in range(nbd))
    steps("graph")
    steps.close()

    settings = {
        "threshold_deg": thr, "subgrain_deg": sub, "min_quality": min_quality, "fill_unindexed": bool(fill_unindexed),
        "min_grain_points": min_points or None, "fill_sweeps": fill_sweeps, "grid": omap.grid, "step_um": omap.step,
        "timings_s": steps.timings,
    }
    return GrainGraph(
        omap=omap,
        labels=labels.astype(np.int64).reshape(ny, nx_),
        graph=graph,
        grains=grains,
        boundaries=boundaries,
        triple_junctions=tj,
        mean_quats=means,
        boundary_polylines=polylines,
        kam_deg=kam.reshape(ny, nx_),
        misorientation_to_mean_deg=mis.reshape(ny, nx_),
        subgrain_labels=sub_labels,
        subgrain_boundaries=sub_table,
        settings=settings,
        log=tuple(log_lines),
    )

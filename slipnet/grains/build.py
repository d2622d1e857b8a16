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
from typing import NamedTuple

import numpy as np

from slipnet._checks import check_positive, check_range
from slipnet._progress import StepProgress
from slipnet.errors import ParameterError
from slipnet.grains import _pair_kernels as _pk
from slipnet.grains._boundaries import (
    EdgeGeometry,
    boundary_lines,
    boundary_misorientations,
    group_boundaries,
    junction_table,
    trace_angles,
)
from slipnet.grains._steps import _compact, _edge_geometry, _merge_small, _neighbour_pairs, _union_below
from slipnet.grains._tables import boundary_table, grain_networkx, grain_stats, grain_table, subgrains
from slipnet.maps.grain_graph import GrainGraph
from slipnet.maps.orientation_map import OrientationMap

__all__ = ["MAX_THRESHOLD_DEG", "build_grain_graph"]

logger = logging.getLogger(__name__)

#: Largest cubic disorientation is 62.8° (Mackenzie 1958); a threshold at or above it joins everything.
MAX_THRESHOLD_DEG = 62.8


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
    thr, sub, min_points, max_sweeps = _check_options(omap, threshold_deg, subgrain_deg, min_grain_size,
                                                      min_grain_area_um2, fill_sweeps)
    log_lines: list[str] = []

    def log(msg: str) -> None:
        logger.info(msg)
        log_lines.append(msg)

    ny, nx_ = omap.shape
    valid = _usable_points(omap, min_quality, log)
    steps = StepProgress(9, progress, "grains")

    # 1-2. neighbour pairs and their disorientations
    a, b, ang = _neighbour_pairs((ny, nx_), omap.grid, omap.quats.reshape(-1, 4), valid, omap.phase.reshape(-1))
    steps("pairs")
    # 3. union-find below the threshold
    cleanup = min_points > 1 or fill_unindexed
    labels, n = _union_grains(a, b, ang, valid, thr, cleanup, (ny, nx_), omap.grid, log)
    steps("union-find")
    # 4. clean-up
    labels, n = _clean_up(omap, labels, n, a, b, min_points, fill_unindexed, max_sweeps, log)
    steps("clean-up")
    # 5. per-grain sums and mean orientations
    st = grain_stats(omap, labels, n, valid, a, b, ang, thr)
    steps("orientations")
    # 6. boundaries, their polylines and the triple junctions
    bnd = group_boundaries(a, b, labels, n)
    geo = EdgeGeometry(*_edge_geometry(bnd.ea, bnd.eb, omap))
    trace = trace_angles(bnd, geo)
    angle, axis, bclass, deviation = boundary_misorientations(bnd, st.means, st.gphase, sub)
    steps("boundaries")
    lines = boundary_lines(bnd, geo, omap)
    steps("polylines")
    tj = junction_table(labels, omap, bnd.ea.size)
    log(f"{bnd.n} boundaries, {lines.n_chains} boundary lines, {len(tj)} triple junctions")
    steps("junctions")
    # 7. tables
    grains = grain_table(omap, st, labels, n, bnd)
    boundaries = boundary_table(bnd, lines, geo.edge_len, trace, angle, axis, bclass, deviation)
    counts_by_class = boundaries["boundary_class"].value_counts().to_dict()
    log("boundary classes: " + ", ".join(f"{k} {v}" for k, v in sorted(counts_by_class.items())))
    sub_labels = sub_table = None
    if sub is not None:
        sub_labels, sub_table = subgrains(omap, labels, valid, a, b, ang, sub, geo.edge_len, log)
    steps("tables")
    # 8. graph
    graph = grain_networkx(omap, thr, grains, boundaries)
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
        mean_quats=st.means,
        boundary_polylines=lines.polylines,
        kam_deg=st.kam.reshape(ny, nx_),
        misorientation_to_mean_deg=st.mis.reshape(ny, nx_),
        subgrain_labels=sub_labels,
        subgrain_boundaries=sub_table,
        settings=settings,
        log=tuple(log_lines),
    )


# ============================================================================ steps
class _Options(NamedTuple):
    """The checked options of :func:`build_grain_graph`."""

    thr: float  #: grain threshold, degrees
    sub: float | None  #: sub-grain threshold, degrees
    min_points: int  #: smallest grain kept (0: no merge)
    max_sweeps: int  #: most majority-fill sweeps


def _whole(value, name: str) -> int:
    """``value`` as an int >= 1, or a ParameterError naming ``name``."""
    try:
        ok = not isinstance(value, bool) and int(value) == value and value >= 1
    except (TypeError, ValueError):
        ok = False
    if not ok:
        raise ParameterError(f"{name} should be a whole number >= 1; got {value!r}")
    return int(value)


def _check_options(omap, threshold_deg, subgrain_deg, min_grain_size, min_grain_area_um2, fill_sweeps) -> _Options:
    """Validate the map type and the options; thresholds in degrees, the size limit in points."""
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
    return _Options(thr, sub, min_points, max_sweeps)


def _usable_points(omap: OrientationMap, min_quality, log) -> np.ndarray:
    """Flat mask of the points that take part: indexed and, with ``min_quality``, of that quality."""
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
    return valid


def _union_grains(a, b, ang, valid, thr: float, cleanup: bool, shape: tuple[int, int], grid: str,
                  log) -> tuple[np.ndarray, int | None]:
    """Union–find below the threshold: root labels (−1 outside ``valid``) if a clean-up follows
    (count None), else consecutive ids and their count."""
    npts = valid.size
    n = None
    parent = np.arange(npts, dtype=np.int32)
    _union_below(parent, a, b, ang, thr, shape, grid)
    if cleanup:
        labels = np.where(valid, parent, -1).astype(np.int32)
    else:  # nothing to clean: number the union-find roots directly
        labels = parent
        parent = None
        lab_c = np.empty(npts, dtype=np.int32)
        n = int(_pk.compact_labels(labels, valid, lab_c))
        labels = lab_c
    del parent
    # roots before a clean-up (labels are still point indices), consecutive ids otherwise
    n_raw = int(np.count_nonzero(labels == np.arange(npts, dtype=np.int32))) if cleanup else int(n)
    log(f"union-find below {thr:g}°: {n_raw} grains")
    return labels, n


def _clean_up(omap: OrientationMap, labels, n, a, b, min_points: int, fill_unindexed: bool, max_sweeps: int,
              log) -> tuple[np.ndarray, int]:
    """Merge grains below ``min_points`` into a neighbour, fill unlabelled points, renumber 0..n−1."""
    ny, nx_ = omap.shape
    if min_points > 1:
        labels = _merge_small(labels, a, b, omap.phase.reshape(-1), min_points, log)
    if fill_unindexed:
        n_fill, sweeps = _pk.fill_majority(labels, ny, nx_, _pk.ALL_OFFSETS[omap.grid], max_sweeps)
        log(f"filled {int(n_fill)} unlabelled points from the majority of their neighbours ({int(sweeps)} sweeps)")
    if min_points > 1 or fill_unindexed:
        labels, n = _compact(labels)
    log(f"{n} grains after clean-up")
    return labels, n

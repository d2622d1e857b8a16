"""Building blocks of :func:`slipnet.grains.build_grain_graph`: neighbour pairs, label compaction,
grain mean orientations, small-grain merging, boundary edge geometry.

Private helpers of :mod:`slipnet.grains.build` (and of :mod:`slipnet.grains._boundaries`,
:mod:`slipnet.grains._tables`); hot loops are in :mod:`slipnet.grains._pair_kernels`,
:mod:`slipnet.grains._sum_kernels` and :mod:`slipnet.grains._boundary_kernels`.
"""

from __future__ import annotations

import math

import numpy as np

from slipnet.crystal.orientation import CUBIC_OPERATORS, disorientation_angle
from slipnet.grains import _boundary_kernels as _bk
from slipnet.grains import _pair_kernels as _pk
from slipnet.grains import _sum_kernels as _sk
from slipnet.maps.orientation_map import OrientationMap


def _neighbour_pairs(shape: tuple[int, int], grid: str, quats=None, valid=None, phase=None):
    """Forward neighbour pairs as flat int32 index arrays ``(a, b)``, row-major order.

    With ``quats`` (n, 4), ``valid`` (n,) and ``phase`` (n,) also returns the float32 cubic
    disorientation of every pair in degrees (NaN where a point is invalid or the phases differ),
    computed in the same kernel pass.
    """
    ny, nx_ = shape
    offsets = _pk.FORWARD_OFFSETS[grid]
    counts = _pk.row_pair_counts(ny, nx_, offsets)
    start = np.zeros(ny + 1, dtype=np.int64)
    np.cumsum(counts, out=start[1:])
    a = np.empty(int(start[-1]), dtype=np.int32)
    b = np.empty(int(start[-1]), dtype=np.int32)
    if quats is None:
        _pk.fill_pairs(ny, nx_, offsets, start[:-1], a, b)
        return a, b
    ang = np.empty(a.size, dtype=np.float32)
    _pk.fill_pairs_with_angles(ny, nx_, offsets, start[:-1], quats, valid, phase, a, b, ang)
    return a, b, ang


def _row_starts(shape: tuple[int, int], grid: str) -> np.ndarray:
    """(ny + 1,) int64: where each row's forward pairs begin in the arrays of :func:`_neighbour_pairs`."""
    ny, nx_ = shape
    start = np.zeros(ny + 1, dtype=np.int64)
    np.cumsum(_pk.row_pair_counts(ny, nx_, _pk.FORWARD_OFFSETS[grid]), out=start[1:])
    return start


def _union_below(parent: np.ndarray, a: np.ndarray, b: np.ndarray, ang: np.ndarray, thr: float,
                 shape: tuple[int, int], grid: str) -> None:
    """Union–find of the pairs below ``thr`` degrees into ``parent`` (flattened, roots = smallest index),
    in row bands on the numba threads (four bands a thread, so a slow thread holds up less)."""
    _pk.union_below_bands(parent, a, b, ang, np.float32(thr), _row_starts(shape, grid), shape[1],
                          4 * _n_chunks(parent.size))


def _compact(labels: np.ndarray) -> tuple[np.ndarray, int]:
    """Root labels (−1 for none) renumbered 0..n−1 in raster order of each grain's first point; and n."""
    out = np.empty(labels.shape[0], dtype=np.int32)
    n = _pk.compact_labels(labels, labels >= 0, out)
    return out, int(n)


def _mean_orientations(qflat: np.ndarray, valid: np.ndarray, labels: np.ndarray, n: int,
                       ref: np.ndarray, only: np.ndarray | None = None,
                       rows: tuple[int, np.ndarray, np.ndarray] | None = None) -> np.ndarray:
    """Symmetry-aware mean quaternion per label (Markley et al. 2007).

    Each point is replaced by its cubic equivalent nearest ``ref[label]`` and the ten distinct
    terms of Σ q qᵀ are accumulated, in one kernel pass over the points (no temporary copy of
    the quaternions); the eigenvector of the largest eigenvalue of each 4×4 matrix (batched
    ``eigh``) is the mean. ``only`` (n,) bool restricts the work to some labels (the others
    come back as ``ref``); with ``rows = (nx, first_row, last_row)``, (n,) rows holding each
    label's valid points, only those rows of the selected labels are read, not the whole map.
    """
    n_chunks = _n_chunks(labels.size)
    ref = np.ascontiguousarray(ref)
    acc = np.zeros((n, 10))
    if only is None:
        _sk.quat_moment_sums_parallel(qflat, valid, labels, ref, np.ones(n, dtype=np.bool_), CUBIC_OPERATORS, acc,
                                     n_chunks)
        pick = slice(None)
    else:
        pick = np.flatnonzero(only)
        if rows is None:
            _sk.quat_moment_sums_parallel(qflat, valid, labels, ref, only, CUBIC_OPERATORS, acc, n_chunks)
        else:
            nx_, first_row, last_row = rows
            _sk.quat_moment_sums_some(qflat, valid, labels, ref, pick, first_row[pick], last_row[pick], nx_,
                                      CUBIC_OPERATORS, acc, n_chunks)
    # each 4x4 matrix is solved on its own (batched eigh), so solving only the selected ones
    # changes none of their means
    acc = acc[pick]
    iu = np.triu_indices(4)
    mat = np.zeros((acc.shape[0], 4, 4))
    mat[:, iu[0], iu[1]] = acc
    mat[:, iu[1], iu[0]] = acc
    _, vec = np.linalg.eigh(mat)
    sub = vec[:, :, -1]
    sub /= np.linalg.norm(sub, axis=1, keepdims=True)
    if only is None:
        mean = sub
    else:
        mean = ref.astype(np.float64, copy=True)
        mean[pick] = sub
    return np.where(mean[:, :1] < 0, -mean, mean)


def _grain_means(qflat, valid, labels, n, first, nx_: int, last_row: np.ndarray):
    """Mean orientation per grain, referenced to its first point, redone from the mean where that lay far.

    ``first`` (n,) is each grain's first valid point and ``last_row`` (n,) the last row it reaches:
    the second pass reads only those rows of the grains it redoes.
    """
    ref = qflat[np.maximum(first, 0)]
    mean = _mean_orientations(qflat, valid, labels, n, ref)
    # second pass, with the first mean as reference, for grains whose first point lay far from
    # the mean: with the reference δ from the mean, the copy nearest the reference is the one
    # nearest the mean for every point within 45° − δ of the mean (other copies are ≥ 90° away),
    # so δ ≤ 15° is safe for any point within 30° of its grain mean
    redo = disorientation_angle(ref, mean) > 15.0
    if redo.any():
        first_row = np.maximum(first, 0) // nx_
        mean = _mean_orientations(qflat, valid, labels, n, mean, only=redo, rows=(nx_, first_row, last_row))
    return mean


def _merge_small(labels: np.ndarray, a: np.ndarray, b: np.ndarray, phase_flat: np.ndarray, min_points: int,
                 log) -> np.ndarray:
    """Merge grains with fewer than ``min_points`` points into the same-phase neighbour with the longest
    shared boundary, pass after pass until none is left (or none can merge). Works on root labels."""
    n = labels.size
    la, lb = labels[a], labels[b]
    sel = (la != lb) & (la >= 0) & (lb >= 0)
    ea, eb = a[sel], b[sel]
    del la, lb, sel
    lab_phase = np.full(n, -1, dtype=np.int32)
    lab_phase[labels[labels >= 0]] = phase_flat[labels >= 0]
    merged_total = 0
    passes = 0
    for passes in range(1, 101):
        sizes = np.bincount(labels[labels >= 0], minlength=n)
        small = (sizes > 0) & (sizes < min_points)
        if not small.any():
            passes -= 1
            break
        la, lb = labels[ea], labels[eb]
        keep = la != lb
        ea, eb, la, lb = ea[keep], eb[keep], la[keep], lb[keep]
        src = np.concatenate((la, lb)).astype(np.int64)
        dst = np.concatenate((lb, la)).astype(np.int64)
        ok = small[src] & (lab_phase[src] == lab_phase[dst])
        src, dst = src[ok], dst[ok]
        if src.size == 0:
            break
        key, cnt = np.unique(src * n + dst, return_counts=True)
        s, d = key // n, key % n
        # longest shared boundary first; ties: the larger neighbour, then the smaller id
        order = np.lexsort((d, -sizes[d], -cnt, s))
        s, d = s[order], d[order]
        first = np.concatenate(([True], s[1:] != s[:-1]))
        s, d = s[first], d[first]
        parent = np.arange(n, dtype=np.int32)
        _pk.union_pairs(parent, s.astype(np.int32), d.astype(np.int32), np.ones(s.size, dtype=np.bool_))
        m = labels >= 0
        labels[m] = parent[labels[m]]
        merged_total += int(s.size)
    left = int(((np.bincount(labels[labels >= 0], minlength=n) > 0)
                & (np.bincount(labels[labels >= 0], minlength=n) < min_points)).sum())
    log(f"merged {merged_total} grains smaller than {min_points} points into their neighbour with the longest "
        f"shared boundary ({passes} passes); {left} small grains left without a same-phase neighbour")
    return labels


def _edge_geometry(ea: np.ndarray, eb: np.ndarray, omap: OrientationMap):
    """Midpoints, unit directions and integer vertex ids of the cell edges shared by point pairs, the
    vertex lattice ``(width, off, ys, half_step)`` the ids are on, and the edge length (µm)."""
    nx_ = omap.shape[1]
    step, rs = omap.step, omap.row_spacing
    hexg = omap.grid == "hex"

    m = ea.size
    mx, my, tx, ty = (np.empty(m) for _ in range(4))
    v0, v1 = np.empty(m, dtype=np.int64), np.empty(m, dtype=np.int64)
    half = 0.5 * step / (math.sqrt(3.0) if hexg else 1.0)
    # vertices sit on a lattice: x in multiples of step/2; y in multiples of step/2 (square) or rs/3 (hex)
    ys, off = (3.0 / rs, 3) if hexg else (2.0 / step, 2)
    width = 2 * nx_ + 8
    _bk.edge_geometry(ea, eb, nx_, step, hexg, half, ys, off, width, mx, my, tx, ty, v0, v1)
    return mx, my, tx, ty, v0, v1, (width, off, ys, 0.5 * step), 2.0 * half


def _n_chunks(n_items: int, limit: int | None = None) -> int:
    """Chunks for the per-thread accumulators: one per numba thread, none on tiny inputs."""
    import numba

    c = numba.get_num_threads() if n_items >= 1 << 16 else 1
    return max(1, min(c, limit if limit is not None else c))

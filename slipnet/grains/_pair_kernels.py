"""Numba kernels for neighbour pairs, union–find and the majority fill of grain reconstruction.

Points are addressed by their flat index ``p = i * nx + j`` (row ``i``, column ``j``), held as
int32 to halve the memory of the pair arrays on large maps. Neighbour pairs come from an offset
table ``(2, k, 2)`` of ``(di, dj)`` rows, one block per row parity (even, odd), so square and
hexagonal grids share every kernel. The Python steps that call them are in
:mod:`slipnet.grains._steps` and :mod:`slipnet.grains.build`.
"""

from __future__ import annotations

import math

import numba as nb
import numpy as np

from slipnet.crystal.orientation_kernels import cubic_angle

# numba's on-disk cache checks only this file's own source, not the crystal kernels inlined from
# slipnet.crystal.orientation_kernels: after changing those, edit (or touch) this file too, or a
# warm cache keeps running the old inlined code

# Forward offsets (each unordered neighbour pair once). Hex grid: odd rows shifted +step/2, so the
# row below an even row is met at columns j-1 and j, below an odd row at j and j+1.
FORWARD_OFFSETS = {
    "square": np.array([[[0, 1], [1, 0]], [[0, 1], [1, 0]]], dtype=np.int64),
    "hex": np.array([[[0, 1], [1, -1], [1, 0]], [[0, 1], [1, 0], [1, 1]]], dtype=np.int64),
}
# All neighbours of a point (used by the majority fill).
ALL_OFFSETS = {
    "square": np.array([[[0, 1], [0, -1], [1, 0], [-1, 0]]] * 2, dtype=np.int64),
    "hex": np.array(
        [
            [[0, 1], [0, -1], [1, -1], [1, 0], [-1, -1], [-1, 0]],
            [[0, 1], [0, -1], [1, 0], [1, 1], [-1, 0], [-1, 1]],
        ],
        dtype=np.int64,
    ),
}



# ----------------------------------------------------------------------------- neighbour pairs
@nb.njit(cache=True)
def row_pair_counts(ny, nx, offsets):
    """Number of in-grid forward pairs starting on each row, shape (ny,)."""
    out = np.zeros(ny, dtype=np.int64)
    for i in range(ny):
        par = i % 2
        c = 0
        for k in range(offsets.shape[1]):
            di = offsets[par, k, 0]
            dj = offsets[par, k, 1]
            if i + di < 0 or i + di >= ny:
                continue
            lo = max(0, -dj)
            hi = min(nx, nx - dj)
            if hi > lo:
                c += hi - lo
        out[i] = c
    return out


@nb.njit(cache=True, parallel=True)
def fill_pairs(ny, nx, offsets, row_start, a, b):
    """Write the forward pairs of every row into ``a``/``b`` (flat indices) from ``row_start[i]``."""
    for i in nb.prange(ny):
        par = i % 2
        pos = row_start[i]
        for j in range(nx):
            for k in range(offsets.shape[1]):
                ii = i + offsets[par, k, 0]
                jj = j + offsets[par, k, 1]
                if ii < 0 or ii >= ny or jj < 0 or jj >= nx:
                    continue
                a[pos] = i * nx + j
                b[pos] = ii * nx + jj
                pos += 1


@nb.njit(cache=True, inline="always")
def _angle_between(q, p, r):
    """Angle (radians) of ``q[p] * conj(q[r])`` reduced by cubic symmetry."""
    a0, a1, a2, a3 = q[r, 0], -q[r, 1], -q[r, 2], -q[r, 3]
    b0, b1, b2, b3 = q[p, 0], q[p, 1], q[p, 2], q[p, 3]
    w = b0 * a0 - b1 * a1 - b2 * a2 - b3 * a3
    x = b0 * a1 + b1 * a0 + b2 * a3 - b3 * a2
    y = b0 * a2 - b1 * a3 + b2 * a0 + b3 * a1
    z = b0 * a3 + b1 * a2 - b2 * a1 + b3 * a0
    return cubic_angle(w, x, y, z)


@nb.njit(cache=True, parallel=True)
def fill_pairs_with_angles(ny, nx, offsets, row_start, quats, valid, phase, a, b, out):
    """:func:`fill_pairs` and the cubic disorientation of every pair in one pass (degrees, float32;
    NaN where a point is invalid or the phases differ): the pair arrays are written and the two
    quaternions read while they are in cache."""
    to_deg = 180.0 / math.pi
    for i in nb.prange(ny):
        par = i % 2
        pos = row_start[i]
        for j in range(nx):
            p = i * nx + j
            for k in range(offsets.shape[1]):
                ii = i + offsets[par, k, 0]
                jj = j + offsets[par, k, 1]
                if ii < 0 or ii >= ny or jj < 0 or jj >= nx:
                    continue
                r = ii * nx + jj
                a[pos] = p
                b[pos] = r
                if valid[p] and valid[r] and phase[p] == phase[r]:
                    out[pos] = _angle_between(quats, r, p) * to_deg
                else:
                    out[pos] = np.nan
                pos += 1


# ----------------------------------------------------------------------------- union-find
@nb.njit(cache=True, inline="always")
def _find(parent, i):
    """Root of ``i``, with path halving (every visited node skips to its grandparent)."""
    while parent[i] != i:
        parent[i] = parent[parent[i]]
        i = parent[i]
    return i


@nb.njit(cache=True, inline="always")
def _union(parent, i, j):
    """Join the sets of ``i`` and ``j``; the smaller root wins, so a root is its set's first index."""
    ri = _find(parent, i)
    rj = _find(parent, j)
    if ri < rj:
        parent[rj] = ri
    elif rj < ri:
        parent[ri] = rj


@nb.njit(cache=True)
def union_pairs(parent, a, b, join):
    """Union ``a[k]`` and ``b[k]`` wherever ``join[k]``; the root of a set is its smallest index.

    ``parent`` (n,) int32 is updated in place and fully flattened on return
    (``parent[i]`` is the root of ``i``).
    """
    for k in range(a.shape[0]):
        if not join[k]:
            continue
        _union(parent, a[k], b[k])
    for i in range(parent.shape[0]):
        parent[i] = _find(parent, i)


@nb.njit(cache=True)
def union_below(parent, a, b, angle, threshold):
    """Union the pairs whose angle is below ``threshold`` (NaN never joins); as :func:`union_pairs`."""
    for k in range(a.shape[0]):
        if not angle[k] < threshold:
            continue
        _union(parent, a[k], b[k])
    for i in range(parent.shape[0]):
        parent[i] = _find(parent, i)


@nb.njit(cache=True)
def _compress_path(parent, p):
    """Point every node on the path from ``p`` straight at the root; return the root."""
    r = p
    while parent[r] != r:
        r = parent[r]
    while parent[p] != r:
        nxt = parent[p]
        parent[p] = r
        p = nxt
    return r


@nb.njit(cache=True)
def _union_band(parent, a, b, angle, threshold, k0, k1, lo_pt, hi_pt):
    """Join the pairs ``k0..k1-1`` below ``threshold`` whose points both lie in ``lo_pt..hi_pt-1``,
    then flatten those points in one rising sweep."""
    for k in range(k0, k1):
        if angle[k] < threshold and b[k] < hi_pt:
            _union(parent, a[k], b[k])
    for i in range(lo_pt, hi_pt):
        parent[i] = parent[parent[i]]


@nb.njit(cache=True, parallel=True)
def union_below_bands(parent, a, b, angle, threshold, row_start, nx, n_bands):
    """:func:`union_below` in bands of rows in parallel, then the pairs across bands; the same result.

    Pairs are listed row by row (``row_start`` (ny+1,) the pair range of each row) and every pair
    points forward (``b > a``), so a band's pairs join only its own points and its sets are rooted
    in it: the bands run in parallel, each flattened in one rising sweep (``parent[i] <= i``, so
    ``parent[parent[i]]`` is already a root when ``i`` is reached). The pairs from a band's last row
    into the next band are then joined one by one through the band roots, the paths from their
    points compressed to the final roots, and a last parallel sweep points every point at its root.
    A set's root is its smallest index, so the flattened ``parent`` equals :func:`union_below`'s.
    """
    ny = row_start.shape[0] - 1
    nbands = max(1, min(n_bands, ny))
    for c in nb.prange(nbands):
        r0 = c * ny // nbands
        r1 = (c + 1) * ny // nbands
        _union_band(parent, a, b, angle, threshold, row_start[r0], row_start[r1], r0 * nx, r1 * nx)
    # across the bands, one after the other: only band roots change here
    for c in range(1, nbands):
        r1 = c * ny // nbands
        hi_pt = r1 * nx
        for k in range(row_start[r1 - 1], row_start[r1]):
            if angle[k] < threshold and b[k] >= hi_pt:
                _union(parent, parent[a[k]], parent[b[k]])
    for c in range(1, nbands):
        r1 = c * ny // nbands
        hi_pt = r1 * nx
        for k in range(row_start[r1 - 1], row_start[r1]):
            if angle[k] < threshold and b[k] >= hi_pt:
                _compress_path(parent, a[k])
                _compress_path(parent, b[k])
    for c in nb.prange(nbands):
        r0 = c * ny // nbands
        r1 = (c + 1) * ny // nbands
        for i in range(r0 * nx, r1 * nx):
            r = parent[parent[i]]
            if r != parent[i]:  # roots are left unwritten: other bands read them
                parent[i] = r


@nb.njit(cache=True)
def compact_labels(roots, keep, out):
    """Consecutive ids 0..n-1 in raster order of each set's first point; -1 where not ``keep``.

    ``roots`` must be flattened and each root must be the smallest index of its set, so a set is
    numbered when its root is met. Returns the number of sets.
    """
    n = roots.shape[0]
    newid = np.full(n, -1, dtype=np.int32)
    count = 0
    for i in range(n):
        if not keep[i]:
            out[i] = -1
            continue
        r = roots[i]
        if newid[r] < 0:
            newid[r] = count
            count += 1
        out[i] = newid[r]
    return count


# ----------------------------------------------------------------------------- clean-up
@nb.njit(cache=True, parallel=True)
def _fill_sweep(labels, new, ny, nx, offsets):
    """One synchronous majority-fill sweep from ``labels`` into ``new``; returns the points filled."""
    changed = 0
    for i in nb.prange(ny):
        par = i % 2
        cand = np.empty(offsets.shape[1], dtype=np.int64)
        for j in range(nx):
            p = i * nx + j
            new[p] = labels[p]
            if labels[p] >= 0:
                continue
            m = 0
            for k in range(offsets.shape[1]):
                ii = i + offsets[par, k, 0]
                jj = j + offsets[par, k, 1]
                if ii < 0 or ii >= ny or jj < 0 or jj >= nx:
                    continue
                lab = labels[ii * nx + jj]
                if lab >= 0:
                    cand[m] = lab
                    m += 1
            if m == 0:
                continue
            # majority; ties go to the smaller id so the result does not depend on scan order
            best = -1
            best_n = 0
            for u in range(m):
                c = 0
                for v in range(m):
                    if cand[v] == cand[u]:
                        c += 1
                if c > best_n or (c == best_n and cand[u] < best):
                    best_n = c
                    best = cand[u]
            new[p] = best
            changed += 1
    return changed


@nb.njit(cache=True)
def fill_majority(labels, ny, nx, offsets, max_sweeps):
    """Give unlabelled points (-1) the most common label among their neighbours, sweep by sweep.

    Each sweep reads the labels of the previous one (synchronous update), so the result does not
    depend on scan order. Stops when a sweep changes nothing or after ``max_sweeps``.
    Returns ``(points filled, sweeps run)``; ``labels`` (ny*nx,) int32 is updated in place.
    """
    new = np.empty_like(labels)
    total = 0
    sweeps = 0
    while sweeps < max_sweeps:
        changed = _fill_sweep(labels, new, ny, nx, offsets)
        sweeps += 1
        if changed == 0:
            break
        labels[:] = new
        total += changed
    return total, sweeps

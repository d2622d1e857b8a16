"""Numba kernels for per-grain sums of grain reconstruction: point geometry, symmetry-aware
orientation moments, disorientation to the grain mean, grain means of point values, and KAM.

Points are addressed by their flat index ``p = i * nx + j``; labels are int32 grain ids, −1 for
points outside every grain. The parallel kernels split the points (or rows) into chunks, each
with its own accumulator, so no two threads write the same grain's sums.
"""

from __future__ import annotations

import math

import numba as nb
import numpy as np

from slipnet.crystal.orientation_kernels import cubic_angle, nearest_cubic_single

# numba's on-disk cache checks only this file's own source, not the crystal kernels inlined from
# slipnet.crystal.orientation_kernels: after changing those, edit (or touch) this file too, or a
# warm cache keeps running the old inlined code


# ----------------------------------------------------------------------------- orientations
@nb.njit(cache=True, parallel=True)
def point_to_reference(quats, valid, labels, refs, out):
    """Disorientation (degrees, float32) of every valid labelled point to ``refs[label]``; NaN elsewhere."""
    to_deg = 180.0 / math.pi
    for p in nb.prange(labels.shape[0]):
        g = labels[p]
        if g < 0 or not valid[p]:
            out[p] = np.nan
            continue
        a0, a1, a2, a3 = refs[g, 0], -refs[g, 1], -refs[g, 2], -refs[g, 3]
        b0, b1, b2, b3 = quats[p, 0], quats[p, 1], quats[p, 2], quats[p, 3]
        w = b0 * a0 - b1 * a1 - b2 * a2 - b3 * a3
        x = b0 * a1 + b1 * a0 + b2 * a3 - b3 * a2
        y = b0 * a2 - b1 * a3 + b2 * a0 + b3 * a1
        z = b0 * a3 + b1 * a2 - b2 * a1 + b3 * a0
        out[p] = cubic_angle(w, x, y, z) * to_deg




COS_22_5 = math.cos(math.radians(22.5))


@nb.njit(cache=True)
def quat_moment_sums(quats, valid, labels, refs, only, ops, acc, lo=0, hi=-1):
    """Accumulate the 10 distinct terms of Σ q qᵀ per label, each q first brought to its cubic
    equivalent nearest ``refs[label]`` (what :func:`slipnet.orientation.nearest_equivalent` does).

    Within 45° of the reference the identity is the nearest equivalent (the closest other copies
    are 90° away), so only the sign is matched; otherwise the 24 operators ``ops`` are searched.
    ``only`` (n,) bool selects the labels to accumulate; ``acc`` (n, 10) float64, terms in
    row-major upper-triangle order (00, 01, 02, 03, 11, 12, 13, 22, 23, 33). Points
    ``lo..hi-1`` only (default all).
    """
    if hi < 0:
        hi = labels.shape[0]
    for p in range(lo, hi):
        g = labels[p]
        if g < 0 or not valid[p] or not only[g]:
            continue
        w, x, y, z = quats[p, 0], quats[p, 1], quats[p, 2], quats[p, 3]
        r0, r1, r2, r3 = refs[g, 0], refs[g, 1], refs[g, 2], refs[g, 3]
        dot = w * r0 + x * r1 + y * r2 + z * r3
        if abs(dot) < COS_22_5:
            # sign already matched to the reference by the shared search
            w, x, y, z, _ = nearest_cubic_single(w, x, y, z, r0, r1, r2, r3, ops)
        elif dot < 0.0:
            w, x, y, z = -w, -x, -y, -z
        acc[g, 0] += w * w
        acc[g, 1] += w * x
        acc[g, 2] += w * y
        acc[g, 3] += w * z
        acc[g, 4] += x * x
        acc[g, 5] += x * y
        acc[g, 6] += x * z
        acc[g, 7] += y * y
        acc[g, 8] += y * z
        acc[g, 9] += z * z


@nb.njit(cache=True, parallel=True)
def quat_moment_sums_parallel(quats, valid, labels, refs, only, ops, acc, n_chunks):
    """:func:`quat_moment_sums` over ``n_chunks`` point ranges in parallel, each into its own
    accumulator, summed at the end (no two threads write the same grain's sums)."""
    n = labels.shape[0]
    part = np.zeros((n_chunks, acc.shape[0], acc.shape[1]))
    for c in nb.prange(n_chunks):
        quat_moment_sums(quats, valid, labels, refs, only, ops, part[c], c * n // n_chunks, (c + 1) * n // n_chunks)
    for c in range(n_chunks):
        acc += part[c]


@nb.njit(cache=True, parallel=True)
def quat_moment_sums_some(quats, valid, labels, refs, grains, row_lo, row_hi, nx, ops, acc, n_chunks):
    """:func:`quat_moment_sums_parallel` for the few ``grains`` only, each read over its own rows.

    Grain ``grains[t]`` has its valid points in rows ``row_lo[t]..row_hi[t]``; its sums are
    accumulated over the same ``n_chunks`` point ranges, in the same order, and added up in chunk
    order as the whole-map kernel does, so its ``acc`` row is the same bit for bit; the other rows
    are left as they are. Grains run in parallel (each writes only its own row).
    """
    n = labels.shape[0]
    for t in nb.prange(grains.shape[0]):
        g = grains[t]
        p0 = row_lo[t] * nx
        p1 = (row_hi[t] + 1) * nx
        r0, r1, r2, r3 = refs[g, 0], refs[g, 1], refs[g, 2], refs[g, 3]
        total = np.zeros(10)
        part = np.zeros(10)
        for c in range(n_chunks):
            part[:] = 0.0
            for p in range(max(c * n // n_chunks, p0), min((c + 1) * n // n_chunks, p1)):
                if labels[p] != g or not valid[p]:
                    continue
                w, x, y, z = quats[p, 0], quats[p, 1], quats[p, 2], quats[p, 3]
                # as in quat_moment_sums
                dot = w * r0 + x * r1 + y * r2 + z * r3
                if abs(dot) < COS_22_5:
                    w, x, y, z, _ = nearest_cubic_single(w, x, y, z, r0, r1, r2, r3, ops)
                elif dot < 0.0:
                    w, x, y, z = -w, -x, -y, -z
                part[0] += w * w
                part[1] += w * x
                part[2] += w * y
                part[3] += w * z
                part[4] += x * x
                part[5] += x * y
                part[6] += x * z
                part[7] += y * y
                part[8] += y * z
                part[9] += z * z
            for u in range(10):
                total[u] += part[u]
        for u in range(10):
            acc[g, u] = total[u]


# ----------------------------------------------------------------------------- per-grain sums
@nb.njit(cache=True)
def grain_point_sums(labels, valid, phase, ny, nx, step, row_spacing, hex_grid, n, sums, bbox, first, ph, edge,
                     row_lo=0, row_hi=-1):
    """One pass over the points accumulating per-grain geometry.

    ``sums`` (n, 7): count, Σx, Σy, Σxx, Σxy, Σyy, count of valid points (µm, origin at point 0);
    ``bbox`` (n, 4): x_min, x_max, y_min, y_max; ``first`` (n,) first valid point; ``ph`` (n,)
    phase of that point; ``edge`` (n,) whether the grain touches the map edge.
    """
    for g in range(n):
        bbox[g, 0] = np.inf
        bbox[g, 1] = -np.inf
        bbox[g, 2] = np.inf
        bbox[g, 3] = -np.inf
        first[g] = -1
        ph[g] = -1
        edge[g] = False
    if row_hi < 0:
        row_hi = ny
    for i in range(row_lo, row_hi):
        shift = 0.5 * step if (hex_grid and i % 2 == 1) else 0.0
        y = i * row_spacing
        for j in range(nx):
            p = i * nx + j
            g = labels[p]
            if g < 0:
                continue
            x = j * step + shift
            sums[g, 0] += 1.0
            sums[g, 1] += x
            sums[g, 2] += y
            sums[g, 3] += x * x
            sums[g, 4] += x * y
            sums[g, 5] += y * y
            if valid[p]:
                sums[g, 6] += 1.0
                if first[g] < 0:
                    first[g] = p
                    ph[g] = phase[p]
            if x < bbox[g, 0]:
                bbox[g, 0] = x
            if x > bbox[g, 1]:
                bbox[g, 1] = x
            if y < bbox[g, 2]:
                bbox[g, 2] = y
            if y > bbox[g, 3]:
                bbox[g, 3] = y
            if i == 0 or j == 0 or i == ny - 1 or j == nx - 1:
                edge[g] = True


@nb.njit(cache=True, parallel=True)
def grain_point_sums_parallel(labels, valid, phase, ny, nx, step, row_spacing, hex_grid, n, sums, bbox, first, ph,
                              edge, n_chunks):
    """:func:`grain_point_sums` over ``n_chunks`` row ranges in parallel, merged in row order."""
    s_ = np.zeros((n_chunks, n, 7))
    b_ = np.empty((n_chunks, n, 4))
    f_ = np.empty((n_chunks, n), dtype=np.int64)
    p_ = np.empty((n_chunks, n), dtype=np.int32)
    e_ = np.empty((n_chunks, n), dtype=np.bool_)
    for c in nb.prange(n_chunks):
        grain_point_sums(labels, valid, phase, ny, nx, step, row_spacing, hex_grid, n, s_[c], b_[c], f_[c], p_[c],
                         e_[c], c * ny // n_chunks, (c + 1) * ny // n_chunks)
    for g in range(n):
        bbox[g, 0] = np.inf
        bbox[g, 1] = -np.inf
        bbox[g, 2] = np.inf
        bbox[g, 3] = -np.inf
        first[g] = -1
        ph[g] = -1
        edge[g] = False
        for c in range(n_chunks):
            for t in range(7):
                sums[g, t] += s_[c, g, t]
            bbox[g, 0] = min(bbox[g, 0], b_[c, g, 0])
            bbox[g, 1] = max(bbox[g, 1], b_[c, g, 1])
            bbox[g, 2] = min(bbox[g, 2], b_[c, g, 2])
            bbox[g, 3] = max(bbox[g, 3], b_[c, g, 3])
            if first[g] < 0 and f_[c, g] >= 0:  # chunks run in row order: the first found is first
                first[g] = f_[c, g]
                ph[g] = p_[c, g]
            edge[g] = edge[g] or e_[c, g]


# ----------------------------------------------------------------------------- point values
@nb.njit(cache=True)
def grain_means_of(labels, values, n):
    """Mean of the finite ``values`` (float32 per point) of each grain; NaN where a grain has none."""
    s = np.zeros(n)
    c = np.zeros(n, dtype=np.int64)
    for p in range(labels.shape[0]):
        g = labels[p]
        v = values[p]
        if g >= 0 and v == v:
            s[g] += v
            c[g] += 1
    out = np.full(n, np.nan)
    for g in range(n):
        if c[g] > 0:
            out[g] = s[g] / c[g]
    return out


@nb.njit(cache=True, parallel=True)
def kam_rows(a, b, angle, threshold, row_start, nx, out):
    """Kernel average misorientation per point (float32 degrees, NaN without a qualifying pair).

    Averages the angles of a point's pairs below ``threshold``; such pairs always lie inside one
    grain (union–find joined them, and merging only unites grains further), so no label lookup
    is needed. Parallel over rows: the thread of row i handles the pairs starting in row i and
    the pairs from row i−1 ending in row i, and writes only the points of row i.
    ``row_start`` (ny+1,) gives the pair range of each row (pairs are listed row by row).
    """
    ny = row_start.shape[0] - 1
    for i in nb.prange(ny):
        lo_pt = i * nx
        acc = np.zeros(nx)
        cnt = np.zeros(nx, dtype=np.int64)
        k0 = row_start[i - 1] if i > 0 else row_start[0]
        for k in range(k0, row_start[i + 1]):
            ang = angle[k]
            if not ang < threshold:
                continue
            p = a[k] - lo_pt
            r = b[k] - lo_pt
            if 0 <= p < nx:
                acc[p] += ang
                cnt[p] += 1
            if 0 <= r < nx:
                acc[r] += ang
                cnt[r] += 1
        for j in range(nx):
            out[lo_pt + j] = acc[j] / cnt[j] if cnt[j] > 0 else np.nan

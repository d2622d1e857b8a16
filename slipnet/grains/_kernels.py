"""Numba kernels for grain reconstruction; the public wrapper lives in :mod:`slipnet.grains`.

Points are addressed by their flat index ``p = i * nx + j`` (row ``i``, column ``j``), held as
int32 to halve the memory of the pair arrays on large maps. Neighbour pairs come from an offset
table ``(2, k, 2)`` of ``(di, dj)`` rows, one block per row parity (even, odd), so square and
hexagonal grids share every kernel.
"""

from __future__ import annotations

import math

import numba as nb
import numpy as np

from slipnet.crystal.orientation_kernels import cubic_angle, nearest_cubic_single

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
    # angle of q[p] * conj(q[r]) reduced by cubic symmetry
    a0, a1, a2, a3 = q[r, 0], -q[r, 1], -q[r, 2], -q[r, 3]
    b0, b1, b2, b3 = q[p, 0], q[p, 1], q[p, 2], q[p, 3]
    w = b0 * a0 - b1 * a1 - b2 * a2 - b3 * a3
    x = b0 * a1 + b1 * a0 + b2 * a3 - b3 * a2
    y = b0 * a2 - b1 * a3 + b2 * a0 + b3 * a1
    z = b0 * a3 + b1 * a2 - b2 * a1 + b3 * a0
    return cubic_angle(w, x, y, z)


@nb.njit(cache=True, parallel=True)
def fill_pairs_with_angles(ny, nx, offsets, row_start, quats, valid, phase, a, b, out):
    """:func:`fill_pairs` and :func:`pair_disorientation` in one pass (the pair arrays are written
    and the two quaternions read while they are in cache)."""
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


@nb.njit(cache=True, parallel=True)
def pair_disorientation(quats, valid, phase, a, b, out):
    """Cubic disorientation (degrees, float32) of every pair; NaN if a point is invalid or phases differ."""
    to_deg = 180.0 / math.pi
    for k in nb.prange(a.shape[0]):
        p = a[k]
        r = b[k]
        if valid[p] and valid[r] and phase[p] == phase[r]:
            out[k] = _angle_between(quats, r, p) * to_deg
        else:
            out[k] = np.nan


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


# ----------------------------------------------------------------------------- union-find
@nb.njit(cache=True, inline="always")
def _find(parent, i):
    # path halving: every visited node skips to its grandparent
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


@nb.njit(cache=True)
def boundary_pairs(a, b, labels):
    """The pairs whose two points carry different grain labels (both labelled), as int32 (ea, eb)."""
    n = 0
    for k in range(a.shape[0]):
        la = labels[a[k]]
        lb = labels[b[k]]
        if la != lb and la >= 0 and lb >= 0:
            n += 1
    ea = np.empty(n, dtype=np.int32)
    eb = np.empty(n, dtype=np.int32)
    n = 0
    for k in range(a.shape[0]):
        la = labels[a[k]]
        lb = labels[b[k]]
        if la != lb and la >= 0 and lb >= 0:
            ea[n] = a[k]
            eb[n] = b[k]
            n += 1
    return ea, eb


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
def edge_geometry(ea, eb, nx, step, hex_grid, half, ys, off, width, mx, my, tx, ty, v0, v1):
    """Midpoint (µm from point 0), unit edge direction and the two integer vertex ids of the cell
    edge shared by each point pair. Vertices lie on a lattice: x in multiples of step/2, y in
    multiples of ``1/ys`` (step/2 on square grids, row spacing/3 on hex grids)."""
    rs = step * (math.sqrt(3.0) / 2.0 if hex_grid else 1.0)
    for k in nb.prange(ea.shape[0]):
        ia = ea[k] // nx
        ja = ea[k] - ia * nx
        ib = eb[k] // nx
        jb = eb[k] - ib * nx
        xa = ja * step + (0.5 * step if (hex_grid and ia % 2 == 1) else 0.0)
        xb = jb * step + (0.5 * step if (hex_grid and ib % 2 == 1) else 0.0)
        ya = ia * rs
        yb = ib * rs
        cx = 0.5 * (xa + xb)
        cy = 0.5 * (ya + yb)
        dx = xb - xa
        dy = yb - ya
        nrm = math.sqrt(dx * dx + dy * dy)
        ux = -dy / nrm
        uy = dx / nrm
        mx[k] = cx
        my[k] = cy
        tx[k] = ux
        ty[k] = uy
        px = cx + half * ux
        py = cy + half * uy
        v0[k] = (np.int64(round(py * ys)) + off) * width + (np.int64(round(px * 2.0 / step)) + 2)
        px = cx - half * ux
        py = cy - half * uy
        v1[k] = (np.int64(round(py * ys)) + off) * width + (np.int64(round(px * 2.0 / step)) + 2)


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


@nb.njit(cache=True)
def order_by_key(lo, hi, n):
    """Order of edges sorted by (lo, hi), both in 0..n-1: a counting sort on ``lo`` and a small
    sort on ``hi`` inside each bucket — linear time instead of a general sort of millions of keys.
    Ties keep their input order."""
    m = lo.shape[0]
    start = np.zeros(n + 1, dtype=np.int64)
    for k in range(m):
        start[lo[k] + 1] += 1
    for g in range(n):
        start[g + 1] += start[g]
    fill = start[:-1].copy()
    order = np.empty(m, dtype=np.int64)
    for k in range(m):
        order[fill[lo[k]]] = k
        fill[lo[k]] += 1
    for g in range(n):
        s0 = start[g]
        s1 = start[g + 1]
        if s1 - s0 > 1:
            seg = order[s0:s1].copy()
            keys = hi[seg]
            o = np.argsort(keys, kind="mergesort")
            for t in range(s1 - s0):
                order[s0 + t] = seg[o[t]]
    return order


@nb.njit(cache=True)
def kam_sums(a, b, angle, labels, threshold, sums, counts):
    """Accumulate, per point, the angles of its pairs inside one grain and below ``threshold``."""
    for k in range(a.shape[0]):
        ang = angle[k]
        if not ang < threshold:
            continue
        p = a[k]
        r = b[k]
        if labels[p] < 0 or labels[p] != labels[r]:
            continue
        sums[p] += ang
        sums[r] += ang
        counts[p] += 1
        counts[r] += 1


# ----------------------------------------------------------------------------- boundary chains
@nb.njit(cache=True, parallel=True)
def chain_edges(bstart, ev0, ev1, order, first_of_chain, start_v, end_v):
    """Order the edges of every boundary into chains (polylines) through shared vertices.

    Edges of boundary k occupy ``[bstart[k], bstart[k+1])`` with end vertices ``ev0``/``ev1``.
    Per boundary, the 2 incidences (vertex, edge) of each edge are sorted by vertex locally (a
    boundary has few edges; boundaries run in parallel). Chains start at vertices of odd
    degree (ends of open lines), then at any edge left (closed loops). Writes the edge order
    into ``order``, flags the first edge of each chain, and stores each chain's start vertex and
    end vertex at the position of its first edge.
    """
    nb_ = bstart.shape[0] - 1
    m = ev0.shape[0]
    used = np.zeros(m, dtype=np.bool_)
    for k in nb.prange(nb_):
        s0 = bstart[k]
        cnt = bstart[k + 1] - s0
        lv_raw = np.empty(2 * cnt, dtype=np.int64)
        for t in range(cnt):
            lv_raw[t] = ev0[s0 + t]
            lv_raw[cnt + t] = ev1[s0 + t]
        srt = np.argsort(lv_raw)
        verts = lv_raw[srt]
        edges = np.empty(2 * cnt, dtype=np.int64)
        for t in range(2 * cnt):
            edges[t] = s0 + (srt[t] % cnt)
        e = 2 * cnt
        pos = s0
        for phase_ in range(2):
            u = 0
            while u < e:
                # run of incidences at one vertex
                w = u
                while w < e and verts[w] == verts[u]:
                    w += 1
                deg = w - u
                if phase_ == 1 or deg % 2 == 1:
                    for t in range(u, w):
                        e0 = edges[t]
                        if used[e0]:
                            continue
                        v = verts[u]
                        first_of_chain[pos] = True
                        start_v[pos] = v
                        head = pos
                        cur = e0
                        while True:
                            used[cur] = True
                            order[pos] = cur
                            pos += 1
                            v = ev1[cur] if ev0[cur] == v else ev0[cur]
                            q = np.searchsorted(verts, v)
                            nxt = -1
                            while q < e and verts[q] == v:
                                if not used[edges[q]]:
                                    nxt = edges[q]
                                    break
                                q += 1
                            if nxt < 0:
                                break
                            cur = nxt
                        end_v[head] = v
                u = w


@nb.njit(cache=True)
def _junction_at(labels, cells, nc, out_g):
    # distinct labelled grains among the cells meeting at one vertex, sorted ascending
    m = 0
    for t in range(nc):
        g = labels[cells[t]]
        if g < 0:
            continue
        dup = False
        for u in range(m):
            if out_g[u] == g:
                dup = True
                break
        if not dup:
            out_g[m] = g
            m += 1
    # insertion sort (at most 4 values)
    for t in range(1, m):
        v = out_g[t]
        u = t - 1
        while u >= 0 and out_g[u] > v:
            out_g[u + 1] = out_g[u]
            u -= 1
        out_g[u + 1] = v
    return m


@nb.njit(cache=True)
def triple_junctions(labels, ny, nx, hex_grid, step, row_spacing, max_out):
    """Cell vertices where three or more grains meet, from the label image in one pass.

    Square grid: every vertex is shared by the 2×2 cells around it; hexagonal grid: by the 3 cells
    of a lattice triangle. Returns ``(x, y, grains (k, 4) with −1 padding, n_grains)`` with
    positions in µm from point (0, 0); at most ``max_out`` rows.
    """
    xs = np.empty(max_out)
    ys = np.empty(max_out)
    gs = np.full((max_out, 4), -1, dtype=np.int64)
    ns = np.empty(max_out, dtype=np.int64)
    cells = np.empty(4, dtype=np.int64)
    tmp = np.empty(4, dtype=np.int64)
    n = 0
    for i in range(ny - 1):
        for j in range(nx - 1 + (1 if hex_grid else 0)):
            if not hex_grid:
                # fast path: the 2x2 cells around the vertex all in one grain (the usual case)
                g0 = labels[i * nx + j]
                if (labels[i * nx + j + 1] == g0 and labels[(i + 1) * nx + j] == g0
                        and labels[(i + 1) * nx + j + 1] == g0):
                    continue
            for tri in range(2 if hex_grid else 1):
                if not hex_grid:
                    cells[0] = i * nx + j
                    cells[1] = i * nx + j + 1
                    cells[2] = (i + 1) * nx + j
                    cells[3] = (i + 1) * nx + j + 1
                    nc = 4
                    x = (j + 0.5) * step
                    y = (i + 0.5) * row_spacing
                else:
                    nc = 3
                    if i % 2 == 0:
                        if tri == 0:  # (i,j), (i,j+1), (i+1,j)
                            a0, a1, a2 = i * nx + j, i * nx + j + 1, (i + 1) * nx + j
                            x = (j + 0.5) * step
                            y = (i + 1.0 / 3.0) * row_spacing
                            ok = j + 1 < nx
                        else:  # (i,j+1), (i+1,j), (i+1,j+1)
                            a0, a1, a2 = i * nx + j + 1, (i + 1) * nx + j, (i + 1) * nx + j + 1
                            x = (j + 1.0) * step
                            y = (i + 2.0 / 3.0) * row_spacing
                            ok = j + 1 < nx
                    else:
                        if tri == 0:  # (i,j), (i,j+1), (i+1,j+1)
                            a0, a1, a2 = i * nx + j, i * nx + j + 1, (i + 1) * nx + j + 1
                            x = (j + 1.0) * step
                            y = (i + 1.0 / 3.0) * row_spacing
                            ok = j + 1 < nx
                        else:  # (i,j), (i+1,j), (i+1,j+1)
                            a0, a1, a2 = i * nx + j, (i + 1) * nx + j, (i + 1) * nx + j + 1
                            x = (j + 0.5) * step
                            y = (i + 2.0 / 3.0) * row_spacing
                            ok = j + 1 < nx
                    if not ok:
                        continue
                    cells[0] = a0
                    cells[1] = a1
                    cells[2] = a2
                g0 = labels[cells[0]]
                same = True
                for t in range(1, nc):
                    if labels[cells[t]] != g0:
                        same = False
                        break
                if same:  # inside one grain (the usual case): nothing meets here
                    continue
                m = _junction_at(labels, cells, nc, tmp)
                if m >= 3 and n < max_out:
                    xs[n] = x
                    ys[n] = y
                    for t in range(m):
                        gs[n, t] = tmp[t]
                    ns[n] = m
                    n += 1
    return xs[:n], ys[:n], gs[:n], ns[:n]

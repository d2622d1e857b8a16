"""Numba kernels for the boundaries of grain reconstruction: boundary point pairs, their
ordering by grain pair, cell-edge geometry, chaining edges into polylines, triple junctions.

Points are addressed by their flat index ``p = i * nx + j``; cell-edge vertices by integer ids on
a lattice fine enough to hold every vertex of the grid (see :func:`edge_geometry`).
"""

from __future__ import annotations

import math

import numba as nb
import numpy as np


# ----------------------------------------------------------------------------- boundary pairs
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


# ----------------------------------------------------------------------------- cell edges
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


# ----------------------------------------------------------------------------- triple junctions
@nb.njit(cache=True)
def _junction_at(labels, cells, nc, out_g):
    """Write the distinct labelled grains of the cells at one vertex into ``out_g``, sorted; return their count."""
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


# ----------------------------------------------------------------------------- boundary polylines
@nb.njit(cache=True)
def chain_polylines(bstart, order, first, start_v, end_v, mx, my, width, off, ys, half_step, ox, oy, k):
    """Points, smoothed length and end points of the chains :func:`chain_edges` made, in one pass.

    Each chain becomes its start vertex, the midpoints of its edges in chain order and its end
    vertex (µm, map origin ``(ox, oy)`` added); vertex ids decode as ``x = (id % width − 2) ·
    half_step``, ``y = (id // width − off) / ys``. The length of a chain is measured along its
    points smoothed by a centred moving average over up to ``2k + 1`` points (the window shrinks
    symmetrically near the ends, which stay fixed), taken as differences of one running sum over
    all points of the map, so the lengths are those of the array code this replaced, bit for bit.

    Returns ``(xy (p, 2), chain_off (c + 1,), boundary_chains (nbd + 1,), ends_xy (nbd, 4),
    trace_length (nbd,))``: chain ``c`` is ``xy[chain_off[c]:chain_off[c + 1]]``, the chains of
    boundary ``b`` are ``boundary_chains[b]..boundary_chains[b + 1] − 1``, ``ends_xy`` holds the
    start and end points of each boundary's longest chain (the first of equal ones), and
    ``trace_length`` the sum of its chains' smoothed lengths.
    """
    m = order.shape[0]
    nbd = bstart.shape[0] - 1
    n_chains = 0
    for e in range(m):
        if first[e]:
            n_chains += 1
    npt = m + 2 * n_chains
    xy = np.empty((npt, 2))
    chain_off = np.empty(n_chains + 1, dtype=np.int64)
    boundary_chains = np.empty(nbd + 1, dtype=np.int64)
    ends = np.empty((nbd, 4))
    trace = np.zeros(nbd)
    c = 0
    pos = 0
    for bd in range(nbd):
        boundary_chains[bd] = c
        best = -1
        e = bstart[bd]
        while e < bstart[bd + 1]:
            e1 = e + 1  # the chain's edges run from e to the next chain's first edge
            while e1 < bstart[bd + 1] and not first[e1]:
                e1 += 1
            chain_off[c] = pos
            sx = (start_v[e] % width - 2) * half_step
            sy = (start_v[e] // width - off) / ys
            ex = (end_v[e] % width - 2) * half_step
            ey = (end_v[e] // width - off) / ys
            xy[pos, 0] = sx + ox
            xy[pos, 1] = sy + oy
            pos += 1
            for t in range(e, e1):
                xy[pos, 0] = mx[order[t]] + ox
                xy[pos, 1] = my[order[t]] + oy
                pos += 1
            xy[pos, 0] = ex + ox
            xy[pos, 1] = ey + oy
            pos += 1
            if e1 - e > best:
                best = e1 - e
                ends[bd, 0] = sx + ox
                ends[bd, 1] = sy + oy
                ends[bd, 2] = ex + ox
                ends[bd, 3] = ey + oy
            c += 1
            e = e1
    chain_off[n_chains] = npt
    boundary_chains[nbd] = n_chains
    # running sums of the points (cs[i] = sum of the points before i), as one cumulative sum
    cs = np.empty((npt + 1, 2))
    cs[0, 0] = 0.0
    cs[0, 1] = 0.0
    for i in range(npt):
        cs[i + 1, 0] = cs[i, 0] + xy[i, 0]
        cs[i + 1, 1] = cs[i, 1] + xy[i, 1]
    for bd in range(nbd):
        for cc in range(boundary_chains[bd], boundary_chains[bd + 1]):
            lo = chain_off[cc]
            hi = chain_off[cc + 1] - 1
            length = 0.0
            px = 0.0
            py = 0.0
            for i in range(lo, hi + 1):
                h = min(min(i - lo, hi - i), k)
                if k > 0:
                    w = 2 * h + 1
                    qx = (cs[i + h + 1, 0] - cs[i - h, 0]) / w
                    qy = (cs[i + h + 1, 1] - cs[i - h, 1]) / w
                else:
                    qx = xy[i, 0]
                    qy = xy[i, 1]
                if i > lo:
                    length += math.hypot(qx - px, qy - py)
                px = qx
                py = qy
            trace[bd] += length
    return xy, chain_off, boundary_chains, ends, trace

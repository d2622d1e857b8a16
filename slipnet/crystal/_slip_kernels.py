"""Numba kernels for slip systems and slip transmission.

Public wrappers live in :mod:`slipnet.slip` and :mod:`slipnet.transmission`. Notation: ``q`` an
orientation quaternion (sample → crystal), ``n`` plane normals and ``d`` slip directions (unit, crystal
frame), ``l`` the load axis (unit, sample frame). Every row kernel skips rows whose quaternion is NaN
(unindexed points) and writes NaN (or −1 for indices) there.
"""

from __future__ import annotations

import math

import numba as nb
import numpy as np

from slipnet.crystal.orientation_kernels import quat_rotate_single, quat_to_matrix_single
from slipnet.sized_kernels import sized_kernel


@nb.njit(cache=True, inline="always")
def _load_in_crystal(q, load):
    # l_c = q l q* written out with scalars (no per-row allocation inside the parallel loop)
    w, x, y, z = q[0], q[1], q[2], q[3]
    tx = 2.0 * (y * load[2] - z * load[1])
    ty = 2.0 * (z * load[0] - x * load[2])
    tz = 2.0 * (x * load[1] - y * load[0])
    return (load[0] + w * tx + (y * tz - z * ty),
            load[1] + w * ty + (z * tx - x * tz),
            load[2] + w * tz + (x * ty - y * tx))


@sized_kernel()
def schmid_rows(q, load, normals_t, directions_t, out):
    """Signed Schmid factors ``(n·l_c)(d·l_c)`` per row; ``out`` (n, n_sys), float32 or float64.

    ``normals_t`` and ``directions_t`` are (3, n_sys) (components first) so the loop over systems
    reads contiguous memory and vectorises. ``l_c = g · l`` is formed once per row.
    """
    ns = normals_t.shape[1]
    n0, n1, n2 = normals_t[0], normals_t[1], normals_t[2]
    d0, d1, d2 = directions_t[0], directions_t[1], directions_t[2]
    for i in nb.prange(q.shape[0]):
        if q[i, 0] != q[i, 0]:
            for s in range(ns):
                out[i, s] = np.nan
            continue
        l0, l1, l2 = _load_in_crystal(q[i], load)
        row = out[i]
        for s in range(ns):
            row[s] = (n0[s] * l0 + n1[s] * l1 + n2[s] * l2) * (d0[s] * l0 + d1[s] * l1 + d2[s] * l2)


BLOCK = 1024


@sized_kernel()
def schmid_summary_rows(q, load, normals_t, directions_t, inv_crss_pos, inv_crss_neg,
                        m_max, s_max, m_second, s_second, eff_max, s_eff, sign_max):
    """Per row: largest |m| and its system, runner-up |m| and system, largest |m|/crss and system.

    Nothing of size (n, n_sys) is stored, so any number of rows runs in memory O(n).
    ``sign_max`` holds the sign (+1/−1) of the signed factor of the largest system; ``inv_crss_*``
    are 1/crss for positive and negative τ. Rows run in blocks so each thread allocates its
    scratch row once per block: the factors of a row are formed in a vectorisable loop, then reduced.
    """
    ns = normals_t.shape[1]
    n = q.shape[0]
    n0, n1, n2 = normals_t[0], normals_t[1], normals_t[2]
    d0, d1, d2 = directions_t[0], directions_t[1], directions_t[2]
    nblk = (n + BLOCK - 1) // BLOCK
    for blk in nb.prange(nblk):
        buf = np.empty(ns)
        eff = np.empty(ns)
        for i in range(blk * BLOCK, min(n, (blk + 1) * BLOCK)):
            if q[i, 0] != q[i, 0]:
                m_max[i] = np.nan
                m_second[i] = np.nan
                eff_max[i] = np.nan
                s_max[i] = -1
                s_second[i] = -1
                s_eff[i] = -1
                sign_max[i] = 0
                continue
            l0, l1, l2 = _load_in_crystal(q[i], load)
            for s in range(ns):
                m = (n0[s] * l0 + n1[s] * l1 + n2[s] * l2) * (d0[s] * l0 + d1[s] * l1 + d2[s] * l2)
                buf[s] = abs(m)
                eff[s] = abs(m) * (inv_crss_pos[s] if m >= 0.0 else inv_crss_neg[s])
            b1 = -1.0
            i1 = -1
            for s in range(ns):
                if buf[s] > b1:
                    b1 = buf[s]
                    i1 = s
            be = -1.0
            ie = -1
            for s in range(ns):
                if eff[s] > be:
                    be = eff[s]
                    ie = s
            b2 = -1.0
            i2 = -1
            for s in range(ns):
                if s != i1 and buf[s] > b2:
                    b2 = buf[s]
                    i2 = s
            # sign of the largest factor, recomputed for that one system only
            neg = (n0[i1] * l0 + n1[i1] * l1 + n2[i1] * l2) * (d0[i1] * l0 + d1[i1] * l1 + d2[i1] * l2) < 0.0
            m_max[i] = b1
            s_max[i] = i1
            m_second[i] = b2
            s_second[i] = i2
            eff_max[i] = be
            s_eff[i] = ie
            sign_max[i] = -1 if neg else 1


@sized_kernel()
def resolved_shear_rows(q, stress, normals, directions, out):
    """``τ = d · (g σ gᵀ) n`` per row; ``stress`` is (1, 3, 3) (shared) or (n, 3, 3)."""
    ns = normals.shape[0]
    shared = stress.shape[0] == 1
    for i in nb.prange(q.shape[0]):
        if q[i, 0] != q[i, 0]:
            for s in range(ns):
                out[i, s] = np.nan
            continue
        g = np.empty((3, 3))
        quat_to_matrix_single(q[i], g)
        sig = stress[0] if shared else stress[i]
        # σ_c = g σ gᵀ (v_crystal = g v_sample)
        t = np.zeros((3, 3))
        for a in range(3):
            for b in range(3):
                acc = 0.0
                for k in range(3):
                    acc += g[a, k] * sig[k, b]
                t[a, b] = acc
        sc = np.zeros((3, 3))
        for a in range(3):
            for b in range(3):
                acc = 0.0
                for k in range(3):
                    acc += t[a, k] * g[b, k]
                sc[a, b] = acc
        for s in range(ns):
            acc = 0.0
            for a in range(3):
                sn = sc[a, 0] * normals[s, 0] + sc[a, 1] * normals[s, 1] + sc[a, 2] * normals[s, 2]
                acc += directions[s, a] * sn
            out[i, s] = acc


@sized_kernel()
def trace_rows(q, normals, angle, inclination):
    """Surface trace angle (rad, [0, π), +x towards +y) and plane inclination to the surface (rad).

    The plane normal in the sample frame is ``n_s = gᵀ n``; the trace is ``t = n_s × z =
    (n_y, −n_x, 0)``. A plane parallel to the surface has no trace (NaN).
    """
    ns = normals.shape[0]
    for i in nb.prange(q.shape[0]):
        if q[i, 0] != q[i, 0]:
            for s in range(ns):
                angle[i, s] = np.nan
                inclination[i, s] = np.nan
            continue
        qc = np.empty(4)
        qc[0] = q[i, 0]
        qc[1] = -q[i, 1]
        qc[2] = -q[i, 2]
        qc[3] = -q[i, 3]
        v = np.empty(3)
        for s in range(ns):
            quat_rotate_single(qc, normals[s], v)
            nz = min(abs(v[2]), 1.0)
            inclination[i, s] = math.acos(nz)
            if v[0] * v[0] + v[1] * v[1] < 1e-24:
                angle[i, s] = np.nan
                continue
            a = math.atan2(-v[0], v[1])
            if a < 0.0:
                a += math.pi
            if a >= math.pi:
                a -= math.pi
            angle[i, s] = a


@nb.njit(cache=True, inline="always")
def _rot_t(g, v, out):
    # out = gᵀ v : crystal frame -> sample frame
    out[0] = g[0, 0] * v[0] + g[1, 0] * v[1] + g[2, 0] * v[2]
    out[1] = g[0, 1] * v[0] + g[1, 1] * v[1] + g[2, 1] * v[2]
    out[2] = g[0, 2] * v[0] + g[1, 2] * v[1] + g[2, 2] * v[2]


@nb.njit(cache=True, inline="always")
def _line_in_boundary(n, gbn, out):
    # unit line where a plane of normal n meets the boundary plane (normal gbn); zero if parallel
    out[0] = n[1] * gbn[2] - n[2] * gbn[1]
    out[1] = n[2] * gbn[0] - n[0] * gbn[2]
    out[2] = n[0] * gbn[1] - n[1] * gbn[0]
    s = math.sqrt(out[0] * out[0] + out[1] * out[1] + out[2] * out[2])
    if s < 1e-12:
        out[0] = 0.0
        out[1] = 0.0
        out[2] = 0.0
    else:
        out[0] /= s
        out[1] /= s
        out[2] /= s


# reassociation lets LLVM vectorise the max reduction over system pairs; no "nnan"/"ninf", so the NaN
# tests of unindexed grains stay intact
_REDUCE_MATH = {"reassoc", "nsz", "contract"}


# serial: 10⁵ boundaries take tens of milliseconds, and the parallel build compiled twice as long (5.6 s
# against 12 s cold)
@nb.njit(cache=True, fastmath=_REDUCE_MATH)
def boundary_summary_rows(quats, grain_a, grain_b, eff, in_sys, normals, directions, gb_normal, burgers, eff_scale,
                          mp_in, out_sys, score, score_sys, resid, shen, mp_max):
    """Transmission summaries for every boundary and both directions.

    Parameters (all arrays C-contiguous)
    ------------------------------------
    quats (n_grains, 4); grain_a, grain_b (n_b,) int grain ids; eff (n_grains, n_sys) effective
    Schmid factors; in_sys (n_grains,) most-stressed system per grain; normals, directions
    (n_sys, 3) crystal frame; gb_normal (n_b, 3) boundary-plane normals (sample frame); burgers
    (n_b,) Burgers vector length; eff_scale the factor that maps effective Schmid factors onto [0, 1].

    Outputs, column 0 = A→B, column 1 = B→A: mp_in, score, resid, shen (n_b, 2) float; out_sys,
    score_sys (n_b, 2) int; mp_max (n_b,) the largest |m′| over all system pairs.

    Notes
    -----
    m′ = (n_A·n_B)(d_A·d_B) with both in the sample frame equals ``(n_A · R n_B)(d_A · R d_B)``
    with ``R = g_A g_Bᵀ`` in crystal A's frame, so per boundary B's normals and directions are
    rotated once into A's frame (stored components-first so the inner loop over B's systems is
    contiguous and vectorises), then each pair costs two 3-dot products and a product.
    """
    nb_ = grain_a.shape[0]
    ns = normals.shape[0]
    blk_size = 64
    nblk = (nb_ + blk_size - 1) // blk_size
    for blk in range(nblk):
        # scratch arrays once per block of boundaries, not once per boundary
        ga = np.empty((3, 3))
        gb = np.empty((3, 3))
        r = np.empty((3, 3))
        rn = np.empty((3, ns))
        rd = np.empty((3, ns))
        na = np.empty(3)
        nbv = np.empty(3)
        la = np.empty(3)
        lb = np.empty(3)
        for k in range(blk * blk_size, min(nb_, (blk + 1) * blk_size)):
            a = grain_a[k]
            b = grain_b[k]
            if quats[a, 0] != quats[a, 0] or quats[b, 0] != quats[b, 0]:
                for c in range(2):
                    mp_in[k, c] = np.nan
                    score[k, c] = np.nan
                    resid[k, c] = np.nan
                    shen[k, c] = np.nan
                    out_sys[k, c] = -1
                    score_sys[k, c] = -1
                mp_max[k] = np.nan
                continue
            quat_to_matrix_single(quats[a], ga)
            quat_to_matrix_single(quats[b], gb)
            for i in range(3):
                for j in range(3):
                    r[i, j] = ga[i, 0] * gb[j, 0] + ga[i, 1] * gb[j, 1] + ga[i, 2] * gb[j, 2]
            for j in range(ns):
                for i in range(3):
                    rn[i, j] = r[i, 0] * normals[j, 0] + r[i, 1] * normals[j, 1] + r[i, 2] * normals[j, 2]
                    rd[i, j] = r[i, 0] * directions[j, 0] + r[i, 1] * directions[j, 1] + r[i, 2] * directions[j, 2]
            rn0, rn1, rn2 = rn[0], rn[1], rn[2]
            rd0, rd1, rd2 = rd[0], rd[1], rd[2]
            best = 0.0
            for i in range(ns):
                a0, a1, a2 = normals[i, 0], normals[i, 1], normals[i, 2]
                b0, b1, b2 = directions[i, 0], directions[i, 1], directions[i, 2]
                for j in range(ns):
                    v = abs((a0 * rn0[j] + a1 * rn1[j] + a2 * rn2[j]) * (b0 * rd0[j] + b1 * rd1[j] + b2 * rd2[j]))
                    best = max(best, v)
            mp_max[k] = best
            gbn = gb_normal[k]
            for c in range(2):
                # c = 0: A -> B (incoming system i in A, outgoing j in B); c = 1: B -> A.
                src = a if c == 0 else b
                dst = b if c == 0 else a
                i = in_sys[src]
                bm = -1.0
                bj = -1
                bs = -1.0
                bsj = -1
                if c == 0:
                    a0, a1, a2 = normals[i, 0], normals[i, 1], normals[i, 2]
                    b0, b1, b2 = directions[i, 0], directions[i, 1], directions[i, 2]
                    for j in range(ns):
                        v = abs((a0 * rn0[j] + a1 * rn1[j] + a2 * rn2[j]) * (b0 * rd0[j] + b1 * rd1[j] + b2 * rd2[j]))
                        if v > bm:
                            bm = v
                            bj = j
                        sv = v * eff[dst, j] * eff_scale
                        if sv > bs:
                            bs = sv
                            bsj = j
                    dd = b0 * rd0[bj] + b1 * rd1[bj] + b2 * rd2[bj]
                else:
                    w0, w1, w2 = rn0[i], rn1[i], rn2[i]
                    u0, u1, u2 = rd0[i], rd1[i], rd2[i]
                    for j in range(ns):
                        v = abs((normals[j, 0] * w0 + normals[j, 1] * w1 + normals[j, 2] * w2)
                                * (directions[j, 0] * u0 + directions[j, 1] * u1 + directions[j, 2] * u2))
                        if v > bm:
                            bm = v
                            bj = j
                        sv = v * eff[dst, j] * eff_scale
                        if sv > bs:
                            bs = sv
                            bsj = j
                    dd = directions[bj, 0] * u0 + directions[bj, 1] * u1 + directions[bj, 2] * u2
                mp_in[k, c] = bm
                out_sys[k, c] = bj
                score[k, c] = bs
                score_sys[k, c] = bsj
                # |b_in − b_out| with the sign of b_out that minimises it: |b|·sqrt(2 − 2|d_in·d_out|)
                x = 2.0 - 2.0 * abs(dd)
                resid[k, c] = burgers[k] * math.sqrt(x if x > 0.0 else 0.0)
                # Shen et al. (1986): lines of the slip planes in the boundary plane (sample frame)
                gs = ga if c == 0 else gb
                gd = gb if c == 0 else ga
                _rot_t(gs, normals[i], na)
                _rot_t(gd, normals[bj], nbv)
                _line_in_boundary(na, gbn, la)
                _line_in_boundary(nbv, gbn, lb)
                shen[k, c] = abs(la[0] * lb[0] + la[1] * lb[1] + la[2] * lb[2]) * abs(dd)

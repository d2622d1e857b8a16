"""numba kernels of the cyclic crystal-plasticity solver (private; see :mod:`slipnet.stress.cyclic`).

Layout follows the elastic spectral kernels: fields ``(6, N)`` in Mandel notation (component
first), per-point matrices ``(N, 6, 6)``, per-system state ``(N, n_systems)``.

Per point and increment the backward-Euler update solves, for the slip increments Δγ_α of the
*active* systems (those whose rate is not negligible), the residual of the power law

    forward row  (|Δγ_α| < k):  F_α = Δγ_α − k φ(z_α),            φ(z) = sign(z)|z|ⁿ
    inverse row  (|Δγ_α| ≥ k):  F_α = (τ_α − χ_α) − g_α ψ(Δγ_α/k),  ψ(r) = sign(r)|r|^(1/n)

with ``k = γ̇₀ Δt``, ``z_α = (τ_α − χ_α)/g_α`` and

    τ_α = τ_α^trial − Σ_β A_αβ Δγ_β,         A_αβ = P_α : C : P_β (crystal frame, per phase)
    χ_α = (χ_α^n + c Δγ_α) / (1 + d |Δγ_α|)   (Armstrong–Frederick, backward Euler)
    g_α = g_α^n + Σ_β H_αβ [h(v_β^n + |Δγ_β|) − h(v_β^n)],   h(v) = Q (1 − e^(−b v)) + θ v

(g times the reverse-sense ratio when the flow is negative: the {112} twinning asymmetry). Both
rows have the same root; the forward form is well conditioned for slow systems, the inverse
form for fast ones (the forward form alone needs about n Newton steps to bring a large
overstress down). The tangent is ``C − Bᵀ J_s⁻¹ B`` with ``B_α = C P_α`` and J_s the Jacobian
without the latent-hardening coupling, ``A + diag(…) > 0``: by the Woodbury identity it equals
``(C⁻¹ + Pᵀ diag⁻¹ P)⁻¹``, symmetric positive definite as the CG solve needs (consistent except
for the latent hardening, so the global Newton is then a close quasi-Newton).
"""

from __future__ import annotations

import math

import numba as nb
import numpy as np

from slipnet.crystal.orientation_kernels import quat_to_matrix_single
from slipnet.stress._kernels import MANDEL_PAIRS, mandel_rotation_single

# indices into the float parameter vector
K_RATE, N_EXP, C_AF, D_AF, Q_VOCE, B_VOCE, THETA, Z_FLOOR, ATOL, RTOL, MAX_STEP = range(11)
N_PARAMS = 11


@nb.njit(cache=True, parallel=True)
def rotations(quats, out):
    """Mandel rotation ``Q`` (sample → crystal, ``ε_c = Q ε_s``) of every point, ``(N, 6, 6)``."""
    n = quats.shape[0]
    for p in nb.prange(n):
        g = np.empty((3, 3))
        quat_to_matrix_single(quats[p], g)
        mandel_rotation_single(g, MANDEL_PAIRS, out[p])


@nb.njit(cache=True, inline="always")
def _harden(v, q, b, theta):
    return q * (1.0 - math.exp(-b * v)) + theta * v


@nb.njit(cache=True, inline="always")
def _harden_slope(v, q, b, theta):
    return q * b * math.exp(-b * v) + theta


@nb.njit(cache=True)
def solve_small(a, rhs, n, m):
    """Solve ``a[:n, :n] X = rhs[:n, :m]`` in place (Gaussian elimination, partial pivoting).

    ``a`` is destroyed; returns False if a pivot vanishes.
    """
    for col in range(n):
        piv = col
        big = abs(a[col, col])
        for r in range(col + 1, n):
            if abs(a[r, col]) > big:
                big = abs(a[r, col])
                piv = r
        if not big > 0.0:
            return False
        if piv != col:
            for c in range(n):
                t = a[col, c]
                a[col, c] = a[piv, c]
                a[piv, c] = t
            for c in range(m):
                t = rhs[col, c]
                rhs[col, c] = rhs[piv, c]
                rhs[piv, c] = t
        inv = 1.0 / a[col, col]
        for r in range(col + 1, n):
            f = a[r, col] * inv
            if f != 0.0:
                for c in range(col, n):
                    a[r, c] -= f * a[col, c]
                for c in range(m):
                    rhs[r, c] -= f * rhs[col, c]
    for col in range(n - 1, -1, -1):
        inv = 1.0 / a[col, col]
        for c in range(m):
            s = rhs[col, c]
            for k in range(col + 1, n):
                s -= a[col, k] * rhs[k, c]
            rhs[col, c] = s * inv
    return True


@nb.njit(cache=True)
def _evaluate(tau_tr, x_n, g_n, v_n, amat, hmat, prm, dg, idx, na, tau, x, g, dh, hp, sgn, full):
    """τ, χ, g for the current Δγ of the ``na`` active systems ``idx`` (of every system if ``full``)."""
    c = prm[C_AF]
    d = prm[D_AF]
    for j in range(na):
        b = idx[j]
        v0 = v_n[b]
        a = abs(dg[b])
        dh[j] = _harden(v0 + a, prm[Q_VOCE], prm[B_VOCE], prm[THETA]) - _harden(v0, prm[Q_VOCE], prm[B_VOCE],
                                                                               prm[THETA])
        hp[j] = _harden_slope(v0 + a, prm[Q_VOCE], prm[B_VOCE], prm[THETA])
    m = tau_tr.shape[0] if full else na
    for jj in range(m):
        al = jj if full else idx[jj]
        t = tau_tr[al]
        gg = g_n[al]
        for j in range(na):
            b = idx[j]
            t -= amat[al, b] * dg[b]
            gg += hmat[al, b] * dh[j]
        tau[al] = t
        g[al] = gg
        x[al] = (x_n[al] + c * dg[al]) / (1.0 + d * abs(dg[al]))
    for j in range(na):
        b = idx[j]
        if dg[b] > 0.0:
            sgn[j] = 1.0
        elif dg[b] < 0.0:
            sgn[j] = -1.0
        else:
            sgn[j] = 1.0 if tau[b] - x[b] >= 0.0 else -1.0


@nb.njit(cache=True)
def _build(tau, x, g, rev, amat, hmat, prm, dg, idx, na, hp, sgn, f, jac, jsym):
    """Residual ``G_α = g_α ψ(Δγ_α/k) − (τ_α − χ_α)`` of the active systems and its Jacobian;
    returns the merit ``Σ (G_α / g_α)²``. ``jsym`` gets the Jacobian without the latent
    (off-diagonal) hardening terms: symmetric positive definite, used for the tangent."""
    k = prm[K_RATE]
    n = prm[N_EXP]
    c = prm[C_AF]
    d = prm[D_AF]
    merit = 0.0
    for j in range(na):
        al = idx[j]
        a = abs(dg[al])
        s = sgn[j]
        rv = rev[al] if s < 0.0 else 1.0
        geff = g[al] * rv
        r = a / k
        psi = r ** (1.0 / n)
        f[j] = s * geff * psi - (tau[al] - x[al])
        merit += (f[j] / geff) ** 2
        xp = (c - d * x[al] * s) / (1.0 + d * a)
        for jb in range(na):
            be = idx[jb]
            jac[j, jb] = amat[al, be] + s * rv * hmat[al, be] * hp[jb] * sgn[jb] * psi
            jsym[j, jb] = amat[al, be]
        jac[j, j] += xp + geff * psi / (n * r) / k
        jsym[j, j] = jac[j, j]
    return merit


@nb.njit(cache=True)
def _potential(tau_tr, x_n, rev, amat, prm, dg, idx, na, gfix):
    """Incremental potential of the active systems with the resistances frozen at ``gfix``:
    ``−Σ Δγ τ^tr + ½ Δγ·A·Δγ + Σ g k |r|^(1+1/n)/(1+1/n) + Σ ∫χ dΔγ`` (its gradient is the residual)."""
    k = prm[K_RATE]
    n = prm[N_EXP]
    c = prm[C_AF]
    d = prm[D_AF]
    e = 1.0 + 1.0 / n
    tot = 0.0
    for j in range(na):
        al = idx[j]
        a_ = dg[al]
        s = -a_ * tau_tr[al]
        for jb in range(na):
            be = idx[jb]
            s += 0.5 * a_ * amat[al, be] * dg[be]
        geff = gfix[j] * (rev[al] if a_ < 0.0 else 1.0)
        s += geff * k * (abs(a_) / k) ** e / e
        if d > 0.0:
            sg = 1.0 if a_ >= 0.0 else -1.0
            s += (c / d) * abs(a_) + (x_n[al] * sg - c / d) * math.log1p(d * abs(a_)) / d
        else:
            s += x_n[al] * a_ + 0.5 * c * a_ * a_
        tot += s
    return tot


@nb.njit(cache=True)
def _start(al, tau, x, g, rev, amat, prm):
    """Initial slip increment of a system that becomes active: the smaller of the explicit
    (forward Euler) estimate and the single-system rate-independent return, signed."""
    ov = tau[al] - x[al]
    geff = g[al] * (rev[al] if ov < 0.0 else 1.0)
    az = abs(ov) / geff
    n = prm[N_EXP]
    k = prm[K_RATE]
    lz = n * math.log(max(az, 1e-300))
    est = k * math.exp(min(lz, 600.0))
    if az > 1.0:
        est = min(est, (abs(ov) - geff) / (amat[al, al] + prm[C_AF]))
    est = max(est, 1e-300)
    return est if ov >= 0.0 else -est


@nb.njit(cache=True)
def point_return(tau_tr, x_n, g_n, v_n, rev, amat, hmat, prm, max_it, dg, idx, tau, x, g, dh, hp, sgn, f, jac,
                 jsym, jwork, rhs, dtrial, gfix, f0):
    """Backward-Euler slip increments of one point (in place in ``dg``), active-set Newton.

    The residual rows are the stationarity conditions of the (strictly convex, without latent
    hardening) incremental potential: Newton steps with a backtracking line search on
    ``Σ (G_α/g_α)²``; a system whose increment would change sign is restarted on its new side
    or dropped when its rate became negligible. Returns ``(na, iterations)`` with the active
    systems in ``idx[:na]``; iterations = −1 when not converged. On return ``jsym`` holds the
    symmetric part of the Jacobian at the solution (for the tangent).
    """
    ns = tau_tr.shape[0]
    zf = prm[Z_FLOOR]
    tol = prm[RTOL]
    na = 0
    for al in range(ns):
        if dg[al] != 0.0:
            idx[na] = al
            na += 1
    total = 0
    restart = False
    for _pass in range(2 * ns + 2):
        _evaluate(tau_tr, x_n, g_n, v_n, amat, hmat, prm, dg, idx, na, tau, x, g, dh, hp, sgn, True)
        added = 0
        for al in range(ns):
            if dg[al] != 0.0:
                continue
            ov = tau[al] - x[al]
            geff = g[al] * (rev[al] if ov < 0.0 else 1.0)
            if abs(ov) > zf * geff:
                dtrial[added] = _start(al, tau, x, g, rev, amat, prm)
                hp[added] = al  # scratch: index of the new system
                added += 1
        for j in range(added):
            al = int(hp[j])
            dg[al] = dtrial[j] / added
            idx[na] = al
            na += 1
        if added == 0 and _pass > 0 and not restart:
            break
        if na == 0:
            return 0, total
        converged = False
        restart = False
        _evaluate(tau_tr, x_n, g_n, v_n, amat, hmat, prm, dg, idx, na, tau, x, g, dh, hp, sgn, False)
        merit = _build(tau, x, g, rev, amat, hmat, prm, dg, idx, na, hp, sgn, f, jac, jsym)
        for _it in range(max_it):
            total += 1
            if merit <= tol * tol:
                converged = True
                break
            for j in range(na):
                for jb in range(na):
                    jwork[j, jb] = jac[j, jb]
                rhs[j, 0] = -f[j]
            if not solve_small(jwork, rhs, na, 1):
                return na, -1
            # a system whose increment would change sign: drop it or restart it on its new side
            for j in range(na):
                al = idx[j]
                if (dg[al] + rhs[j, 0]) * dg[al] <= 0.0:
                    ov = tau[al] - x[al]
                    geff = g[al] * (rev[al] if ov < 0.0 else 1.0)
                    if abs(ov) <= zf * geff or ov * dg[al] > 0.0:
                        rhs[j, 0] = -0.9 * dg[al]
                    else:
                        rhs[j, 0] = _start(al, tau, x, g, rev, amat, prm) - dg[al]
            for j in range(na):
                dtrial[j] = dg[idx[j]]
                gfix[j] = g[idx[j]]
                f0[j] = f[j]
            # a full Newton step that cuts the residual four-fold is taken at once; otherwise backtrack
            # on the incremental potential (convex with frozen resistances): unlike the residual
            # norm it does not let opposite slips drift along the null space of A
            for j in range(na):
                dg[idx[j]] = dtrial[j] + rhs[j, 0]
            _evaluate(tau_tr, x_n, g_n, v_n, amat, hmat, prm, dg, idx, na, tau, x, g, dh, hp, sgn, False)
            m_new = _build(tau, x, g, rev, amat, hmat, prm, dg, idx, na, hp, sgn, f, jac, jsym)
            ok = m_new <= 0.25 * merit
            if not ok:
                for j in range(na):
                    dg[idx[j]] = dtrial[j]
                p0 = _potential(tau_tr, x_n, rev, amat, prm, dg, idx, na, gfix)
                slope = 0.0
                for j in range(na):
                    slope += f0[j] * rhs[j, 0]
                lam = 1.0
                for _ls in range(40):
                    for j in range(na):
                        dg[idx[j]] = dtrial[j] + lam * rhs[j, 0]
                    p1 = _potential(tau_tr, x_n, rev, amat, prm, dg, idx, na, gfix)
                    if p1 <= p0 + 1e-4 * lam * min(slope, 0.0):
                        ok = True
                        break
                    lam *= 0.5
                _evaluate(tau_tr, x_n, g_n, v_n, amat, hmat, prm, dg, idx, na, tau, x, g, dh, hp, sgn, False)
                m_new = _build(tau, x, g, rev, amat, hmat, prm, dg, idx, na, hp, sgn, f, jac, jsym)
            if not ok:
                if m_new <= 1e4 * tol * tol:
                    converged = True  # stalled in round-off close to the solution
                    break
                return na, -1
            merit = m_new
            # drop systems driven to a negligible rate
            m = 0
            for j in range(na):
                al = idx[j]
                ov = tau[al] - x[al]
                geff = g[al] * (rev[al] if ov < 0.0 else 1.0)
                if abs(dg[al]) < prm[ATOL] and (abs(ov) <= zf * geff or ov * dg[al] < 0.0):
                    dg[al] = 0.0
                    restart = True
                else:
                    idx[m] = al
                    m += 1
            na = m
            if restart:
                break
        if restart:
            continue
        if not converged:
            return na, -1
    return na, total


@nb.njit(cache=True, parallel=True)
def return_map(eps, ep, qrot, cs, pidx, cc, cp, amat, hmat, rev, x_n, g_n, v_n, dg, prm, max_it, sig, tan, info,
               nblocks):
    """Stress, consistent tangent (sample frame) and slip increments at every point for strain ``eps``.

    ``pidx[p] < 0``: elastic point (compliant phase, or a phase without slip systems here).
    ``info[p]``: local Newton iterations, −1 where the local Newton failed (the point then gets
    its elastic response; the caller cuts the increment back).
    """
    n = eps.shape[1]
    ns = cp.shape[1]
    size = (n + nblocks - 1) // nblocks
    for blk in nb.prange(nblocks):
        d6 = np.empty(6)
        ec = np.empty(6)
        tau_tr = np.empty(ns)
        idx = np.empty(ns, np.int64)
        tau = np.empty(ns)
        x = np.empty(ns)
        g = np.empty(ns)
        dh = np.empty(ns)
        hp = np.empty(ns)
        sgn = np.empty(ns)
        f = np.empty(ns)
        jac = np.empty((ns, ns))
        jsym = np.empty((ns, ns))
        jwork = np.empty((ns, ns))
        rhs = np.empty((ns, 6))
        dvec = np.empty(ns)
        gfix = np.empty(ns)
        f0 = np.empty(ns)
        ctc = np.empty((6, 6))
        tmp = np.empty((6, 6))
        sc = np.empty(6)
        zf = prm[Z_FLOOR]
        for p in range(blk * size, min(n, (blk + 1) * size)):
            for a in range(6):
                d6[a] = eps[a, p] - ep[a, p]
            for a in range(6):
                s = 0.0
                for b in range(6):
                    s += cs[p, a, b] * d6[b]
                sig[a, p] = s
            ph = pidx[p]
            elastic = ph < 0
            if not elastic:
                for a in range(6):
                    s = 0.0
                    for b in range(6):
                        s += qrot[p, a, b] * d6[b]
                    ec[a] = s
                elastic = True
                for al in range(ns):
                    t = 0.0
                    for a in range(6):
                        t += cp[ph, al, a] * ec[a]
                    tau_tr[al] = t
                    if dg[p, al] != 0.0:
                        elastic = False
                    else:
                        ov = t - x_n[p, al]
                        geff = g_n[p, al] * (rev[al] if ov < 0.0 else 1.0)
                        if abs(ov) > zf * geff:
                            elastic = False
            if elastic:
                for a in range(6):
                    for b in range(6):
                        tan[p, a, b] = cs[p, a, b]
                if ph >= 0:
                    for al in range(ns):
                        dg[p, al] = 0.0
                info[p] = 0
                continue
            na, its = point_return(tau_tr, x_n[p], g_n[p], v_n[p], rev, amat[ph], hmat, prm, max_it, dg[p], idx,
                                   tau, x, g, dh, hp, sgn, f, jac, jsym, jwork, rhs, dvec, gfix, f0)
            if its < 0:
                info[p] = -1
                for al in range(ns):
                    dg[p, al] = 0.0
                for a in range(6):
                    for b in range(6):
                        tan[p, a, b] = cs[p, a, b]
                continue
            info[p] = its
            # stress: σ_s = σ_trial − Qᵀ Σ Δγ_α C P_α
            for a in range(6):
                s = 0.0
                for j in range(na):
                    al = idx[j]
                    s += dg[p, al] * cp[ph, al, a]
                sc[a] = s
            for b in range(6):
                s = 0.0
                for a in range(6):
                    s += qrot[p, a, b] * sc[a]
                sig[b, p] -= s
            if na == 0:
                for a in range(6):
                    for b in range(6):
                        tan[p, a, b] = cs[p, a, b]
                continue
            # tangent: C − Bᵀ J⁻¹ B (crystal frame), symmetrised, rotated to the sample frame
            for j in range(na):
                al = idx[j]
                for jb in range(na):
                    jwork[j, jb] = jsym[j, jb]
                for a in range(6):
                    rhs[j, a] = cp[ph, al, a]
            if not solve_small(jwork, rhs, na, 6):
                info[p] = -1
                continue
            for a in range(6):
                for b in range(6):
                    s = cc[ph, a, b]
                    for j in range(na):
                        s -= cp[ph, idx[j], a] * rhs[j, b]
                    ctc[a, b] = s
            for a in range(6):
                for b in range(a + 1, 6):
                    m = 0.5 * (ctc[a, b] + ctc[b, a])
                    ctc[a, b] = m
                    ctc[b, a] = m
            for a in range(6):
                for b in range(6):
                    s = 0.0
                    for k in range(6):
                        s += ctc[a, k] * qrot[p, k, b]
                    tmp[a, b] = s
            for a in range(6):
                for b in range(6):
                    s = 0.0
                    for k in range(6):
                        s += qrot[p, k, a] * tmp[k, b]
                    tan[p, a, b] = s


@nb.njit(cache=True, parallel=True)
def commit(dg, sig, qrot, pidx, schmid, plane_nn, tau0, hmat, prm, ep, gam, v, x, g, gmin, gmax, snmax, track,
           nblocks, blkmax):
    """Accept an increment: plastic strain, slip, accumulated slip, backstress, resistance.

    With ``track`` also the running extremes of the signed slip and the largest normal stress
    on each system's plane (``plane_nn`` = Mandel ``n ⊗ n``, crystal frame). ``blkmax[b]`` gets
    the largest |Δγ| of block b.
    """
    n = sig.shape[1]
    ns = schmid.shape[0]
    c = prm[C_AF]
    d = prm[D_AF]
    size = (n + nblocks - 1) // nblocks
    for blk in nb.prange(nblocks):
        ec = np.empty(6)
        sc = np.empty(6)
        hv = np.empty(ns)
        big = 0.0
        for p in range(blk * size, min(n, (blk + 1) * size)):
            if pidx[p] < 0:
                continue
            any_slip = False
            for al in range(ns):
                if dg[p, al] != 0.0:
                    any_slip = True
                    break
            if any_slip:
                for a in range(6):
                    ec[a] = 0.0
                for al in range(ns):
                    a_ = dg[p, al]
                    if a_ == 0.0:
                        continue
                    big = max(big, abs(a_))
                    x[p, al] = (x[p, al] + c * a_) / (1.0 + d * abs(a_))
                    v[p, al] += abs(a_)
                    gam[p, al] += a_
                    for a in range(6):
                        ec[a] += a_ * schmid[al, a]
                for b in range(6):
                    s = 0.0
                    for a in range(6):
                        s += qrot[p, a, b] * ec[a]
                    ep[b, p] += s
                for be in range(ns):
                    hv[be] = _harden(v[p, be], prm[Q_VOCE], prm[B_VOCE], prm[THETA])
                for al in range(ns):
                    s = tau0[p, al]
                    for be in range(ns):
                        s += hmat[al, be] * hv[be]
                    g[p, al] = s
            if track:
                for a in range(6):
                    s = 0.0
                    for b in range(6):
                        s += qrot[p, a, b] * sig[b, p]
                    sc[a] = s
                for al in range(ns):
                    gm = gam[p, al]
                    if gm < gmin[p, al]:
                        gmin[p, al] = gm
                    if gm > gmax[p, al]:
                        gmax[p, al] = gm
                    s = 0.0
                    for a in range(6):
                        s += plane_nn[al, a] * sc[a]
                    if s > snmax[p, al]:
                        snmax[p, al] = s
        blkmax[blk] = big


@nb.njit(cache=True, parallel=True)
def axial_component(field, axis6, out):
    """``out[p] = axis6 · field[:, p]`` (e.g. the load-axis component of a strain field)."""
    n = field.shape[1]
    for p in nb.prange(n):
        s = 0.0
        for a in range(6):
            s += axis6[a] * field[a, p]
        out[p] = s


# ---------------------------------------------------------------------------- boundary layer and bands
@nb.njit(cache=True, parallel=True)
def boundary_resistance(labels, xs, ys, solid, gn, gd, width, strength, ri, rj, out, partner):
    """Resistance increase ``strength · (1 − max_β m′(α, β))`` within ``width`` of another grain.

    For every solid point of grain A the nearest solid point of another grain B within a
    window of ``ri`` rows and ``rj`` columns is found; the point is in the boundary layer when
    that distance is at most ``width`` (plus half a step, the boundary lying between the two
    points: the caller adds it). ``gn``/``gd`` (G, ns, 3) are the grains' sample-frame slip plane
    normals and directions; m′ = |(n_A·n_B)(d_A·d_B)| (Luster & Morris 1995). ``partner`` gets B
    (−1 outside the layer).
    """
    ny, nx = labels.shape
    ns = gn.shape[1]
    w2 = width * width
    for i in nb.prange(ny):
        for j in range(nx):
            partner[i, j] = -1
            for al in range(ns):
                out[i, j, al] = 0.0
            a = labels[i, j]
            if a < 0 or not solid[i, j]:
                continue
            best = math.inf
            bg = -1
            for ii in range(max(0, i - ri), min(ny, i + ri + 1)):
                for jj in range(max(0, j - rj), min(nx, j + rj + 1)):
                    b = labels[ii, jj]
                    if b < 0 or b == a or not solid[ii, jj]:
                        continue
                    dx = xs[ii, jj] - xs[i, j]
                    dy = ys[ii, jj] - ys[i, j]
                    d2 = dx * dx + dy * dy
                    if d2 < best:
                        best = d2
                        bg = b
            if bg < 0 or best > w2:
                continue
            partner[i, j] = bg
            for al in range(ns):
                mb = 0.0
                for be in range(ns):
                    cn = gn[a, al, 0] * gn[bg, be, 0] + gn[a, al, 1] * gn[bg, be, 1] + gn[a, al, 2] * gn[bg, be, 2]
                    cd = gd[a, al, 0] * gd[bg, be, 0] + gd[a, al, 1] * gd[bg, be, 1] + gd[a, al, 2] * gd[bg, be, 2]
                    m = abs(cn * cd)
                    if m > mb:
                        mb = m
                out[i, j, al] = strength * (1.0 - mb)


@nb.njit(cache=True)
def band_extents(labels, xs, ys, valid, inplane, smin, smax):
    """Smallest and largest across-trace coordinate ``s = p · m`` per grain and plane.

    ``inplane`` (G, n_planes, 2): unit in-plane normal of each plane's trace (NaN: no trace).
    """
    n = labels.shape[0]
    npl = inplane.shape[1]
    for p in range(n):
        g = labels[p]
        if g < 0 or not valid[p]:
            continue
        for q in range(npl):
            mx = inplane[g, q, 0]
            if mx != mx:
                continue
            s = xs[p] * mx + ys[p] * inplane[g, q, 1]
            if s < smin[g, q]:
                smin[g, q] = s
            if s > smax[g, q]:
                smax[g, q] = s


@nb.njit(cache=True)
def band_sums(labels, xs, ys, valid, inplane, smin, offsets, width, sys_plane, sys_slot, fip, srange, count, sx, sy,
              sum_fip, sum_range):
    """Per band (grain, plane, strip of ``width`` across the trace): point count, centroid sums and,
    per system on that plane (``sys_slot``), the sums of FIP and slip range."""
    n = labels.shape[0]
    npl = inplane.shape[1]
    ns = sys_plane.shape[0]
    for p in range(n):
        g = labels[p]
        if g < 0 or not valid[p]:
            continue
        for q in range(npl):
            mx = inplane[g, q, 0]
            if mx != mx:
                continue
            s = xs[p] * mx + ys[p] * inplane[g, q, 1]
            b = offsets[g * npl + q] + int((s - smin[g, q]) / width)
            count[b] += 1
            sx[b] += xs[p]
            sy[b] += ys[p]
            for al in range(ns):
                if sys_plane[al] == q:
                    k = sys_slot[al]
                    sum_fip[b, k] += fip[p, al]
                    sum_range[b, k] += srange[p, al]

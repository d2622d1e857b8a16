"""numba kernels of the spectral stress solver (private; see :mod:`slipnet.stress`).

Tensors are stored in Mandel notation: a symmetric 3 × 3 tensor T becomes the 6-vector
``(T11, T22, T33, √2·T23, √2·T13, √2·T12)``, so the Frobenius product T:U is the plain dot product
of the 6-vectors and a fourth-order stiffness with minor symmetries becomes a symmetric 6 × 6
matrix. Fields are laid out as ``(6, N)`` (component first) so each component is one contiguous
array for the FFTs; stiffnesses as ``(N, 6, 6)`` so one point's matrix is contiguous.

Kernels whose points are independent are :func:`slipnet.sized_kernels.sized_kernel` (serial on the
grids of a first look, threaded on large ones, the same numbers); the three that sum over the
points (``direction_stiffness``, ``dot``, ``cg_update``) stay ``parallel=True`` at every size, since
a serial sum would add in another order than the threaded one.
"""

from __future__ import annotations

import math

import numba as nb
import numpy as np

from slipnet.crystal.orientation_kernels import quat_to_matrix_single
from slipnet.sized_kernels import sized_kernel

SQRT2 = math.sqrt(2.0)
INV_SQRT2 = 1.0 / math.sqrt(2.0)

#: Index pairs (i, j) of the six Mandel components.
MANDEL_PAIRS = np.array([[0, 0], [1, 1], [2, 2], [1, 2], [0, 2], [0, 1]], dtype=np.int64)


@nb.njit(cache=True, inline="always")
def mandel_rotation_single(g, pairs, out):
    """6 × 6 matrix Q with ``mandel(g T gᵀ) = Q · mandel(T)`` (orthogonal since g is)."""
    for a in range(6):
        i = pairs[a, 0]
        j = pairs[a, 1]
        ca = 1.0 if i == j else SQRT2
        for b in range(6):
            k = pairs[b, 0]
            m = pairs[b, 1]
            cb = 1.0 if k == m else SQRT2
            out[a, b] = 0.5 * ca * cb * (g[i, k] * g[j, m] + g[i, m] * g[j, k])


@sized_kernel()
def stiffness_field(quats, phase_index, crystal_c, soft_c, pairs, out):
    """Per-point sample-frame stiffness ``Qᵀ C_crystal Q`` (Mandel, GPa or any unit).

    ``phase_index[p] < 0`` selects the compliant isotropic stiffness ``soft_c`` (unindexed points,
    notch). With ``v_crystal = g v_sample``, a sample strain maps to the crystal frame as
    ``ε_c = g ε_s gᵀ`` (``Q`` above) and the stress back as ``σ_s = gᵀ σ_c g`` (``Qᵀ``).
    """
    n = quats.shape[0]
    for p in nb.prange(n):
        ph = phase_index[p]
        if ph < 0:
            for a in range(6):
                for b in range(6):
                    out[p, a, b] = soft_c[a, b]
            continue
        g = np.empty((3, 3))
        q = np.empty((6, 6))
        tmp = np.empty((6, 6))
        quat_to_matrix_single(quats[p], g)
        mandel_rotation_single(g, pairs, q)
        c = crystal_c[ph]
        for a in range(6):
            for b in range(6):
                s = 0.0
                for k in range(6):
                    s += c[a, k] * q[k, b]
                tmp[a, b] = s
        for a in range(6):
            for b in range(6):
                s = 0.0
                for k in range(6):
                    s += q[k, a] * tmp[k, b]
                out[p, a, b] = s


@sized_kernel(rows=lambda c, eps, out: eps.shape[1])
def apply_stiffness(c, eps, out):
    """``out[:, p] = C[p] · eps[:, p]`` for every point p (fields ``(6, N)``)."""
    n = eps.shape[1]
    for p in nb.prange(n):
        e0 = eps[0, p]
        e1 = eps[1, p]
        e2 = eps[2, p]
        e3 = eps[3, p]
        e4 = eps[4, p]
        e5 = eps[5, p]
        for a in range(6):
            out[a, p] = (c[p, a, 0] * e0 + c[p, a, 1] * e1 + c[p, a, 2] * e2
                         + c[p, a, 3] * e3 + c[p, a, 4] * e4 + c[p, a, 5] * e5)


@nb.njit(cache=True, parallel=True)
def direction_stiffness(c, p, r, beta, out):
    """CG direction and its stress in one pass: ``p = r + β p``, ``out = C p``; returns ``p · C p``.

    Since ``p`` is compatible and the projection G is orthogonal, ``p · G(C p) = p · C p``: the
    curvature CG needs comes out of this loop, saving a pass over the fields.
    """
    n = p.shape[1]
    s = 0.0
    for q in nb.prange(n):
        e0 = r[0, q] + beta * p[0, q]
        e1 = r[1, q] + beta * p[1, q]
        e2 = r[2, q] + beta * p[2, q]
        e3 = r[3, q] + beta * p[3, q]
        e4 = r[4, q] + beta * p[4, q]
        e5 = r[5, q] + beta * p[5, q]
        p[0, q] = e0
        p[1, q] = e1
        p[2, q] = e2
        p[3, q] = e3
        p[4, q] = e4
        p[5, q] = e5
        t = 0.0
        for a in range(6):
            v = (c[q, a, 0] * e0 + c[q, a, 1] * e1 + c[q, a, 2] * e2
                 + c[q, a, 3] * e3 + c[q, a, 4] * e4 + c[q, a, 5] * e5)
            out[a, q] = v
            t += p[a, q] * v
        s += t
    return s


@sized_kernel(rows=lambda c, eps, eig, out: eps.shape[1])
def apply_stiffness_eigen(c, eps, eig, out):
    """``out[:, p] = C[p] · (eps[:, p] − eig[:, p])`` (stress with an eigenstrain)."""
    n = eps.shape[1]
    for p in nb.prange(n):
        for a in range(6):
            s = 0.0
            for b in range(6):
                s += c[p, a, b] * (eps[b, p] - eig[b, p])
            out[a, p] = s


@sized_kernel(rows=lambda spec, kvec, kind: spec.shape[1] * spec.shape[2])
def project(spec, kvec, kind):
    """Project a spectrum of symmetric tensors onto compatible strains, in place.

    ``spec`` is ``(6, ny, nxh)`` complex (Mandel components). At each frequency the compatible
    strains are ``sym(n ⊗ a)`` for the unit (possibly complex, for finite-difference schemes)
    wave direction ``n = (n1, n2, 0)`` of the 2-D grid; the orthogonal projection of τ is
    ``sym(n ⊗ a)`` with ``a = 2 τ n̄ − n̄ (n · τ n̄)``. ``kind`` 0: that projection; 1: identity
    (the zero frequency, which carries the macroscopic strain); 2: zero (no compatible strain).
    """
    ny = spec.shape[1]
    nxh = spec.shape[2]
    for i in nb.prange(ny):
        for j in range(nxh):
            kd = kind[i, j]
            if kd == 1:
                continue
            if kd == 2:
                for a in range(6):
                    spec[a, i, j] = 0.0
                continue
            n1 = kvec[0, i, j]
            n2 = kvec[1, i, j]
            c1 = n1.conjugate()
            c2 = n2.conjugate()
            t11 = spec[0, i, j]
            t22 = spec[1, i, j]
            t23 = spec[3, i, j] * INV_SQRT2
            t13 = spec[4, i, j] * INV_SQRT2
            t12 = spec[5, i, j] * INV_SQRT2
            v1 = t11 * c1 + t12 * c2
            v2 = t12 * c1 + t22 * c2
            v3 = t13 * c1 + t23 * c2
            s = n1 * v1 + n2 * v2
            a1 = 2.0 * v1 - c1 * s
            a2 = 2.0 * v2 - c2 * s
            a3 = 2.0 * v3
            spec[0, i, j] = n1 * a1
            spec[1, i, j] = n2 * a2
            spec[2, i, j] = 0.0
            spec[3, i, j] = SQRT2 * 0.5 * n2 * a3
            spec[4, i, j] = SQRT2 * 0.5 * n1 * a3
            spec[5, i, j] = SQRT2 * 0.5 * (n1 * a2 + a1 * n2)


@nb.njit(cache=True, parallel=True)
def dot(a, b):
    """Sum of ``a * b`` over a ``(6, N)`` field pair."""
    n = a.shape[1]
    s = 0.0
    for p in nb.prange(n):
        t = 0.0
        for k in range(6):
            t += a[k, p] * b[k, p]
        s += t
    return s


@nb.njit(cache=True, parallel=True)
def cg_update(x, r, p, ap, alpha):
    """``x += α p``, ``r −= α Ap``; returns the new ``r · r``."""
    n = x.shape[1]
    s = 0.0
    for q in nb.prange(n):
        t = 0.0
        for k in range(6):
            x[k, q] += alpha * p[k, q]
            rk = r[k, q] - alpha * ap[k, q]
            r[k, q] = rk
            t += rk * rk
        s += t
    return s


@sized_kernel(rows=lambda quats, soft, sig, *rest: sig.shape[1])
def slip_rates(quats, soft, sig, schmid_c, crss, reverse, rate0, exponent, out_rate, out_eps_rate):
    """Power-law slip rates and the plastic strain rate they give, per point.

    ``sig`` (6, N) Mandel sample-frame stress; ``schmid_c`` (S, 6) Mandel crystal-frame Schmid
    tensors ``sym(d ⊗ n)``; ``crss`` (N, S), times ``reverse[s]`` for negative τ (BCC twinning /
    anti-twinning asymmetry). ``γ̇ = γ̇₀ |τ/τc|ⁿ sign τ`` with ``τ = σ_c : P``;
    ``out_eps_rate`` (6, N) = ``Qᵀ Σ γ̇ P`` in the sample frame. Soft (unindexed) points do not slip.
    """
    n = sig.shape[1]
    ns = schmid_c.shape[0]
    pairs = MANDEL_PAIRS
    for p in nb.prange(n):
        if soft[p]:
            for s in range(ns):
                out_rate[p, s] = 0.0
            for a in range(6):
                out_eps_rate[a, p] = 0.0
            continue
        g = np.empty((3, 3))
        q = np.empty((6, 6))
        quat_to_matrix_single(quats[p], g)
        mandel_rotation_single(g, pairs, q)
        sc = np.zeros(6)
        for a in range(6):
            t = 0.0
            for b in range(6):
                t += q[a, b] * sig[b, p]
            sc[a] = t
        ec = np.zeros(6)
        for s in range(ns):
            tau = 0.0
            for a in range(6):
                tau += sc[a] * schmid_c[s, a]
            x = tau / crss[p, s] if tau >= 0.0 else -tau / (crss[p, s] * reverse[s])
            rate = rate0 * x**exponent
            if tau < 0.0:
                rate = -rate
            out_rate[p, s] = rate
            for a in range(6):
                ec[a] += rate * schmid_c[s, a]
        for b in range(6):
            t = 0.0
            for a in range(6):
                t += q[a, b] * ec[a]
            out_eps_rate[b, p] = t

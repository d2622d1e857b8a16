"""Numba kernels for orientation maths, shared by every step.

The array wrappers live in :mod:`slipnet.crystal.orientation`.

Each operation has a ``*_single`` kernel for one item and a row kernel looping over ``(n, k)``
arrays with ``prange``: serial below :data:`slipnet.sized_kernels.PARALLEL_ROWS` rows, threaded from
there (:func:`slipnet.sized_kernels.sized_kernel`; the rows are independent, so both give the same
numbers). Quaternions are ``(w, x, y, z)``.
"""

from __future__ import annotations

import math

import numba as nb
import numpy as np

from slipnet.sized_kernels import sized_kernel

SQRT2_INV = 1.0 / math.sqrt(2.0)


def _cubic_operators() -> np.ndarray:
    """The 24 proper rotations of the cubic point group 432 as unit quaternions, w >= 0."""
    s = math.sqrt(0.5)
    ops = [
        (1, 0, 0, 0),
        # 180 deg about <100>
        (0, 1, 0, 0), (0, 0, 1, 0), (0, 0, 0, 1),
        # 90 deg about <100>
        (s, s, 0, 0), (s, -s, 0, 0), (s, 0, s, 0), (s, 0, -s, 0), (s, 0, 0, s), (s, 0, 0, -s),
        # 120 deg about <111>
        (0.5, 0.5, 0.5, 0.5), (0.5, -0.5, -0.5, -0.5), (0.5, 0.5, -0.5, 0.5),
        (0.5, -0.5, 0.5, -0.5), (0.5, -0.5, 0.5, 0.5), (0.5, 0.5, -0.5, -0.5),
        (0.5, -0.5, -0.5, 0.5), (0.5, 0.5, 0.5, -0.5),
        # 180 deg about <110>
        (0, s, s, 0), (0, -s, s, 0), (0, 0, s, s), (0, 0, -s, s), (0, s, 0, s), (0, -s, 0, s),
    ]
    return np.array(ops, dtype=np.float64)


CUBIC_OPERATORS = _cubic_operators()


@nb.njit(cache=True, inline="always")
def quat_multiply_single(a, b, out):
    out[0] = a[0] * b[0] - a[1] * b[1] - a[2] * b[2] - a[3] * b[3]
    out[1] = a[0] * b[1] + a[1] * b[0] + a[2] * b[3] - a[3] * b[2]
    out[2] = a[0] * b[2] - a[1] * b[3] + a[2] * b[0] + a[3] * b[1]
    out[3] = a[0] * b[3] + a[1] * b[2] - a[2] * b[1] + a[3] * b[0]


@sized_kernel()
def quat_multiply_rows(a, b, out):
    for i in nb.prange(a.shape[0]):
        quat_multiply_single(a[i], b[i], out[i])


@nb.njit(cache=True, inline="always")
def euler_to_quat_single(e, out):
    # Bunge (z-x-z) passive convention, sample -> crystal, as orix's eu2qu.
    sigma = 0.5 * (e[0] + e[2])
    delta = 0.5 * (e[0] - e[2])
    c = math.cos(0.5 * e[1])
    s = math.sin(0.5 * e[1])
    w = c * math.cos(sigma)
    x = -s * math.cos(delta)
    y = -s * math.sin(delta)
    z = -c * math.sin(sigma)
    if w < 0.0:
        w, x, y, z = -w, -x, -y, -z
    out[0] = w
    out[1] = x
    out[2] = y
    out[3] = z


@sized_kernel()
def euler_to_quat_rows(e, out):
    for i in nb.prange(e.shape[0]):
        euler_to_quat_single(e[i], out[i])


@nb.njit(cache=True, inline="always")
def quat_to_euler_single(q, out):
    # Inverse of euler_to_quat_single (Rowenhorst et al. 2015, qu2eu with P = +1 sign pattern).
    q0, q1, q2, q3 = q[0], q[1], q[2], q[3]
    q03 = q0 * q0 + q3 * q3
    q12 = q1 * q1 + q2 * q2
    chi = math.sqrt(q03 * q12)
    if chi < 1e-14:
        if q12 < 1e-14:
            phi1 = math.atan2(-2.0 * q0 * q3, q0 * q0 - q3 * q3)
            big_phi = 0.0
        else:
            phi1 = math.atan2(2.0 * q1 * q2, q1 * q1 - q2 * q2)
            big_phi = math.pi
        phi2 = 0.0
    else:
        phi1 = math.atan2((q1 * q3 - q0 * q2) / chi, (-q0 * q1 - q2 * q3) / chi)
        big_phi = math.atan2(2.0 * chi, q03 - q12)
        phi2 = math.atan2((q0 * q2 + q1 * q3) / chi, (q2 * q3 - q0 * q1) / chi)
    two_pi = 2.0 * math.pi
    phi1 = phi1 % two_pi
    phi2 = phi2 % two_pi
    out[0] = phi1
    out[1] = big_phi
    out[2] = phi2


@sized_kernel()
def quat_to_euler_rows(q, out):
    for i in nb.prange(q.shape[0]):
        quat_to_euler_single(q[i], out[i])


@nb.njit(cache=True, inline="always")
def quat_to_matrix_single(q, out):
    # Matrix of the rotation v' = q v q*, so that quat_rotate and matmul agree.
    w, x, y, z = q[0], q[1], q[2], q[3]
    out[0, 0] = 1.0 - 2.0 * (y * y + z * z)
    out[0, 1] = 2.0 * (x * y - w * z)
    out[0, 2] = 2.0 * (x * z + w * y)
    out[1, 0] = 2.0 * (x * y + w * z)
    out[1, 1] = 1.0 - 2.0 * (x * x + z * z)
    out[1, 2] = 2.0 * (y * z - w * x)
    out[2, 0] = 2.0 * (x * z - w * y)
    out[2, 1] = 2.0 * (y * z + w * x)
    out[2, 2] = 1.0 - 2.0 * (x * x + y * y)


@sized_kernel()
def quat_to_matrix_rows(q, out):
    for i in nb.prange(q.shape[0]):
        quat_to_matrix_single(q[i], out[i])


@nb.njit(cache=True, inline="always")
def matrix_to_quat_single(m, out):
    tr = m[0, 0] + m[1, 1] + m[2, 2]
    if tr > 0.0:
        s = 2.0 * math.sqrt(tr + 1.0)
        w = 0.25 * s
        x = (m[2, 1] - m[1, 2]) / s
        y = (m[0, 2] - m[2, 0]) / s
        z = (m[1, 0] - m[0, 1]) / s
    elif m[0, 0] > m[1, 1] and m[0, 0] > m[2, 2]:
        s = 2.0 * math.sqrt(1.0 + m[0, 0] - m[1, 1] - m[2, 2])
        w = (m[2, 1] - m[1, 2]) / s
        x = 0.25 * s
        y = (m[0, 1] + m[1, 0]) / s
        z = (m[0, 2] + m[2, 0]) / s
    elif m[1, 1] > m[2, 2]:
        s = 2.0 * math.sqrt(1.0 + m[1, 1] - m[0, 0] - m[2, 2])
        w = (m[0, 2] - m[2, 0]) / s
        x = (m[0, 1] + m[1, 0]) / s
        y = 0.25 * s
        z = (m[1, 2] + m[2, 1]) / s
    else:
        s = 2.0 * math.sqrt(1.0 + m[2, 2] - m[0, 0] - m[1, 1])
        w = (m[1, 0] - m[0, 1]) / s
        x = (m[0, 2] + m[2, 0]) / s
        y = (m[1, 2] + m[2, 1]) / s
        z = 0.25 * s
    n = math.sqrt(w * w + x * x + y * y + z * z)
    if w < 0.0:
        n = -n
    out[0] = w / n
    out[1] = x / n
    out[2] = y / n
    out[3] = z / n


@sized_kernel()
def matrix_to_quat_rows(m, out):
    for i in nb.prange(m.shape[0]):
        matrix_to_quat_single(m[i], out[i])


@nb.njit(cache=True, inline="always")
def quat_rotate_single(q, v, out):
    # v' = q v q*, written out (t = 2 q_vec x v; v' = v + w t + q_vec x t).
    w, x, y, z = q[0], q[1], q[2], q[3]
    tx = 2.0 * (y * v[2] - z * v[1])
    ty = 2.0 * (z * v[0] - x * v[2])
    tz = 2.0 * (x * v[1] - y * v[0])
    out[0] = v[0] + w * tx + (y * tz - z * ty)
    out[1] = v[1] + w * ty + (z * tx - x * tz)
    out[2] = v[2] + w * tz + (x * ty - y * tx)


@sized_kernel()
def quat_rotate_rows(q, v, out):
    for i in nb.prange(q.shape[0]):
        quat_rotate_single(q[i], v[i], out[i])


@nb.njit(cache=True, inline="always")
def sort4_desc(a, b, c, d):
    if a < b:
        a, b = b, a
    if c < d:
        c, d = d, c
    if a < c:
        a, c = c, a
    if b < d:
        b, d = d, b
    if b < c:
        b, c = c, b
    return a, b, c, d


@nb.njit(cache=True, inline="always")
def cubic_max_w_single(q):
    """Largest |w| over the 24 cubic equivalents of ``q`` (closed form)."""
    a, b, c, d = sort4_desc(abs(q[0]), abs(q[1]), abs(q[2]), abs(q[3]))
    w = a
    w2 = (a + b) * SQRT2_INV
    if w2 > w:
        w = w2
    w3 = 0.5 * (a + b + c + d)
    if w3 > w:
        w = w3
    return w


@nb.njit(cache=True, inline="always")
def closed_form_angle(a, b, c, d):
    """Smallest rotation angle (rad) among the cubic equivalents of a quaternion whose absolute
    components, sorted, are a >= b >= c >= d.

    The scalar part of the best equivalent is max(a, (a+b)/sqrt 2, (a+b+c+d)/2); the norm of its
    vector part is written without the cancellation of sqrt(1 - w^2), and the angle is
    2 atan(|v| / w), accurate to rounding even for near-identical orientations. That scalar part
    is at least a >= 1/2 for a unit quaternion, so the quotient is safe; ``atan`` of it costs
    about 40 % less than ``atan2`` here (the hot path of every disorientation), with the same
    result to an ulp. A zero quaternion keeps ``atan2``'s answer (0).
    """
    w = a
    v2 = b * b + c * c + d * d
    w2 = (a + b) * SQRT2_INV
    if w2 > w:
        w = w2
        v2 = 0.5 * (a - b) * (a - b) + c * c + d * d
    w3 = 0.5 * (a + b + c + d)
    if w3 > w:
        w = w3
        v2 = 0.25 * ((a - b) ** 2 + (a - c) ** 2 + (a - d) ** 2 + (b - c) ** 2 + (b - d) ** 2 + (c - d) ** 2)
    if w > 0.0:
        return 2.0 * math.atan(math.sqrt(v2) / w)
    return 2.0 * math.atan2(math.sqrt(v2), w)


@sized_kernel()
def disorientation_angle_rows(qa, qb, out):
    # dq = qb * conj(qa); only |dq| components enter, so the product is written out inline.
    for i in nb.prange(qa.shape[0]):
        a0, a1, a2, a3 = qa[i, 0], -qa[i, 1], -qa[i, 2], -qa[i, 3]
        b0, b1, b2, b3 = qb[i, 0], qb[i, 1], qb[i, 2], qb[i, 3]
        w = b0 * a0 - b1 * a1 - b2 * a2 - b3 * a3
        x = b0 * a1 + b1 * a0 + b2 * a3 - b3 * a2
        y = b0 * a2 - b1 * a3 + b2 * a0 + b3 * a1
        z = b0 * a3 + b1 * a2 - b2 * a1 + b3 * a0
        a, b, c, d = sort4_desc(abs(w), abs(x), abs(y), abs(z))
        out[i] = closed_form_angle(a, b, c, d)


@nb.njit(cache=True, inline="always")
def nearest_cubic_single(w, x, y, z, r0, r1, r2, r3, ops):
    """Cubic equivalent ``S q`` of ``q = (w, x, y, z)`` closest to ``r``, sign matched to it.

    Returns ``(w', x', y', z', |q'·r|)``. With ``r`` the identity this is the equivalent of
    smallest rotation angle (largest scalar part), the one loop every reduction here shares.
    """
    best = -1.0
    bw, bx, by, bz = w, x, y, z
    for k in range(ops.shape[0]):
        s0, s1, s2, s3 = ops[k, 0], ops[k, 1], ops[k, 2], ops[k, 3]
        tw = s0 * w - s1 * x - s2 * y - s3 * z
        tx = s0 * x + s1 * w + s2 * z - s3 * y
        ty = s0 * y - s1 * z + s2 * w + s3 * x
        tz = s0 * z + s1 * y - s2 * x + s3 * w
        dot = tw * r0 + tx * r1 + ty * r2 + tz * r3
        if abs(dot) > best:
            best = abs(dot)
            sg = 1.0 if dot >= 0 else -1.0
            bw, bx, by, bz = sg * tw, sg * tx, sg * ty, sg * tz
    return bw, bx, by, bz, best


@sized_kernel()
def disorientation_rows(qa, qb, ops, angle, axis):
    """Disorientation angle (rad) and axis (crystal frame, sorted h >= k >= l >= 0)."""
    for i in nb.prange(qa.shape[0]):
        a0, a1, a2, a3 = qa[i, 0], -qa[i, 1], -qa[i, 2], -qa[i, 3]
        b0, b1, b2, b3 = qb[i, 0], qb[i, 1], qb[i, 2], qb[i, 3]
        w = b0 * a0 - b1 * a1 - b2 * a2 - b3 * a3
        x = b0 * a1 + b1 * a0 + b2 * a3 - b3 * a2
        y = b0 * a2 - b1 * a3 + b2 * a0 + b3 * a1
        z = b0 * a3 + b1 * a2 - b2 * a1 + b3 * a0
        bw, bx, by, bz, _ = nearest_cubic_single(w, x, y, z, 1.0, 0.0, 0.0, 0.0, ops)
        vn = math.sqrt(bx * bx + by * by + bz * bz)
        angle[i] = 2.0 * math.atan2(vn, bw)
        if vn < 1e-12:
            axis[i, 0], axis[i, 1], axis[i, 2] = 0.0, 0.0, 1.0
        else:
            h, k2, l3, _ = sort4_desc(abs(bx) / vn, abs(by) / vn, abs(bz) / vn, -1.0)
            axis[i, 0], axis[i, 1], axis[i, 2] = h, k2, l3


@sized_kernel()
def reduce_cubic_rows(q, ops, out):
    """Cubic equivalent ``S q`` with the largest scalar part, w >= 0."""
    for i in nb.prange(q.shape[0]):
        out[i, 0], out[i, 1], out[i, 2], out[i, 3], _ = nearest_cubic_single(
            q[i, 0], q[i, 1], q[i, 2], q[i, 3], 1.0, 0.0, 0.0, 0.0, ops)


@sized_kernel()
def nearest_cubic_rows(q, ref, ops, out):
    """Cubic equivalent ``S q`` closest to ``ref`` (one reference per row), sign matched to it."""
    for i in nb.prange(q.shape[0]):
        out[i, 0], out[i, 1], out[i, 2], out[i, 3], _ = nearest_cubic_single(
            q[i, 0], q[i, 1], q[i, 2], q[i, 3], ref[i, 0], ref[i, 1], ref[i, 2], ref[i, 3], ops)


# ----------------------------------------------------------------------------- disorientation
@nb.njit(cache=True, inline="always")
def cubic_angle(w, x, y, z):
    """Smallest rotation angle (rad) among the 24 cubic equivalents of a unit quaternion.

    The closed form of :mod:`slipnet._orientation_kernels` (one implementation for the whole
    package, exact near zero angle).
    """
    a, b, c, d = sort4_desc(abs(w), abs(x), abs(y), abs(z))
    return closed_form_angle(a, b, c, d)


@sized_kernel()
def csl_deviation(dq, angle_deg, equivalents, csl_angle_deg, limit_deg, out):
    """Smallest angle (degrees) between each misorientation and each CSL rotation.

    ``dq`` (n, 4) misorientations with disorientation angles ``angle_deg`` (n,); ``equivalents``
    (n_csl, 24, 4) holds ``C·S`` for the 24 cubic operators S, so that the closed-form reduction
    (left symmetry) of ``dq · (C·S)⁻¹`` over all 24 right factors covers every symmetric
    equivalent ``S1 · dq · S2`` of the misorientation. Since the deviation is at least
    ``|angle − θ_C|`` (triangle inequality), pairs farther apart than ``limit_deg`` are skipped
    and get ``inf``.
    """
    to_deg = 180.0 / math.pi
    for i in nb.prange(dq.shape[0]):
        b0, b1, b2, b3 = dq[i, 0], dq[i, 1], dq[i, 2], dq[i, 3]
        for c in range(equivalents.shape[0]):
            if abs(angle_deg[i] - csl_angle_deg[c]) > limit_deg[c]:
                out[i, c] = np.inf
                continue
            # the cubic angle falls as the largest scalar part of the equivalents rises, so the
            # 24 candidates are compared by that scalar part (no square root, no arctangent) and
            # only the winner's angle is computed, with the accurate closed form
            best_w = -1.0
            bw, bx, by, bz = 1.0, 0.0, 0.0, 0.0
            for s in range(equivalents.shape[1]):
                a0 = equivalents[c, s, 0]
                a1 = -equivalents[c, s, 1]
                a2 = -equivalents[c, s, 2]
                a3 = -equivalents[c, s, 3]
                w = b0 * a0 - b1 * a1 - b2 * a2 - b3 * a3
                x = b0 * a1 + b1 * a0 + b2 * a3 - b3 * a2
                y = b0 * a2 - b1 * a3 + b2 * a0 + b3 * a1
                z = b0 * a3 + b1 * a2 - b2 * a1 + b3 * a0
                wm = cubic_max_w_single((w, x, y, z))
                if wm > best_w:
                    best_w = wm
                    bw, bx, by, bz = w, x, y, z
            out[i, c] = cubic_angle(bw, bx, by, bz) * to_deg

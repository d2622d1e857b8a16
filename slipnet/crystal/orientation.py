"""Orientation maths for cubic crystals: Euler angles, quaternions, matrices, disorientation.

Conventions (shared by all of slipnet)
--------------------------------------
* Quaternions are ``(w, x, y, z)`` on the last axis, unit norm, ``w >= 0``.
* An orientation ``g`` takes sample-frame vectors into the crystal frame,
  ``v_crystal = g · v_sample``, exactly as orix's ``Orientation`` (so ``g * Vector3d`` in orix
  equals :func:`quat_rotate` here).
* Bunge Euler angles ``(φ1, Φ, φ2)`` in degrees at the interface (``degrees=False`` for radians).
* Misorientation from A to B is ``Δq = q_B · q_A⁻¹``; the disorientation is its symmetric
  equivalent of smallest angle under the 24 proper cubic rotations (point group 432).

Every function accepts arrays of any leading shape ``(..., k)``; the arithmetic runs in numba
kernels compiled on first use and cached on disk.
"""

from __future__ import annotations

import numpy as np

from slipnet.crystal import orientation_kernels as _k
from slipnet.errors import ParameterError

__all__ = [
    "CUBIC_OPERATORS",
    "disorientation",
    "disorientation_angle",
    "euler_from_quat",
    "matrix_from_quat",
    "misorientation",
    "nearest_equivalent",
    "quat_conjugate",
    "quat_from_axis_angle",
    "quat_from_euler",
    "quat_from_matrix",
    "quat_multiply",
    "quat_rotate",
    "random_quats",
    "reduce_cubic",
]

#: The 24 proper rotations of the cubic point group 432 as quaternions, shape (24, 4).
CUBIC_OPERATORS: np.ndarray = _k.CUBIC_OPERATORS.copy()
CUBIC_OPERATORS.setflags(write=False)


def _as_rows(a, k: int, name: str) -> tuple[np.ndarray, tuple[int, ...]]:
    arr = np.asarray(a, dtype=np.float64)
    if arr.ndim == 0 or arr.shape[-1] != k:
        raise ParameterError(f"{name} should have {k} components on its last axis; got shape {arr.shape}")
    lead = arr.shape[:-1]
    return np.ascontiguousarray(arr.reshape(-1, k)), lead


def _check_unit(q: np.ndarray, name: str) -> None:
    if q.size == 0:
        return
    n = np.einsum("ij,ij->i", q, q)
    bad = ~(np.abs(n - 1.0) < 1e-6)
    if bad.any():
        i = int(np.flatnonzero(bad)[0])
        raise ParameterError(
            f"{name} should hold unit quaternions (w, x, y, z); row {i} has squared norm {n[i]!r}. "
            "Normalise it or mask unindexed points instead of passing NaN."
        )


def quat_from_euler(euler, degrees: bool = True) -> np.ndarray:
    """Unit quaternions from Bunge Euler angles.

    Parameters
    ----------
    euler : (..., 3) array_like
        ``(φ1, Φ, φ2)`` Bunge angles, in degrees unless ``degrees=False``.
    degrees
        Whether the angles are in degrees.

    Returns
    -------
    (..., 4) ndarray
        Quaternions ``(w, x, y, z)`` with ``w >= 0``, sample → crystal.

    Examples
    --------
    >>> quat_from_euler([0.0, 0.0, 90.0]).round(4) + 0.0  # as orix's Orientation.from_euler
    array([ 0.7071,  0.    ,  0.    , -0.7071])
    """
    e, lead = _as_rows(euler, 3, "euler")
    if not np.all(np.isfinite(e)):
        raise ParameterError("euler angles should be finite numbers; got NaN or infinity")
    if degrees:
        e = np.deg2rad(e)
    out = np.empty((e.shape[0], 4))
    _k.euler_to_quat_rows(e, out)
    return out.reshape(*lead, 4)


def euler_from_quat(quats, degrees: bool = True) -> np.ndarray:
    """Bunge Euler angles ``(φ1, Φ, φ2)`` from unit quaternions.

    Parameters
    ----------
    quats : (..., 4) array_like
        Unit quaternions ``(w, x, y, z)``.
    degrees
        Return degrees (default) or radians.

    Returns
    -------
    (..., 3) ndarray
        φ1 and φ2 in [0, 360°), Φ in [0, 180°].
    """
    q, lead = _as_rows(quats, 4, "quats")
    _check_unit(q, "quats")
    q = np.where(q[:, :1] < 0, -q, q)
    out = np.empty((q.shape[0], 3))
    _k.quat_to_euler_rows(q, out)
    if degrees:
        out = np.rad2deg(out)
    return out.reshape(*lead, 3)


def matrix_from_quat(quats) -> np.ndarray:
    """Rotation matrices ``g`` with ``v_crystal = g @ v_sample``.

    Parameters
    ----------
    quats : (..., 4) array_like
        Unit quaternions.

    Returns
    -------
    (..., 3, 3) ndarray
    """
    q, lead = _as_rows(quats, 4, "quats")
    out = np.empty((q.shape[0], 3, 3))
    _k.quat_to_matrix_rows(q, out)
    return out.reshape(*lead, 3, 3)


def quat_from_matrix(matrices) -> np.ndarray:
    """Unit quaternions (w >= 0) from proper rotation matrices of shape ``(..., 3, 3)``."""
    m = np.asarray(matrices, dtype=np.float64)
    if m.ndim < 2 or m.shape[-2:] != (3, 3):
        raise ParameterError(f"matrices should have shape (..., 3, 3); got {m.shape}")
    lead = m.shape[:-2]
    m = np.ascontiguousarray(m.reshape(-1, 3, 3))
    if m.shape[0]:
        det = np.linalg.det(m)
        ortho = np.abs(np.einsum("nij,nkj->nik", m, m) - np.eye(3)).max(axis=(1, 2))
        if not (np.all(np.abs(det - 1.0) < 1e-6) and np.all(ortho < 1e-6)):
            raise ParameterError("matrices should be proper rotations (orthonormal, det = +1)")
    out = np.empty((m.shape[0], 4))
    _k.matrix_to_quat_rows(m, out)
    return out.reshape(*lead, 4)


def quat_multiply(a, b) -> np.ndarray:
    """Hamilton product ``a · b`` (apply ``b`` first, then ``a``); broadcasts, keeps the sign."""
    a = np.asarray(a, dtype=np.float64)
    b = np.asarray(b, dtype=np.float64)
    a, b = np.broadcast_arrays(a, b)
    ar, lead = _as_rows(a, 4, "a")
    br, _ = _as_rows(b, 4, "b")
    out = np.empty_like(ar)
    _k.quat_multiply_rows(ar, br, out)
    return out.reshape(*lead, 4)


def quat_conjugate(quats) -> np.ndarray:
    """Inverse of unit quaternions: ``(w, -x, -y, -z)``."""
    q = np.array(quats, dtype=np.float64)
    q[..., 1:] *= -1.0
    return q


def quat_rotate(quats, vectors) -> np.ndarray:
    """Rotate vectors: ``v' = q v q*``; with an orientation this maps sample → crystal.

    Parameters
    ----------
    quats : (..., 4) array_like
    vectors : (..., 3) array_like
        Broadcast against ``quats``' leading axes.

    Returns
    -------
    (..., 3) ndarray
    """
    q = np.asarray(quats, dtype=np.float64)
    v = np.asarray(vectors, dtype=np.float64)
    lead = np.broadcast_shapes(q.shape[:-1], v.shape[:-1])
    qr, _ = _as_rows(np.broadcast_to(q, (*lead, 4)), 4, "quats")
    vr, _ = _as_rows(np.broadcast_to(v, (*lead, 3)), 3, "vectors")
    out = np.empty_like(vr)
    _k.quat_rotate_rows(qr, vr, out)
    return out.reshape(*lead, 3)


def quat_from_axis_angle(axis, angle, degrees: bool = True) -> np.ndarray:
    """Quaternions for a rotation by ``angle`` about ``axis`` (right-handed).

    Parameters
    ----------
    axis : (..., 3) array_like
        Rotation axes (need not be unit length; zero is refused).
    angle : (...) array_like
        Rotation angles, degrees unless ``degrees=False``.
    """
    ax = np.asarray(axis, dtype=np.float64)
    ang = np.asarray(angle, dtype=np.float64)
    if ax.shape[-1:] != (3,):
        raise ParameterError(f"axis should have 3 components on its last axis; got shape {ax.shape}")
    norm = np.linalg.norm(ax, axis=-1, keepdims=True)
    if np.any(norm < 1e-12):
        raise ParameterError("axis should be a non-zero vector")
    if degrees:
        ang = np.deg2rad(ang)
    half = 0.5 * ang[..., None]
    vec = np.sin(half) * ax / norm
    q = np.concatenate([np.broadcast_to(np.cos(half), (*vec.shape[:-1], 1)), vec], axis=-1)
    return np.where(q[..., :1] < 0, -q, q)


def misorientation(qa, qb) -> np.ndarray:
    """Misorientation ``Δq = q_B · q_A⁻¹`` (crystal A frame → crystal B frame), no symmetry."""
    return quat_multiply(qb, quat_conjugate(qa))


def _pair_rows(qa, qb) -> tuple[np.ndarray, np.ndarray, tuple[int, ...]]:
    a = np.asarray(qa, dtype=np.float64)
    b = np.asarray(qb, dtype=np.float64)
    if a.shape[-1:] != (4,) or b.shape[-1:] != (4,):
        raise ParameterError(
            f"qa and qb should have 4 components on their last axis; got {a.shape} and {b.shape}"
        )
    lead = np.broadcast_shapes(a.shape[:-1], b.shape[:-1])
    if a.shape[:-1] != lead:
        a = np.broadcast_to(a, (*lead, 4))
    if b.shape[:-1] != lead:
        b = np.broadcast_to(b, (*lead, 4))
    ar = np.ascontiguousarray(a.reshape(-1, 4))
    br = np.ascontiguousarray(b.reshape(-1, 4))
    return ar, br, lead


def disorientation_angle(qa, qb) -> np.ndarray:
    """Cubic disorientation angle between two sets of orientations, in degrees.

    Uses the closed form of the largest scalar part among the 24 cubic equivalents: with the
    absolute components of ``Δq`` sorted ``a ≥ b ≥ c ≥ d``, ``w = max(a, (a+b)/√2,
    (a+b+c+d)/2)`` and the angle is ``2 arccos w``.

    Parameters
    ----------
    qa, qb : (..., 4) array_like
        Unit quaternions; leading axes broadcast.

    Returns
    -------
    ndarray
        Angles in degrees, in [0, 62.8°], shape of the broadcast leading axes.

    Examples
    --------
    >>> a = quat_from_euler([0, 0, 0]); b = quat_from_euler([90, 0, 0])
    >>> round(float(disorientation_angle(a, b)), 9)  # 90° about z is a cubic symmetry
    0.0
    """
    ar, br, lead = _pair_rows(qa, qb)
    out = np.empty(ar.shape[0])
    _k.disorientation_angle_rows(ar, br, out)
    return np.rad2deg(out, out=out).reshape(lead)


def disorientation(qa, qb) -> tuple[np.ndarray, np.ndarray]:
    """Cubic disorientation angle (degrees) and axis.

    Returns
    -------
    angle : ndarray
        Degrees, shape of the broadcast leading axes.
    axis : (..., 3) ndarray
        Unit rotation axis in the crystal frame, reduced to the standard triangle
        ``h ≥ k ≥ l ≥ 0`` (valid for cubic–cubic pairs, where exchanging the crystals is a
        symmetry). ``[0, 0, 1]`` where the angle is zero.
    """
    ar, br, lead = _pair_rows(qa, qb)
    angle = np.empty(ar.shape[0])
    axis = np.empty((ar.shape[0], 3))
    _k.disorientation_rows(ar, br, _k.CUBIC_OPERATORS, angle, axis)
    return np.rad2deg(angle).reshape(lead), axis.reshape(*lead, 3)


def reduce_cubic(quats) -> np.ndarray:
    """Cubic-equivalent orientation with the smallest rotation angle (fundamental zone), w >= 0."""
    q, lead = _as_rows(quats, 4, "quats")
    out = np.empty_like(q)
    _k.reduce_cubic_rows(q, _k.CUBIC_OPERATORS, out)
    return out.reshape(*lead, 4)


def nearest_equivalent(quats, reference) -> np.ndarray:
    """Cubic equivalent of each orientation nearest to ``reference`` (broadcast), same sign.

    Used before averaging orientations (Markley et al. 2007 need one symmetric copy each).
    """
    q = np.asarray(quats, dtype=np.float64)
    r = np.broadcast_to(np.asarray(reference, dtype=np.float64), q.shape)
    qr, lead = _as_rows(q, 4, "quats")
    rr, _ = _as_rows(r, 4, "reference")
    out = np.empty_like(qr)
    _k.nearest_cubic_rows(qr, rr, _k.CUBIC_OPERATORS, out)
    return out.reshape(*lead, 4)


def random_quats(n: int, seed: int | np.random.Generator | None = None) -> np.ndarray:
    """``n`` orientations drawn uniformly from SO(3) (Shoemake 1992), shape (n, 4), w >= 0."""
    rng = np.random.default_rng(seed)
    u1, u2, u3 = rng.random((3, int(n)))
    s1, s2 = np.sqrt(1.0 - u1), np.sqrt(u1)
    q = np.stack(
        [s1 * np.sin(2 * np.pi * u2), s1 * np.cos(2 * np.pi * u2),
         s2 * np.sin(2 * np.pi * u3), s2 * np.cos(2 * np.pi * u3)], axis=-1,
    )
    return np.where(q[:, :1] < 0, -q, q)

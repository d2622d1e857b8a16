"""Orientation helpers of the synthetic specimen generator: unit vectors, the rotation between two
directions, and fibre-textured orientations.
"""

from __future__ import annotations

import math

import numpy as np

from slipnet.crystal.orientation import quat_from_axis_angle, quat_multiply
from slipnet.errors import ParameterError


def _rotation_between(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Quaternion of the smallest rotation taking unit vector ``a`` onto unit vector ``b``."""
    axis = np.cross(a, b)
    s = np.linalg.norm(axis)
    c = float(np.dot(a, b))
    if s < 1e-12:
        if c > 0:
            return np.array([1.0, 0.0, 0.0, 0.0])
        # antiparallel: half turn about any axis perpendicular to a
        perp = np.cross(a, [1.0, 0.0, 0.0] if abs(a[0]) < 0.9 else [0.0, 1.0, 0.0])
        return quat_from_axis_angle(perp / np.linalg.norm(perp), 180.0)
    return quat_from_axis_angle(axis / s, math.degrees(math.atan2(s, c)))


def _unit(v, name: str, size: int = 3) -> np.ndarray:
    arr = np.asarray(v, dtype=np.float64).reshape(-1)
    n = np.linalg.norm(arr) if arr.size == size and np.all(np.isfinite(arr)) else 0.0
    if n == 0.0:
        raise ParameterError(f"{name} should be a non-zero finite {size}-vector; got {v!r}")
    return arr / n


def _fibre_quats(n: int, axis: np.ndarray, hkl: np.ndarray, spread_deg: float,
                 rng: np.random.Generator) -> np.ndarray:
    """Orientations with crystal direction ``hkl`` near sample direction ``axis``.

    Uniform rotation about the fibre axis; the fibre direction is then tilted by a rotation about
    an axis perpendicular to it, with 2-D Gaussian components of σ = spread/√2 each, so that the
    RMS tilt angle is ``spread_deg`` (Rayleigh-distributed tilt).
    """
    q0 = _rotation_between(axis, hkl)  # g0 · axis = hkl
    psi = rng.uniform(0.0, 360.0, n)
    spin = quat_from_axis_angle(np.broadcast_to(axis, (n, 3)), psi)
    e1 = np.cross(axis, [1.0, 0.0, 0.0] if abs(axis[0]) < 0.9 else [0.0, 1.0, 0.0])
    e1 /= np.linalg.norm(e1)
    e2 = np.cross(axis, e1)
    t = rng.normal(0.0, math.radians(spread_deg) / math.sqrt(2.0), size=(n, 2))
    rotvec = t[:, :1] * e1 + t[:, 1:] * e2
    ang = np.linalg.norm(rotvec, axis=1)
    safe = np.where(ang > 0, ang, 1.0)
    tilt = np.concatenate([np.cos(0.5 * ang)[:, None], np.sin(0.5 * ang)[:, None] * rotvec / safe[:, None]], axis=1)
    # g = g0 · spin · tilt: the tilt moves the sample direction that maps onto hkl away from the axis
    q = quat_multiply(q0, quat_multiply(spin, tilt))
    return np.where(q[:, :1] < 0, -q, q)

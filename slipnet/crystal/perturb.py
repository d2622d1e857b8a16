"""The one seeded perturbation of a Monte Carlo sample: orientations, load axis and a point, in one order.

The forecast's and the notch planner's Monte Carlo both draw through :func:`perturb_sample`, so one
seed gives one stream of numbers whichever step uses it. Every draw is made even when its spread
is zero (the value is then returned unchanged), so switching one source of noise off does not
shift the draws of the others.
"""

from __future__ import annotations

import math

import numba as nb
import numpy as np

from slipnet.errors import ParameterError

__all__ = ["perturb_axis", "perturb_orientations", "perturb_sample"]


def _qmul(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Hamilton product of (n, 4) rows in plain numpy (cheaper than a threaded kernel for grains)."""
    aw, ax, ay, az = a.T
    bw, bx, by, bz = b.T
    return np.stack([aw * bw - ax * bx - ay * by - az * bz, aw * bx + ax * bw + ay * bz - az * by,
                     aw * by - ax * bz + ay * bw + az * bx, aw * bz + ax * by - ay * bx + az * bw], axis=-1)


def perturb_orientations(quats: np.ndarray, sigma_deg: float, rng: np.random.Generator) -> np.ndarray:
    """Rotate each orientation by a normal(0, σ) angle about a uniformly random axis.

    Parameters
    ----------
    quats : (n, 4) ndarray
        Unit quaternions (w, x, y, z).
    sigma_deg
        Standard deviation of the rotation angle, degrees.
    rng
        Random generator (consumed: 4 draws per orientation, always).

    Returns
    -------
    (n, 4) ndarray
        w ≥ 0.
    """
    quats = np.asarray(quats, dtype=float)
    n = quats.shape[0]
    axes = rng.normal(size=(n, 3))
    angles = rng.normal(0.0, sigma_deg, size=n) if sigma_deg > 0 else rng.normal(size=n) * 0.0
    if sigma_deg <= 0 or n == 0:
        return quats.copy()
    out = np.empty((n, 4))
    if not _rotate(np.ascontiguousarray(quats), axes, angles, out):
        raise ParameterError("axis should be a non-zero vector")  # a normal draw of three exact zeros
    return out


@nb.njit(cache=True, nogil=True)
def _rotate(quats, axes, angles_deg, out):
    """``out[i]`` = rotation by ``angles_deg[i]`` about ``axes[i]``, times ``quats[i]``, with w ≥ 0.

    The products of :func:`slipnet.crystal.orientation.quat_from_axis_angle` and :func:`_qmul` in
    their order, per orientation (one pass instead of a dozen numpy calls on (n, 4) arrays).
    Returns False if an axis is shorter than 1e-12.
    """
    for i in range(quats.shape[0]):
        a0, a1, a2 = axes[i, 0], axes[i, 1], axes[i, 2]
        norm = math.sqrt(a0 * a0 + a1 * a1 + a2 * a2)
        if norm < 1e-12:
            return False
        half = 0.5 * (angles_deg[i] * (math.pi / 180.0))
        sh = math.sin(half)
        aw, ax, ay, az = math.cos(half), sh * a0 / norm, sh * a1 / norm, sh * a2 / norm
        if aw < 0:
            aw, ax, ay, az = -aw, -ax, -ay, -az
        bw, bx, by, bz = quats[i, 0], quats[i, 1], quats[i, 2], quats[i, 3]
        w = aw * bw - ax * bx - ay * by - az * bz
        x = aw * bx + ax * bw + ay * bz - az * by
        y = aw * by - ax * bz + ay * bw + az * bx
        z = aw * bz + ax * by - ay * bx + az * bw
        if w < 0:
            w, x, y, z = -w, -x, -y, -z
        out[i, 0], out[i, 1], out[i, 2], out[i, 3] = w, x, y, z
    return True


def perturb_axis(axis, sigma_deg: float, rng: np.random.Generator) -> np.ndarray:
    """Tilt a unit axis by a normal(0, σ) angle about a random perpendicular axis (4 draws, always).

    Returns
    -------
    (3,) ndarray
        Unit vector.
    """
    axis = np.asarray(axis, dtype=float)
    a = rng.normal(size=3)
    ang = np.radians(rng.normal(0.0, sigma_deg)) if sigma_deg > 0 else 0.0 * rng.normal()
    a = a - (a @ axis) * axis
    na = np.linalg.norm(a)
    if sigma_deg <= 0 or na < 1e-12:
        return axis.copy()
    a /= na
    out = axis * np.cos(ang) + np.cross(a, axis) * np.sin(ang)
    return out / np.linalg.norm(out)


def perturb_sample(rng: np.random.Generator, quats, orientation_deg: float, axis, axis_deg: float, point,
                   point_um: float) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """One Monte Carlo sample of the inputs, drawn in a fixed order: orientations, axis, point.

    Parameters
    ----------
    rng
        Random generator.
    quats : (n, 4) array_like
        Grain orientations and their angular spread, degrees (``orientation_deg``).
    axis : (3,) array_like
        Unit load axis and its misalignment spread, degrees (``axis_deg``).
    point : (2,) array_like
        A position (crack tip or notch root), µm, and its Gaussian spread per coordinate
        (``point_um``); the caller decides how the two offsets are applied.

    Returns
    -------
    quats, axis, offset
        Perturbed orientations, perturbed axis and the (2,) offset of the point, µm.

    Examples
    --------
    >>> rng = np.random.default_rng(0)
    >>> q, ax, d = perturb_sample(rng, np.array([[1.0, 0, 0, 0]]), 0.0, [0.0, 1.0, 0.0], 0.0, (0, 0), 0.0)
    >>> q.tolist(), ax.tolist(), d.tolist()
    ([[1.0, 0.0, 0.0, 0.0]], [0.0, 1.0, 0.0], [0.0, 0.0])
    """
    q = perturb_orientations(quats, orientation_deg, rng)
    ax = perturb_axis(axis, axis_deg, rng)
    d = rng.normal(0.0, point_um, size=2) if point_um > 0 else 0.0 * rng.normal(size=2) + 0.0
    return q, ax, d

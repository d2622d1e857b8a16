"""The one seeded perturbation of a Monte Carlo sample: orientations, load axis and a point, in one order.

The forecast's and the notch planner's Monte Carlo both draw through :func:`perturb_sample`, so one
seed gives one stream of numbers whichever step uses it. Every draw is made even when its spread
is zero (the value is then returned unchanged), so switching one source of noise off does not
shift the draws of the others.
"""

from __future__ import annotations

import numpy as np

from slipnet.crystal.orientation import quat_from_axis_angle

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
    q = _qmul(quat_from_axis_angle(axes, angles), quats)
    return np.where(q[:, :1] < 0, -q, q)


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

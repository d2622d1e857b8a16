"""numba kernels of the synthetic specimen generator (one pass over map points, parallel)."""

from __future__ import annotations

import math

import numpy as np
from numba import njit, prange


@njit(cache=True, inline="always")
def _rotvec_quat(vx: float, vy: float, vz: float) -> tuple[float, float, float, float]:
    """Quaternion of the rotation vector ``(vx, vy, vz)`` (radians): exact exponential map."""
    theta = math.sqrt(vx * vx + vy * vy + vz * vz)
    if theta < 1e-12:
        # first order, renormalised: exact to rounding for such tiny angles
        n = math.sqrt(1.0 + 0.25 * theta * theta)
        return 1.0 / n, 0.5 * vx / n, 0.5 * vy / n, 0.5 * vz / n
    s = math.sin(0.5 * theta) / theta
    return math.cos(0.5 * theta), vx * s, vy * s, vz * s


@njit(cache=True, inline="always")
def _mul(aw, ax, ay, az, bw, bx, by, bz) -> tuple[float, float, float, float]:
    """Hamilton product ``a · b``."""
    return (
        aw * bw - ax * bx - ay * by - az * bz,
        aw * bx + ax * bw + ay * bz - az * by,
        aw * by - ax * bz + ay * bw + az * bx,
        aw * bz + ax * by - ay * bx + az * bw,
    )


@njit(cache=True, parallel=True)
def compose_point_orientations(
    labels: np.ndarray,
    x: np.ndarray,
    y: np.ndarray,
    grain_q: np.ndarray,
    centre: np.ndarray,
    bend_axis: np.ndarray,
    bend_dir: np.ndarray,
    bend_rate: np.ndarray,
    noise: np.ndarray,
    out: np.ndarray,
) -> None:
    """Orientation of every point: grain orientation · smooth bend · measurement noise.

    Parameters
    ----------
    labels : (n,) int64
        Grain of each point; −1 gives a NaN quaternion.
    x, y : (n,) float64
        Point positions, µm.
    grain_q : (g, 4) float64
        Grain orientations (sample → crystal).
    centre : (g, 2) float64
        Reference point of each grain's bend, µm.
    bend_axis : (g, 3) float64
        Unit axis (sample frame) of each grain's lattice bend.
    bend_dir : (g, 2) float64
        Unit in-plane direction along which the bend angle grows.
    bend_rate : (g,) float64
        Bend angle per µm along ``bend_dir``, radians/µm.
    noise : (n, 3) float64
        Rotation vector of the measurement noise of each point, radians (sample frame).
    out : (n, 4) float64
        Result, ``w >= 0``.
    """
    n = labels.shape[0]
    for p in prange(n):
        g = labels[p]
        if g < 0:
            for k in range(4):
                out[p, k] = np.nan
            continue
        s = (x[p] - centre[g, 0]) * bend_dir[g, 0] + (y[p] - centre[g, 1]) * bend_dir[g, 1]
        t = bend_rate[g] * s
        bw, bx, by, bz = _rotvec_quat(bend_axis[g, 0] * t, bend_axis[g, 1] * t, bend_axis[g, 2] * t)
        nw, nx, ny, nz = _rotvec_quat(noise[p, 0], noise[p, 1], noise[p, 2])
        # v_crystal = g · B · N · v_sample: the sample-frame bend and noise act before the grain rotation
        tw, tx, ty, tz = _mul(bw, bx, by, bz, nw, nx, ny, nz)
        rw, rx, ry, rz = _mul(grain_q[g, 0], grain_q[g, 1], grain_q[g, 2], grain_q[g, 3], tw, tx, ty, tz)
        norm = math.sqrt(rw * rw + rx * rx + ry * ry + rz * rz)
        if rw < 0.0:
            norm = -norm
        out[p, 0] = rw / norm
        out[p, 1] = rx / norm
        out[p, 2] = ry / norm
        out[p, 3] = rz / norm

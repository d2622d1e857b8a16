"""numba kernels of the synthetic specimen generator (one pass over map points).

Both are :func:`slipnet.sized_kernels.sized_kernel`: serial on a demo coupon, threaded on large maps,
the same numbers (every point is computed on its own).
"""

from __future__ import annotations

import math

import numpy as np
from numba import njit, prange

from slipnet.sized_kernels import sized_kernel


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


@sized_kernel()
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


@sized_kernel(rows=lambda r0, r1, nx, *rest: (r1 - r0) * nx)
def power_cell_labels(
    r0: int,
    r1: int,
    nx: int,
    step: float,
    row_spacing: float,
    hex_grid: bool,
    seed_x: np.ndarray,
    seed_y: np.ndarray,
    seed_w: np.ndarray,
    w_max: float,
    lo_x: float,
    lo_y: float,
    bucket: float,
    nbx: int,
    nby: int,
    bucket_start: np.ndarray,
    bucket_seeds: np.ndarray,
    out: np.ndarray,
) -> None:
    """Power-diagram cell of every grid point of rows ``r0..r1−1``: argmin over seeds of |p − s|² − w.

    Seeds are binned in square buckets of side ``bucket`` (µm) starting at ``(lo_x, lo_y)``;
    bucket ``(bx, by)`` holds ``bucket_seeds[bucket_start[k]:bucket_start[k + 1]]`` with
    ``k = by·nbx + bx``. Buckets are searched in growing square rings around the point's bucket;
    a seed in ring ``r + 1`` or beyond lies at least ``r·bucket`` away, so its power distance is at
    least ``(r·bucket)² − w_max`` and the search stops once that exceeds the best found: exact.
    ``out`` has shape ``(r1 − r0, nx)``.
    """
    for i in prange(r0, r1):
        y = i * row_spacing
        shift = 0.5 * step if (hex_grid and (i % 2) == 1) else 0.0
        by0 = min(max(int((y - lo_y) / bucket), 0), nby - 1)
        for j in range(nx):
            x = j * step + shift
            bx0 = min(max(int((x - lo_x) / bucket), 0), nbx - 1)
            best = np.inf
            arg = -1
            r = 0
            while True:
                for by in range(by0 - r, by0 + r + 1):
                    if by < 0 or by >= nby:
                        continue
                    edge_row = by == by0 - r or by == by0 + r
                    bx = bx0 - r
                    while bx <= bx0 + r:
                        if 0 <= bx < nbx:
                            k = by * nbx + bx
                            for m in range(bucket_start[k], bucket_start[k + 1]):
                                s = bucket_seeds[m]
                                dx = x - seed_x[s]
                                dy = y - seed_y[s]
                                p = dx * dx + dy * dy - seed_w[s]
                                if p < best:
                                    best = p
                                    arg = s
                        # inner rows of the ring: only its two end buckets are new
                        if edge_row or r == 0:
                            bx += 1
                        else:
                            bx += 2 * r
                reach = r * bucket
                if arg >= 0 and reach * reach - w_max >= best:
                    break
                if r > nbx + nby:
                    break
                r += 1
            out[i - r0, j] = arg

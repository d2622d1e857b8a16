"""Numba kernels for the crack forecast: marching a ray through a label image, drawing lines.

The public code lives in :mod:`slipnet.forecast`. Positions are in µm in the map frame (x along
columns, y along rows); the grid is described by ``(hexgrid, ox, oy, step, rs)`` with ``rs`` the
row spacing, as in :class:`slipnet.maps.OrientationMap`.
"""

from __future__ import annotations

import math

import numba as nb
import numpy as np

#: Status codes returned by :func:`march_ray`.
STATUS_INSIDE = 0  # the ray reached its length without leaving the grain
STATUS_GRAIN = 1  # the ray entered another grain
STATUS_UNINDEXED = 2  # the ray met an unindexed point (label −1)
STATUS_EDGE = 3  # the ray left the map


@nb.njit(cache=True, inline="always")
def nearest_point(hexgrid, ox, oy, step, rs, ny, nx, x, y):
    """Row and column of the grid point nearest (x, y); (−1, −1) outside the grid."""
    fx = x - ox
    fy = y - oy
    i = math.floor(fy / rs + 0.5)
    if not hexgrid:
        j = math.floor(fx / step + 0.5)
    else:
        # the nearest hex point may sit on an adjacent row: compare the three candidate rows,
        # clipped into the grid like OrientationMap.index_of (nearest in-grid point at the ragged
        # border; points beyond half a step of the grid stay outside)
        x_hi = (nx - 0.5) * step if ny > 1 else (nx - 1) * step
        if fx < -0.5 * step or fx > x_hi + 0.5 * step or fy < -0.5 * rs or fy > (ny - 0.5) * rs:
            return -1, -1
        best = 1e300
        bi = i
        bj = 0
        for di in range(-1, 2):
            ii = min(max(i + di, 0), ny - 1)
            sh = 0.5 * (ii % 2)
            jj = min(max(math.floor(fx / step - sh + 0.5), 0), nx - 1)
            d = (fx - (jj + sh) * step) ** 2 + (fy - ii * rs) ** 2
            if d < best:
                best = d
                bi = ii
                bj = jj
        i = bi
        j = bj
    if i < 0 or i >= ny or j < 0 or j >= nx:
        return -1, -1
    return i, j


@nb.njit(cache=True, nogil=True)
def label_at(labels, hexgrid, ox, oy, step, rs, x, y):
    """Label at the grid point nearest (x, y); −2 outside the map (−1 is 'no grain')."""
    ny, nx = labels.shape
    i, j = nearest_point(hexgrid, ox, oy, step, rs, ny, nx, x, y)
    if i < 0:
        return -2
    return labels[i, j]


@nb.njit(cache=True, nogil=True)
def _bisect(labels, hexgrid, ox, oy, step, rs, px, py, dx, dy, grain, lo, hi, max_len):
    """Exit distance between ``lo`` (inside ``grain``) and ``hi`` (outside) to (hi − lo)/64."""
    ny, nx = labels.shape
    for _ in range(6):
        mid = 0.5 * (lo + hi)
        ii, jj = nearest_point(hexgrid, ox, oy, step, rs, ny, nx, px + mid * dx, py + mid * dy)
        if ii >= 0 and labels[ii, jj] == grain:
            lo = mid
        else:
            hi = mid
    return min(0.5 * (lo + hi), max_len)


@nb.njit(cache=True, nogil=True)
def march_ray(labels, hexgrid, ox, oy, step, rs, px, py, dx, dy, grain, ds, max_len, max_gap):
    """Walk from (px, py) along the unit vector (dx, dy) in steps ``ds`` while inside ``grain``.

    Returns
    -------
    t_end : float
        Distance (µm) to the exit point: halfway between the last sample inside ``grain`` and
        the first sample outside, or ``max_len`` if the ray never left.
    next_label : int
        Label met at the exit (−1 unindexed, −2 outside the map, ``grain`` if still inside).
    status : int
        One of the ``STATUS_*`` codes. A run of unindexed points no longer than ``max_gap`` (µm;
        0 stops at the first, ``inf`` crosses any) is walked through and the status reports what
        lies beyond it; ``t_end`` is then where the next grain (or the map edge) begins.
    """
    ny, nx = labels.shape
    n = math.ceil(max_len / ds)
    t_in = 0.0
    t_gap = -1.0  # where the current unindexed run began (−1: not in a run)
    for k in range(1, n + 1):
        t = min(k * ds, max_len)
        i, j = nearest_point(hexgrid, ox, oy, step, rs, ny, nx, px + t * dx, py + t * dy)
        lab = labels[i, j] if i >= 0 else -2
        if lab == grain:
            t_in = t
            t_gap = -1.0
            continue
        if lab == -1:
            if t_gap < 0.0:
                t_gap = t
            if t - t_gap + ds <= max_gap:
                continue
            # the run is too long: stop where it began
            return _bisect(labels, hexgrid, ox, oy, step, rs, px, py, dx, dy, grain, t_in, t_gap, max_len), -1, \
                STATUS_UNINDEXED
        if t_in < t - 1.5 * ds:
            # came through an unindexed gap: the crossing is where the new grain begins
            return t - 0.5 * ds, lab, STATUS_GRAIN if lab >= 0 else STATUS_EDGE
        t_end = _bisect(labels, hexgrid, ox, oy, step, rs, px, py, dx, dy, grain, t_in, t, max_len)
        if lab == -2:
            return t_end, -2, STATUS_EDGE
        if lab == -1:
            return t_end, -1, STATUS_UNINDEXED
        return t_end, lab, STATUS_GRAIN
    return max_len, grain, STATUS_INSIDE


@nb.njit(cache=True, nogil=True)
def chord_ends(labels, hexgrid, ox, oy, step, rs, px, py, dxs, dys, grains, ds, max_len, max_gap, t_out, lab_out):
    """Both exits of a line through each grain: ``t_out[k, 0/1]`` along ±(dx, dy), ``lab_out`` beyond.

    Used for slip bands: the band of grain ``grains[k]`` passes through ``(px[k], py[k])`` along
    its trace ``(dxs[k], dys[k])``; unindexed runs longer than ``max_gap`` stop the band.
    """
    for k in range(px.shape[0]):
        for s in range(2):
            sg = 1.0 if s == 0 else -1.0
            t, lab, _st = march_ray(labels, hexgrid, ox, oy, step, rs, px[k], py[k], sg * dxs[k], sg * dys[k],
                                    grains[k], ds, max_len, max_gap)
            t_out[k, s] = t
            lab_out[k, s] = lab


@nb.njit(cache=True, nogil=True)
def accumulate_segments(img, hexgrid, ox, oy, step, rs, x0, y0, x1, y1, weight, ds):
    """Add ``weight[k]·ds`` at every ``ds`` sample along segment ``k`` into ``img`` (line density)."""
    ny, nx = img.shape
    for k in range(x0.shape[0]):
        lx = x1[k] - x0[k]
        ly = y1[k] - y0[k]
        length = math.sqrt(lx * lx + ly * ly)
        n = max(1, math.ceil(length / ds))
        for m in range(n + 1):
            f = m / n
            i, j = nearest_point(hexgrid, ox, oy, step, rs, ny, nx, x0[k] + f * lx, y0[k] + f * ly)
            if i >= 0:
                img[i, j] += weight[k] * (length / (n + 1))


@nb.njit(cache=True, nogil=True)
def greedy_peaks(values, region, x, y, k, sep2, out):
    """The highest points of ``values`` in ``region``, each at least √sep2 from those before (µm).

    The greedy non-maximum suppression of :func:`slipnet.forecast.features.field_peaks` without its
    sort: each round takes the highest point still allowed (the first in row-major order among equal
    values, as the stable sort does), ``k`` rounds at most. Writes ``out[:n]`` = (x, y); returns n.
    All arrays are flat; ``values`` must be finite.
    """
    n = values.shape[0]
    count = 0
    for _ in range(k):
        best = -math.inf
        bi = -1
        for p in range(n):
            if not region[p]:
                continue
            v = values[p]
            if bi >= 0 and not v > best:
                continue
            ok = True
            for c in range(count):
                dx = x[p] - out[c, 0]
                dy = y[p] - out[c, 1]
                if not dx * dx + dy * dy >= sep2:
                    ok = False
                    break
            if ok:
                best = v
                bi = p
        if bi < 0:
            break
        out[count, 0] = x[bi]
        out[count, 1] = y[bi]
        count += 1
    return count


@nb.njit(cache=True, inline="always")
def _line_angle_deg(ax, ay, az, bx, by, bz):
    # atan2(|a × b|, |a · b|) in degrees, 0 for a zero line (as _geometry._line_angle)
    na = math.sqrt(ax * ax + ay * ay + az * az)
    nb_ = math.sqrt(bx * bx + by * by + bz * bz)
    if not (na > 1e-9 and nb_ > 1e-9):
        return 0.0
    dot = abs(ax * bx + ay * by + az * bz)
    cx = ay * bz - az * by
    cy = az * bx - ax * bz
    cz = ax * by - ay * bx
    return math.degrees(math.atan2(math.sqrt(cx * cx + cy * cy + cz * cz), dot))


@nb.njit(cache=True, nogil=True)
def plane_angles(n_in, n_out, trace_angle_deg, inclination_deg, twist, tilt):
    """Twist and tilt (degrees) from one incoming crack-plane normal to each row of ``n_out``.

    :func:`slipnet.forecast.crack_plane_angles` for one boundary, written out per plane: the same
    products in the same order, without the array temporaries of 3-element vectors.
    """
    th = math.radians(trace_angle_deg)
    phi = math.radians(inclination_deg)
    b0 = math.cos(th)
    b1 = math.sin(th)
    gx = math.sin(phi) * -b1 + math.cos(phi) * 0.0
    gy = math.sin(phi) * b0 + math.cos(phi) * 0.0
    gz = math.sin(phi) * 0.0 + math.cos(phi) * 1.0
    ix, iy, iz = n_in[0], n_in[1], n_in[2]
    # incoming traces on the boundary plane (n × n_gb) and on the surface (n × z)
    lix, liy, liz = iy * gz - iz * gy, iz * gx - ix * gz, ix * gy - iy * gx
    tix, tiy, tiz = iy * 1.0 - iz * 0.0, iz * 0.0 - ix * 1.0, ix * 0.0 - iy * 0.0
    for p in range(n_out.shape[0]):
        ox, oy, oz = n_out[p, 0], n_out[p, 1], n_out[p, 2]
        twist[p] = _line_angle_deg(lix, liy, liz, oy * gz - oz * gy, oz * gx - ox * gz, ox * gy - oy * gx)
        tilt[p] = _line_angle_deg(tix, tiy, tiz, oy * 1.0 - oz * 0.0, oz * 0.0 - ox * 1.0, ox * 0.0 - oy * 0.0)


@nb.njit(cache=True, nogil=True)
def map_field(lab, solid, e_block, pair_pos, lnd, x, y, tau_g, mod_g, exc_g, mp_sorted, tx, ty, d0, d1, step,
              perm, mean, scale, coef, b, fld, tau_out):
    """The map-mode field of one Monte Carlo sample over a window, features and logistic in one pass.

    Per metal point ``p`` of grain ``g``: the seven map-mode features (:data:`FEATURES` ``["map"]``
    order: τ_g, modulus ratio_g, grain excess_g, (1 − |m′|)·e^(−d), tip field, ln(1 + r/h),
    ln(1 + d_notch/h)), non-finite values taken as 0 as the feature builder does, then
    ``b + Σ_k (f[perm[k]] − mean_k)/scale_k · coef_k`` and the logistic with the logit clipped to
    ±40 (:meth:`slipnet.forecast.predictor.Model.probability`). Off the metal both outputs are 0.
    Releases the GIL, so samples run in parallel on threads.
    """
    f = np.empty(7)
    for p in range(lab.shape[0]):
        if not solid[p]:
            fld[p] = 0.0
            tau_out[p] = 0.0
            continue
        g = lab[p]
        mp = mp_sorted[pair_pos[p]] if pair_pos[p] >= 0 else 1.0
        dx = x[p] - tx
        dy = y[p] - ty
        r = math.hypot(dx, dy)
        # cos(θ/2) and sin²(θ/2) of θ = atan2(v, u) without trigonometry, in the forms that keep
        # their digits on either side of the tip (r ± u computed as v²/(r ∓ u) where it cancels)
        u = dx * d0 + dy * d1
        v = dx * d1 * -1.0 + dy * d0
        if r == 0.0:
            ch, s2 = 1.0, 0.0
        elif u >= 0.0:
            ch = math.sqrt((r + u) / (2.0 * r))
            s2 = v * v / (2.0 * r * (r + u))
        else:
            ch = abs(v) / math.sqrt(2.0 * r * (r - u))
            s2 = (r - u) / (2.0 * r)
        f[0] = tau_g[g]
        f[1] = mod_g[g]
        f[2] = exc_g[g]
        f[3] = (1.0 - mp) * e_block[p]
        f[4] = ch * math.sqrt(1.0 + 3.0 * s2) * math.sqrt(step / (r + step))
        f[5] = math.log1p(r / step)
        f[6] = lnd[p]
        z = b
        for k in range(perm.shape[0]):
            v = f[perm[k]]
            if not math.isfinite(v):
                v = 0.0
            z += (v - mean[k]) / scale[k] * coef[k]
        z = min(max(z, -40.0), 40.0)
        fld[p] = 1.0 / (1.0 + math.exp(-z))
        tau_out[p] = f[0] if math.isfinite(f[0]) else 0.0

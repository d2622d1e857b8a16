"""Band-end sites: where slip bands end on poorly transmitting boundaries, and the field they make
(private to :mod:`slipnet.forecast`; the Monte Carlo's path passes still list them, the forecast's own
sites are the peaks of the fitted field, :mod:`slipnet.forecast.localise`)."""

from __future__ import annotations

import numpy as np
import pandas as pd

from slipnet.columns import FORECAST_SITES
from slipnet.forecast import _kernels as _k
from slipnet.forecast._geometry import _Crystal, _Geometry, _Planes


def _anchor_points(geo: _Geometry, grains: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """A point inside each grain: its centroid, or the grain point nearest it if outside."""
    ax = geo.cx[grains].copy()
    ay = geo.cy[grains].copy()
    for k, g in enumerate(grains):
        if int(g) in geo.anchors:
            ax[k], ay[k] = geo.anchors[int(g)]
            continue
        if geo.label_at(ax[k], ay[k]) != g:  # non-convex grain: few, so a per-grain fallback
            ii, jj = np.nonzero(geo.labels == g)
            x = geo.ox + jj * geo.step + (0.5 * geo.step * (ii % 2) if geo.hexgrid else 0.0)
            y = geo.oy + ii * geo.rs
            m = int(np.argmin((x - ax[k]) ** 2 + (y - ay[k]) ** 2))
            ax[k], ay[k] = x[m], y[m]
        geo.anchors[int(g)] = (float(ax[k]), float(ay[k]))  # geometry only: reused by Monte Carlo
    return ax, ay


def _sites(geo: _Geometry, cry: _Crystal, planes: _Planes, grains: np.ndarray, amplitude: float,
           want_bands: bool = False, max_gap: float = 0.0):
    """Slip bands of ``grains`` and the sites where they end on poorly transmitting boundaries."""
    cols = list(FORECAST_SITES[:12])  # the band sites carry no field value or probability
    grains = np.asarray(grains, dtype=np.int64)
    if grains.size == 0:
        return pd.DataFrame({c: pd.Series(dtype=float) for c in cols}), None
    cry.ensure(grains)
    sys_ = cry.best_sys[grains]
    p = planes.plane_of[sys_]
    tr = cry.trace[grains, p]
    ok = cry.trace_ok[grains, p]
    grains, sys_, p, tr = grains[ok], sys_[ok], p[ok], tr[ok]
    ax, ay = _anchor_points(geo, grains)
    t_out = np.zeros((grains.size, 2))
    lab_out = np.zeros((grains.size, 2), np.int64)
    max_len = float(np.hypot(geo.nx * geo.step, geo.ny * geo.rs))
    _k.chord_ends(geo.labels, geo.hexgrid, geo.ox, geo.oy, geo.step, geo.rs, ax, ay,
                  np.ascontiguousarray(tr[:, 0]), np.ascontiguousarray(tr[:, 1]), grains, geo.ds, max_len,
                  max_gap, t_out, lab_out)
    band = t_out.sum(axis=1)
    tau = cry.meff[grains, sys_] * amplitude
    rows = []
    band_w = np.zeros(grains.size)
    for k in range(grains.size):
        g, s = int(grains[k]), int(sys_[k])
        for e, sg in ((0, 1.0), (1, -1.0)):
            nb_ = int(lab_out[k, e])
            if nb_ < 0 or nb_ == g:
                continue
            # transmission: best |m′| to a system of the neighbour, weighted by that system's
            # effective Schmid factor relative to the neighbour's best (a blocked band needs an
            # outgoing system that is both aligned and stressed; common practice)
            mp = cry.m_prime_row(g, s, nb_)
            trans = float(np.max(mp * cry.meff[nb_] / max(float(np.max(cry.meff[nb_])), 1e-12)))
            score = float(tau[k] * band[k] * (1.0 - trans))
            band_w[k] += score
            info = geo.edges.get((min(g, nb_), max(g, nb_)))
            rows.append({"x_um": ax[k] + sg * t_out[k, e] * tr[k, 0], "y_um": ay[k] + sg * t_out[k, e] * tr[k, 1],
                         "site_score_mpa_um": score, "grain": g, "blocking_grain": nb_,
                         "boundary_id": info[0] if info else -1, "system": s, "plane": planes.labels[int(p[k])],
                         "resolved_shear_mpa": float(tau[k]), "band_length_um": float(band[k]),
                         "transmission_score": trans})
    df = pd.DataFrame(rows, columns=cols[1:])
    df = df.sort_values("site_score_mpa_um", ascending=False, kind="stable").reset_index(drop=True)
    df.insert(0, "rank", np.arange(1, len(df) + 1))
    bands = None
    if want_bands:
        bands = (ax - t_out[:, 1] * tr[:, 0], ay - t_out[:, 1] * tr[:, 1],
                 ax + t_out[:, 0] * tr[:, 0], ay + t_out[:, 0] * tr[:, 1], band_w / np.maximum(band, 1e-9))
    return df, bands


def _field(geo: _Geometry, bands, sigma_um: float) -> np.ndarray:
    from scipy.ndimage import gaussian_filter

    img = np.zeros((geo.ny, geo.nx))
    if bands is not None and len(bands[0]):
        x0, y0, x1, y1, w = (np.ascontiguousarray(a, dtype=float) for a in bands)
        _k.accumulate_segments(img, geo.hexgrid, geo.ox, geo.oy, geo.step, geo.rs, x0, y0, x1, y1, w, geo.ds)
    img = gaussian_filter(img, sigma=(sigma_um / geo.rs, sigma_um / geo.step), mode="constant")
    top = float(img.max())
    return img / top if top > 0 else img

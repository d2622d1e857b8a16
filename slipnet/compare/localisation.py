"""Measured strain localisation: peaks, per-grain and per-boundary-band statistics, slip-band directions.

Public names are re-exported by :mod:`slipnet.compare`; import them from there.
"""

from __future__ import annotations

import math

import numpy as np
import pandas as pd
from scipy import ndimage

from slipnet._checks import check_positive
from slipnet.compare.registration import Transform, as_points, grid_geometry
from slipnet.errors import ParameterError


# ============================================================================ measured localisation
def find_strain_peaks(values, grid, *, threshold: float, min_distance_um: float,
                      transform: Transform | None = None, max_peaks: int | None = None) -> pd.DataFrame:
    """Local maxima of a strain field above a threshold, at least ``min_distance_um`` apart.

    Parameters
    ----------
    values : (ny, nx) ndarray
        Field (e.g. γ_max) on the strain grid; NaN ignored.
    grid : StrainSeries or ((ny, nx), step_um, (x0, y0))
    threshold : float
        Smallest accepted peak value (same unit as ``values``).
    min_distance_um : float
        Smallest distance between two peaks; the higher one wins.
    transform : Transform, optional
        Strain → map frame; if given, ``x_um``/``y_um`` are in the map frame.
    max_peaks : int, optional
        Keep only the highest ones.

    Returns
    -------
    DataFrame
        ``x_um``, ``y_um``, ``row``, ``col``, ``value``, sorted by decreasing value.
    """
    from scipy.spatial import cKDTree

    shape, step, origin = grid_geometry(grid)
    v = np.asarray(values, dtype=np.float64)
    if v.shape != shape:
        raise ParameterError(f"values should have the strain grid shape {shape}; got {v.shape}")
    min_d = check_positive(min_distance_um, "min_distance_um")
    r = max(math.floor(min_d / step), 1)
    yy, xx = np.mgrid[-r:r + 1, -r:r + 1]
    foot = (xx**2 + yy**2) <= r * r
    filled = np.where(np.isfinite(v), v, -np.inf)
    mx = ndimage.maximum_filter(filled, footprint=foot, mode="constant", cval=-np.inf)
    cand = np.isfinite(v) & (filled >= mx) & (v >= float(threshold))
    rows, cols = np.nonzero(cand)
    vals = v[rows, cols]
    order = np.lexsort((cols, rows, -vals))
    rows, cols, vals = rows[order], cols[order], vals[order]
    pos = np.stack([origin[0] + cols * step, origin[1] + rows * step], axis=1)
    keep = np.ones(len(vals), dtype=bool)
    if len(vals) > 1:
        # greedy suppression over the (few) candidates: plateaus and near ties give several per blob
        tree = cKDTree(pos)
        pairs = tree.query_pairs(min_d - 1e-9 * step, output_type="ndarray")
        if len(pairs):
            nbr: dict[int, list[int]] = {}
            for a, b in pairs:
                nbr.setdefault(int(min(a, b)), []).append(int(max(a, b)))
            for k in range(len(vals)):
                if keep[k]:
                    for b in nbr.get(k, ()):
                        keep[b] = False
    rows, cols, vals, pos = rows[keep], cols[keep], vals[keep], pos[keep]
    if max_peaks is not None:
        rows, cols, vals, pos = rows[:max_peaks], cols[:max_peaks], vals[:max_peaks], pos[:max_peaks]
    if transform is not None and len(pos):
        pos = transform.apply(pos)
    return pd.DataFrame({"x_um": pos[:, 0], "y_um": pos[:, 1], "row": rows, "col": cols, "value": vals})


def grain_statistics(values, labels) -> pd.DataFrame:
    """Per-grain statistics of a field over its valid points.

    Parameters
    ----------
    values : ndarray
        Field (e.g. γ_max), NaN where missing.
    labels : ndarray
        Grain id of each point, same shape; −1 for none.

    Returns
    -------
    DataFrame
        ``grain``, ``n_points``, ``mean``, ``median``, ``p90``, ``max`` (unit of ``values``).
    """
    v = np.asarray(values, dtype=np.float64).ravel()
    lab = np.asarray(labels).ravel()
    if v.shape != lab.shape:
        raise ParameterError(f"values and labels should have the same shape; got {np.shape(values)} "
                             f"and {np.shape(labels)}")
    ok = np.isfinite(v) & (lab >= 0)
    df = pd.DataFrame({"grain": lab[ok].astype(np.int64), "v": v[ok]})
    g = df.groupby("grain")["v"]
    out = pd.DataFrame({"n_points": g.size(), "mean": g.mean(), "median": g.median(),
                        "p90": g.quantile(0.9), "max": g.max()}).reset_index()
    return out


def boundary_band_statistics(values, x, y, boundary_points, boundary_ids, band_um: float) -> pd.DataFrame:
    """Statistics of a field over the points within ``band_um`` of each boundary.

    Parameters
    ----------
    values, x, y : ndarray
        Field values and their positions in µm (map frame), any matching shapes.
    boundary_points : (m, 2) ndarray
        Densely sampled boundary positions (µm), e.g. from :func:`densify_polylines`.
    boundary_ids : (m,) int ndarray
        Boundary id of each sample.
    band_um : float
        Half-width of the band. A point counts for the boundary nearest to it.

    Returns
    -------
    DataFrame
        ``boundary_id``, ``n_points``, ``mean``, ``p90``, ``max``.
    """
    from scipy.spatial import cKDTree

    band = check_positive(band_um, "band_um")
    v, xx, yy = (np.asarray(a, dtype=np.float64).ravel() for a in np.broadcast_arrays(values, x, y))
    bp = as_points(boundary_points, "boundary_points")
    bid = np.asarray(boundary_ids).ravel()
    if bid.shape[0] != bp.shape[0]:
        raise ParameterError("boundary_ids should give one id per boundary point")
    ok = np.isfinite(v)
    cols = ["boundary_id", "n_points", "mean", "p90", "max"]
    if not ok.any() or bp.shape[0] == 0:
        return pd.DataFrame(columns=cols)
    d, k = cKDTree(bp).query(np.stack([xx[ok], yy[ok]], 1), distance_upper_bound=band * (1 + 1e-12))  # band inclusive
    near = np.isfinite(d)
    df = pd.DataFrame({"boundary_id": bid[k[near]].astype(np.int64), "v": v[ok][near]})
    g = df.groupby("boundary_id")["v"]
    return pd.DataFrame({"n_points": g.size(), "mean": g.mean(), "p90": g.quantile(0.9),
                         "max": g.max()}).reset_index()[cols]


def densify_polylines(polylines: dict, spacing_um: float) -> tuple[np.ndarray, np.ndarray]:
    """Sample ``{id: [(k, 2) arrays]}`` polylines every ``spacing_um`` → ``(points (m, 2), ids (m,))``."""
    spacing = check_positive(spacing_um, "spacing_um")
    pts, ids = [], []
    for bid, lines in polylines.items():
        for line in lines:
            p = _densify(np.asarray(line, float).reshape(-1, 2), spacing)
            pts.append(p)
            ids.append(np.full(len(p), int(bid)))
    if not pts:
        return np.zeros((0, 2)), np.zeros(0, dtype=np.int64)
    return np.concatenate(pts), np.concatenate(ids)


def _densify(line: np.ndarray, spacing: float) -> np.ndarray:
    if len(line) == 1:
        return line
    seg = np.diff(line, axis=0)
    length = np.linalg.norm(seg, axis=1)
    s = np.concatenate([[0.0], np.cumsum(length)])
    if s[-1] <= 0:
        return line[:1]
    t = np.linspace(0.0, s[-1], max(math.ceil(s[-1] / spacing) + 1, 2))
    return np.stack([np.interp(t, s, line[:, 0]), np.interp(t, s, line[:, 1])], axis=1)


def band_orientation(values, step: float, *, sigma_um: float = 2.0) -> tuple[np.ndarray, np.ndarray]:
    """Local slip-band direction and coherence from the structure tensor of a strain field.

    The structure tensor J = G_σ * (∇f ∇fᵀ) is averaged with normalised convolution so missing
    points drop out; its dominant eigenvector is across the band, so the band runs at
    θ = ½·atan2(2J_xy, J_xx − J_yy) + 90°.

    Parameters
    ----------
    values : (ny, nx) ndarray
        Field (e.g. γ_max); NaN where missing.
    step : float
        Grid spacing, µm.
    sigma_um : float
        Gaussian integration scale, µm.

    Returns
    -------
    angle_deg : (ny, nx) ndarray
        Band direction in degrees from +x towards +y, in [0, 180) (frame of ``values``); NaN where missing.
    coherence : (ny, nx) ndarray
        (λ₁ − λ₂)/(λ₁ + λ₂) in [0, 1]; 1 for perfectly straight bands.
    """
    step = check_positive(step, "step")
    sigma = check_positive(sigma_um, "sigma_um") / step
    f = np.asarray(values, dtype=np.float64)
    gy, gx = np.gradient(f, step)
    ok = np.isfinite(gx) & np.isfinite(gy)
    w = ok.astype(np.float64)
    gx, gy = np.where(ok, gx, 0.0), np.where(ok, gy, 0.0)
    norm = ndimage.gaussian_filter(w, sigma, mode="constant")
    with np.errstate(invalid="ignore", divide="ignore"):
        jxx = ndimage.gaussian_filter(gx * gx, sigma, mode="constant") / norm
        jyy = ndimage.gaussian_filter(gy * gy, sigma, mode="constant") / norm
        jxy = ndimage.gaussian_filter(gx * gy, sigma, mode="constant") / norm
        theta = 0.5 * np.degrees(np.arctan2(2 * jxy, jxx - jyy)) + 90.0
        tr = jxx + jyy
        coh = np.sqrt((jxx - jyy) ** 2 + 4 * jxy**2) / tr
    valid = np.isfinite(f) & (norm > 1e-6) & (tr > 0)
    return np.where(valid, theta % 180.0, np.nan), np.where(valid, np.clip(coh, 0, 1), np.nan)


def grain_band_directions(values, labels, angle_deg, coherence, *, threshold: float,
                          min_coherence: float = 0.3, min_points: int = 5) -> pd.DataFrame:
    """Dominant slip-band direction per grain from the strongly strained, coherent points.

    Angles are averaged on the doubled-angle circle (lines have no sense), weighted by strain ×
    coherence.

    Returns
    -------
    DataFrame
        ``grain``, ``band_angle_deg`` in [0, 180), ``n_points``, ``spread`` (1 − resultant length,
        0 for one direction), ``mean_strain``.
    """
    v, lab, a, c = (np.asarray(z).ravel() for z in (values, labels, angle_deg, coherence))
    ok = np.isfinite(v) & np.isfinite(a) & np.isfinite(c) & (lab >= 0) & (v >= threshold) & (c >= min_coherence)
    wts = v[ok] * c[ok]
    ar = np.radians(2.0 * a[ok])
    df = pd.DataFrame({"grain": lab[ok].astype(np.int64), "w": wts, "cw": wts * np.cos(ar),
                       "sw": wts * np.sin(ar), "v": v[ok]})
    g = df.groupby("grain").agg(n_points=("w", "size"), w=("w", "sum"), cw=("cw", "sum"), sw=("sw", "sum"),
                                mean_strain=("v", "mean")).reset_index()
    g = g[g["n_points"] >= min_points]
    ang = (0.5 * np.degrees(np.arctan2(g["sw"], g["cw"]))) % 180.0
    spread = 1.0 - np.hypot(g["cw"], g["sw"]) / g["w"]
    return pd.DataFrame({"grain": g["grain"].to_numpy(), "band_angle_deg": ang.to_numpy(),
                         "n_points": g["n_points"].to_numpy(), "spread": spread.to_numpy(),
                         "mean_strain": g["mean_strain"].to_numpy()})

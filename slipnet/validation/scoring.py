"""Scores of one predicted field (and its sites, barriers and path) against the reference of one case.

Every predictor, the forecast and the baselines alike, is scored by the same functions:

(a) pixel ROC AUC of the field against the reference's top ``hot_fraction`` of accumulated slip, and
    of FIP, among the metal points within the horizon of the crack tip (:func:`field_auc`);
(b) Spearman ρ between grain means of the field and of the accumulated slip (:func:`grain_spearman`);
(c) hit rate of the top-k sites: a site is a hit when a hot reference point lies within ``hit_radius``
    of it (:func:`site_hits`);
(d) Spearman ρ between barrier scores and the reference's slip drop across each boundary the path
    crosses (:func:`boundary_drops`);
(e) agreement of the predicted path with the reference's ridge path (:func:`ridge_path`,
    :func:`slipnet.compare.score_path`).

A field that is constant over the scoring region ranks nothing and is refused (ParameterError).
"""

from __future__ import annotations

import numpy as np
from scipy import sparse, stats
from scipy.sparse import csgraph

from slipnet.compare.scores import auc_mann_whitney, score_path
from slipnet.errors import ParameterError
from slipnet.forecast.features import boundary_drops, field_peaks

__all__ = ["boundary_drops", "field_auc", "field_peaks", "grain_spearman", "hot_mask", "path_agreement",
           "ridge_path", "scoring_region", "site_hits", "spearman"]


def scoring_region(omap, solid: np.ndarray, tip, horizon_um: float) -> np.ndarray:
    """Metal points within ``horizon_um`` of the crack tip, ``(ny, nx)`` bool."""
    x, y = omap.coordinates()
    return np.asarray(solid, bool) & (np.hypot(x - float(tip[0]), y - float(tip[1])) <= float(horizon_um))


def hot_mask(values: np.ndarray, region: np.ndarray, fraction: float = 0.1) -> np.ndarray:
    """The top ``fraction`` of ``values`` within ``region`` (ties at the cut included)."""
    if not 0.0 < fraction < 1.0:
        raise ParameterError(f"hot fraction should lie in (0, 1); got {fraction!r}")
    if not region.any():
        raise ParameterError("the scoring region holds no metal point; give a larger horizon or a tip on the map")
    cut = np.quantile(values[region], 1.0 - fraction)
    return region & (values >= cut)


def _check_field(pred: np.ndarray, region: np.ndarray, name: str) -> np.ndarray:
    p = np.asarray(pred, dtype=float)
    if p.shape != region.shape:
        raise ParameterError(f"{name} should have the map shape {region.shape}; got {p.shape}")
    v = p[region]
    if not np.all(np.isfinite(v)):
        raise ParameterError(f"{name} has NaN or infinite values inside the scoring region; give finite values there")
    if v.size and float(np.ptp(v)) <= 1e-12 * max(1.0, float(np.abs(v).max())):
        raise ParameterError(
            f"{name} is constant over the scoring region ({float(v[0]):g} at all {v.size} points): a constant "
            "field ranks no point above another, so it has no ROC AUC; give a field that varies"
        )
    return p


def field_auc(pred: np.ndarray, reference: np.ndarray, region: np.ndarray, fraction: float = 0.1,
              name: str = "predicted field") -> float:
    """ROC AUC (Mann–Whitney) of ``pred`` separating the hot reference points from the rest of ``region``.

    Examples
    --------
    >>> import numpy as np
    >>> ref = np.arange(100.0).reshape(10, 10)
    >>> region = np.ones((10, 10), bool)
    >>> field_auc(ref, ref, region)
    1.0
    """
    p = _check_field(pred, region, name)
    hot = hot_mask(np.asarray(reference, float), region, fraction)
    return auc_mann_whitney(p[region], hot[region])


def spearman(a, b) -> float:
    """Spearman ρ of two samples (NaN with fewer than three finite pairs or a constant sample)."""
    a = np.asarray(a, float)
    b = np.asarray(b, float)
    ok = np.isfinite(a) & np.isfinite(b)
    if ok.sum() < 3 or np.ptp(a[ok]) == 0 or np.ptp(b[ok]) == 0:
        return float("nan")
    return float(stats.spearmanr(a[ok], b[ok]).statistic)


def grain_spearman(pred: np.ndarray, reference: np.ndarray, labels: np.ndarray, region: np.ndarray,
                   min_points: int = 5) -> float:
    """Spearman ρ over grains between the grain means (within ``region``) of ``pred`` and ``reference``."""
    lab = np.asarray(labels, np.int64)
    m = region & (lab >= 0)
    if not m.any():
        return float("nan")
    n = int(lab[m].max()) + 1
    cnt = np.bincount(lab[m], minlength=n)
    keep = cnt >= int(min_points)
    mp = np.bincount(lab[m], weights=np.asarray(pred, float)[m], minlength=n) / np.maximum(cnt, 1)
    mr = np.bincount(lab[m], weights=np.asarray(reference, float)[m], minlength=n) / np.maximum(cnt, 1)
    return spearman(mp[keep], mr[keep])


def site_hits(sites_xy, hot: np.ndarray, omap, radius_um: float) -> np.ndarray:
    """Whether a hot reference point lies within ``radius_um`` of each site, ``(n,)`` bool."""
    s = np.asarray(sites_xy, float).reshape(-1, 2)
    if s.size == 0:
        return np.zeros(0, bool)
    x, y = omap.coordinates()
    hx, hy = x[hot], y[hot]
    if hx.size == 0:
        return np.zeros(len(s), bool)
    d2 = (s[:, 0, None] - hx[None]) ** 2 + (s[:, 1, None] - hy[None]) ** 2
    return d2.min(axis=1) <= float(radius_um) ** 2


def ridge_path(values: np.ndarray, region: np.ndarray, omap, tip, direction, horizon_um: float,
               reach: float = 0.8) -> np.ndarray:
    """The least-cost route from the tip to ``reach`` × horizon through high ``values``, ``(p, 2)`` µm.

    The cost of a step is its length times ``1 − rank + 0.05``, with rank the percentile rank of
    ``values`` within ``region`` (so the route follows the ridge of the field, not its scale); the
    route ends at the cheapest point at distance ``reach × horizon`` from the tip in the half plane
    ahead of it. Empty when no such point is reachable through the region.
    """
    ny, nx = region.shape
    x, y = omap.coordinates()
    v = np.asarray(values, float)
    rank = np.zeros(region.shape)
    if region.any():
        rank[region] = stats.rankdata(v[region]) / region.sum()
    cost = np.where(region, 1.0 - rank + 0.05, np.inf)
    idx = np.arange(ny * nx).reshape(ny, nx)
    rows, cols, w = [], [], []
    for di, dj in ((0, 1), (1, 0), (1, 1), (1, -1)):
        j0, j1 = max(0, -dj), nx - max(0, dj)
        a = idx[0:ny - di, j0:j1]
        b = idx[di:ny, j0 + dj:j1 + dj]
        ca, cb = cost.ravel()[a.ravel()], cost.ravel()[b.ravel()]
        length = float(np.hypot(di * omap.row_spacing, dj * omap.step))
        ww = 0.5 * (ca + cb) * length
        ok = np.isfinite(ww)
        rows.append(a.ravel()[ok])
        cols.append(b.ravel()[ok])
        w.append(ww[ok])
    g = sparse.coo_matrix((np.concatenate(w), (np.concatenate(rows), np.concatenate(cols))), shape=(ny * nx, ny * nx))
    src_pts = np.flatnonzero((region & (np.hypot(x - tip[0], y - tip[1]) <= 1.5 * omap.step)).ravel())
    if src_pts.size == 0:
        return np.zeros((0, 2))
    dist, pred, _src = csgraph.dijkstra(g.tocsr(), directed=False, indices=src_pts, return_predecessors=True,
                                        min_only=True)
    d = np.asarray(direction, float) / np.linalg.norm(direction)
    rr = np.hypot(x - tip[0], y - tip[1])
    ahead = (x - tip[0]) * d[0] + (y - tip[1]) * d[1] > 0
    target = (region & ahead & (np.abs(rr - reach * horizon_um) <= 0.75 * omap.step)).ravel() & np.isfinite(dist)
    if not target.any():
        return np.zeros((0, 2))
    end = int(np.flatnonzero(target)[np.argmin(dist[target])])
    chain = [end]
    while pred[chain[-1]] >= 0 and len(chain) < ny * nx:
        chain.append(int(pred[chain[-1]]))
    chain = np.array(chain[::-1])
    return np.stack([x.ravel()[chain], y.ravel()[chain]], axis=1)


def path_agreement(predicted, reference_path: np.ndarray, tol_um: float) -> dict:
    """:func:`slipnet.compare.score_path` of a predicted path against the reference ridge path (NaN if none)."""
    if reference_path is None or len(reference_path) < 2:
        return {"mean_distance_um": float("nan"), "share_within_tol": float("nan")}
    try:
        s = score_path(predicted, reference_path, tol_um)
    except ParameterError:
        return {"mean_distance_um": float("nan"), "share_within_tol": float("nan")}
    return {"mean_distance_um": s["mean_distance_um"], "share_within_tol": s["share_within_tol"]}

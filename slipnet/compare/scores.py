"""Scores of a forecast against measurements: sites, ranks, paths, band directions, dips."""

from __future__ import annotations

import numpy as np
import pandas as pd
from scipy import optimize, stats

from slipnet._checks import check_positive
from slipnet.columns import SEGMENT_XY
from slipnet.compare.registration import as_points
from slipnet.errors import ParameterError

__all__ = ["angle_difference", "auc_mann_whitney", "densify_segments", "match_dips", "match_points",
           "path_segments", "point_segment_distance", "rank_agreement", "score_band_directions", "score_path",
           "score_sites"]


# =========================================================================================== scores
def match_points(pred, meas, tol: float) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """One-to-one matching of predicted to measured points within a distance tolerance.

    The assignment first maximises the number of pairs closer than ``tol`` and, among those,
    minimises the summed distance (``scipy.optimize.linear_sum_assignment`` with a prohibitive
    cost for pairs beyond the tolerance).

    Parameters
    ----------
    pred, meas : (n, d) or (n,) ndarray
        Positions (µm) of predicted and measured items (1-D for crack lengths).
    tol : float
        Distance tolerance, same unit.

    Returns
    -------
    pred_index, meas_index, distance : ndarray
        The matched pairs.
    """
    tol = check_positive(tol, "tol")
    p = np.asarray(pred, float)
    m = np.asarray(meas, float)
    p = p.reshape(len(p), -1) if p.size else np.zeros((0, 1))
    m = m.reshape(len(m), -1) if m.size else np.zeros((0, p.shape[1]))
    if len(p) == 0 or len(m) == 0:
        return np.zeros(0, int), np.zeros(0, int), np.zeros(0)
    if p.shape[1] != m.shape[1]:
        raise ParameterError(f"predicted and measured points should share a dimension; got {p.shape[1]} and "
                             f"{m.shape[1]}")
    d = np.linalg.norm(p[:, None, :] - m[None, :, :], axis=-1)
    feasible = d <= tol
    # each feasible pair costs at most 1; an infeasible one more than every feasible pair together
    big = float(min(len(p), len(m)) + 1)
    cost = np.where(feasible, d / tol, big)
    r, c = optimize.linear_sum_assignment(cost)
    keep = feasible[r, c]
    return r[keep], c[keep], d[r[keep], c[keep]]


def _prf(tp: int, n_pred: int, n_meas: int) -> dict:
    precision = tp / n_pred if n_pred else 0.0
    recall = tp / n_meas if n_meas else 0.0
    f1 = 2 * tp / (n_pred + n_meas) if (n_pred + n_meas) else 0.0
    return {"true_positives": tp, "false_positives": n_pred - tp, "false_negatives": n_meas - tp,
            "precision": precision, "recall": recall, "f1": f1}


def score_sites(pred_xy, meas_xy, tol_um: float) -> tuple[dict, pd.DataFrame]:
    """Precision, recall and F1 of predicted localisation sites against measured strain peaks.

    A predicted site is a true positive when it is matched one-to-one (:func:`match_points`) to a
    measured peak within ``tol_um``.

    Returns
    -------
    scores : dict
        ``true_positives``, ``false_positives``, ``false_negatives``, ``precision``, ``recall``, ``f1``,
        ``mean_match_distance_um``.
    pairs : DataFrame
        ``pred_index``, ``meas_index``, ``distance_um``.
    """
    p = as_points(pred_xy, "pred_xy") if np.size(pred_xy) else np.zeros((0, 2))
    m = as_points(meas_xy, "meas_xy") if np.size(meas_xy) else np.zeros((0, 2))
    pi, mi, d = match_points(p, m, tol_um)
    out = _prf(len(pi), len(p), len(m))
    out["mean_match_distance_um"] = float(d.mean()) if len(d) else float("nan")
    return out, pd.DataFrame({"pred_index": pi, "meas_index": mi, "distance_um": d})


def auc_mann_whitney(scores, labels) -> float:
    """ROC AUC from the Mann–Whitney U statistic: P(score_pos > score_neg) + ½ P(tie).

    NaN if either class is empty.
    """
    s = np.asarray(scores, float)
    y = np.asarray(labels, bool)
    n1, n0 = int(y.sum()), int((~y).sum())
    if n1 == 0 or n0 == 0:
        return float("nan")
    r = stats.rankdata(s)
    u = r[y].sum() - n1 * (n1 + 1) / 2.0
    return float(u / (n1 * n0))


def rank_agreement(predicted, measured, *, hot_quantile: float = 0.75) -> dict:
    """Spearman rank correlation and ROC AUC between predicted scores and measured strain.

    Parameters
    ----------
    predicted, measured : (n,) ndarray
        Per item (grain or boundary) predicted score and measured strain statistic; items where
        either is NaN are dropped.
    hot_quantile : float
        Items whose measured value is at or above this quantile are the "hot" class for the AUC.

    Returns
    -------
    dict
        ``n``, ``spearman_rho``, ``spearman_p``, ``roc_auc``, ``n_hot``.
    """
    p = np.asarray(predicted, float).ravel()
    m = np.asarray(measured, float).ravel()
    if p.shape != m.shape:
        raise ParameterError(f"predicted and measured should have equal lengths; got {p.size} and {m.size}")
    q = float(hot_quantile)
    if not 0.0 < q < 1.0:
        raise ParameterError(f"hot_quantile should lie in (0, 1); got {hot_quantile!r}")
    ok = np.isfinite(p) & np.isfinite(m)
    p, m = p[ok], m[ok]
    out = {"n": int(p.size), "spearman_rho": float("nan"), "spearman_p": float("nan"),
           "roc_auc": float("nan"), "n_hot": 0}
    if p.size < 3:
        return out
    if np.ptp(p) > 0 and np.ptp(m) > 0:
        res = stats.spearmanr(p, m)
        out["spearman_rho"], out["spearman_p"] = float(res.statistic), float(res.pvalue)
    hot = m >= np.quantile(m, q)
    out["n_hot"] = int(hot.sum())
    out["roc_auc"] = auc_mann_whitney(p, hot)
    return out


def path_segments(path, name: str) -> np.ndarray:
    """(k, 4) segments x0, y0, x1, y1 from a segment DataFrame or an (n, 2) polyline."""
    if isinstance(path, pd.DataFrame):
        missing = [c for c in SEGMENT_XY if c not in path.columns]
        if missing:
            raise ParameterError(f"{name} should have columns x0, y0, x1, y1 (µm); missing {missing}")
        seg = path[list(SEGMENT_XY)].to_numpy(float)
    else:
        p = as_points(path, name, min_rows=2)
        seg = np.concatenate([p[:-1], p[1:]], axis=1)
    if seg.size == 0 or not np.all(np.isfinite(seg)):
        raise ParameterError(f"{name} should hold at least one finite segment")
    return seg


def densify_segments(seg: np.ndarray, spacing: float) -> np.ndarray:
    length = np.hypot(seg[:, 2] - seg[:, 0], seg[:, 3] - seg[:, 1])
    n = np.maximum(np.ceil(length / spacing).astype(int), 1) + 1
    idx = np.repeat(np.arange(len(seg)), n)
    t = np.concatenate([np.linspace(0.0, 1.0, k) for k in n])
    return np.stack([seg[idx, 0] + t * (seg[idx, 2] - seg[idx, 0]), seg[idx, 1] + t * (seg[idx, 3] - seg[idx, 1])],
                    axis=1)


def point_segment_distance(points, seg: np.ndarray, *, chunk: int = 4096) -> np.ndarray:
    """Distance (µm) from each of ``(n, 2)`` points to the nearest of ``(k, 4)`` segments."""
    p = np.asarray(points, float)
    a, b = seg[:, :2], seg[:, 2:]
    ab = b - a
    ll = np.einsum("ij,ij->i", ab, ab)
    out = np.empty(len(p))
    for s in range(0, len(p), chunk):
        q = p[s:s + chunk, None, :]
        with np.errstate(invalid="ignore", divide="ignore"):
            t = np.where(ll > 0, np.einsum("nkj,kj->nk", q - a, ab) / ll, 0.0)
        t = np.clip(t, 0.0, 1.0)
        closest = a + t[..., None] * ab
        out[s:s + chunk] = np.min(np.linalg.norm(q - closest, axis=-1), axis=1)
    return out


def score_path(predicted, measured, tol_um: float, *, spacing_um: float | None = None) -> dict:
    """Distances between a predicted crack path and the measured one.

    Parameters
    ----------
    predicted, measured : DataFrame with ``x0, y0, x1, y1`` (µm) or (n, 2) polyline
    tol_um : float
        Distance tolerance for the share within tolerance.
    spacing_um : float, optional
        Sampling of the measured path (default ``tol_um / 5``).

    Returns
    -------
    dict
        ``mean_distance_um`` (measured points to the predicted path), ``max_distance_um``
        (symmetric Hausdorff distance), ``share_within_tol`` (share of measured path length
        within ``tol_um`` of the predicted path), ``predicted_length_um``, ``measured_length_um``.
    """
    tol = check_positive(tol_um, "tol_um")
    spacing = check_positive(spacing_um if spacing_um is not None else tol / 5.0, "spacing_um")
    sp, sm = path_segments(predicted, "predicted"), path_segments(measured, "measured")
    mp, pp = densify_segments(sm, spacing), densify_segments(sp, spacing)
    d_mp = point_segment_distance(mp, sp)
    d_pm = point_segment_distance(pp, sm)
    return {
        "mean_distance_um": float(d_mp.mean()),
        "max_distance_um": float(max(d_mp.max(), d_pm.max())),
        "share_within_tol": float(np.mean(d_mp <= tol)),
        "predicted_length_um": float(np.hypot(sp[:, 2] - sp[:, 0], sp[:, 3] - sp[:, 1]).sum()),
        "measured_length_um": float(np.hypot(sm[:, 2] - sm[:, 0], sm[:, 3] - sm[:, 1]).sum()),
    }


def angle_difference(a_deg, b_deg) -> np.ndarray:
    """Smallest angle between line directions (mod 180°), degrees in [0, 90]."""
    d = np.abs(np.asarray(a_deg, float) - np.asarray(b_deg, float)) % 180.0
    return np.minimum(d, 180.0 - d)


def score_band_directions(band_angles_deg, predicted_traces_deg, tol_deg: float) -> tuple[dict, np.ndarray]:
    """Fraction of measured slip bands whose direction matches a predicted trace of their grain.

    Parameters
    ----------
    band_angles_deg : (n,) ndarray
        Measured band direction per band (degrees, map frame).
    predicted_traces_deg : (n, k) ndarray
        Predicted trace directions of the band's grain (e.g. its most active slip systems); NaN pads.
    tol_deg : float
        Largest accepted angle difference (mod 180°).

    Returns
    -------
    scores : dict
        ``n_bands``, ``n_matched``, ``fraction_matched``, ``median_error_deg``.
    errors : (n,) ndarray
        Smallest angle difference of each band to its grain's traces (NaN if no trace).
    """
    tol = check_positive(tol_deg, "tol_deg")
    a = np.asarray(band_angles_deg, float).ravel()
    t = np.asarray(predicted_traces_deg, float)
    t = t.reshape(len(a), -1) if t.size else np.full((len(a), 1), np.nan)
    if t.shape[0] != a.shape[0]:
        raise ParameterError("predicted_traces_deg should have one row per band")
    diff = angle_difference(a[:, None], t)
    with np.errstate(invalid="ignore"):
        err = np.where(np.all(np.isnan(diff), axis=1), np.nan, np.nanmin(np.where(np.isnan(diff), np.inf, diff), 1))
    matched = np.isfinite(err) & (err <= tol)
    n = int(a.size)
    return {"n_bands": n, "n_matched": int(matched.sum()),
            "fraction_matched": float(matched.sum() / n) if n else float("nan"),
            "median_error_deg": float(np.nanmedian(err)) if np.any(np.isfinite(err)) else float("nan")}, err


# =================================================================================== growth dips
def match_dips(predicted_a, measured_a, tol_um: float) -> tuple[dict, pd.DataFrame]:
    """Match predicted growth-rate dips to measured ones by crack length (one-to-one within ``tol_um``).

    Returns
    -------
    scores : dict
        ``hits``, ``misses`` (measured dips not predicted), ``false_alarms`` (predicted, not
        measured), ``precision``, ``recall``, ``f1``.
    table : DataFrame
        One row per dip: ``crack_length_um``, ``source`` ("predicted"/"measured"), ``status``
        ("hit"/"miss"/"false_alarm"), ``partner_um`` (matched dip's crack length, NaN if none).
    """
    p = np.asarray(predicted_a, float).ravel()
    m = np.asarray(measured_a, float).ravel()
    if not (np.all(np.isfinite(p)) and np.all(np.isfinite(m))):
        raise ParameterError("dip crack lengths should be finite")
    pi, mi, _ = match_points(p, m, tol_um)
    prf = _prf(len(pi), p.size, m.size)
    scores = {"hits": prf["true_positives"], "misses": prf["false_negatives"],
              "false_alarms": prf["false_positives"], "precision": prf["precision"], "recall": prf["recall"],
              "f1": prf["f1"]}
    p_partner = np.full(p.size, np.nan)
    m_partner = np.full(m.size, np.nan)
    p_partner[pi], m_partner[mi] = m[mi], p[pi]
    table = pd.concat([
        pd.DataFrame({"crack_length_um": p, "source": "predicted",
                      "status": np.where(np.isfinite(p_partner), "hit", "false_alarm"), "partner_um": p_partner}),
        pd.DataFrame({"crack_length_um": m, "source": "measured",
                      "status": np.where(np.isfinite(m_partner), "hit", "miss"), "partner_um": m_partner}),
    ], ignore_index=True)
    return scores, table

"""Score forecasts against measurements: registration, measured localisation, scores, growth records.

Data flow
---------
1. A measured displacement or strain series (:mod:`slipnet.strainmaps`) lives in its own image
   frame. Control points (fiducial marks seen in both the strain images and the orientation map)
   give a transform strain frame → map frame (:func:`fit_transform`).
2. The shear strain is resampled onto the map grid (:func:`resample_to_map`) and the grain labels
   onto the strain grid (:func:`labels_on_strain_grid`).
3. Measured localisation: strain peaks (:func:`find_strain_peaks`), per-grain and per-boundary-band
   statistics, slip-band directions from the structure tensor (:func:`band_orientation`).
4. Scores: sites against peaks (:func:`score_sites`), rank agreement per grain / boundary
   (:func:`rank_agreement`), path against measured path (:func:`score_path`), band directions
   against predicted traces (:func:`score_band_directions`).
5. Growth records: da/dN by ASTM E647 secant and seven-point incremental polynomial methods,
   dips found and matched to predicted dips (:func:`match_dips`).

Every function takes plain arrays / DataFrames; thin adapters (``*_from_forecast``,
``predicted_dips_from_growth``) accept the forecast and growth results. :func:`compare_forecast`
runs the whole comparison and returns a :class:`Comparison`.
"""

from __future__ import annotations

import os
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np
import pandas as pd
from scipy import optimize, stats

from ._checks import check_positive
from ._compare_growth import dadn_incremental_polynomial, dadn_secant, find_rate_dips
from ._compare_localisation import (
    band_orientation,
    boundary_band_statistics,
    densify_polylines,
    find_strain_peaks,
    grain_band_directions,
    grain_statistics,
)
from ._compare_registration import (
    Transform,
    _as_points,
    fit_transform,
    labels_on_strain_grid,
    read_control_points,
    resample_to_map,
)
from .errors import InputFileError, NumericalError, ParameterError
from .report import write_summary, write_table
from .strainmaps import (
    StrainSeries,
    equivalent_strain,
    max_shear_strain,
    read_strain,
    strain_from_displacement,
    write_strain,
)

__all__ = [
    "Comparison",
    "ForecastTables",
    "GrowthTables",
    "StrainSeries",
    "Transform",
    "band_orientation",
    "boundary_band_statistics",
    "compare_files",
    "compare_forecast",
    "dadn_incremental_polynomial",
    "dadn_secant",
    "equivalent_strain",
    "find_rate_dips",
    "find_strain_peaks",
    "fit_transform",
    "grain_band_directions",
    "grain_statistics",
    "labels_on_strain_grid",
    "match_dips",
    "match_points",
    "max_shear_strain",
    "path_from_forecast",
    "predicted_dips_from_growth",
    "rank_agreement",
    "read_control_points",
    "read_csv_table",
    "read_forecast_folder",
    "read_forecast_tables",
    "read_growth_folder",
    "read_growth_record",
    "read_measured_path",
    "read_strain",
    "resample_to_map",
    "score_band_directions",
    "score_path",
    "score_sites",
    "sites_from_forecast",
    "strain_from_displacement",
    "write_comparison",
    "write_strain",
]



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
    p = _as_points(pred_xy, "pred_xy") if np.size(pred_xy) else np.zeros((0, 2))
    m = _as_points(meas_xy, "meas_xy") if np.size(meas_xy) else np.zeros((0, 2))
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


def _segments(path, name: str) -> np.ndarray:
    """(k, 4) segments x0, y0, x1, y1 from a segment DataFrame or an (n, 2) polyline."""
    if isinstance(path, pd.DataFrame):
        missing = [c for c in ("x0", "y0", "x1", "y1") if c not in path.columns]
        if missing:
            raise ParameterError(f"{name} should have columns x0, y0, x1, y1 (µm); missing {missing}")
        seg = path[["x0", "y0", "x1", "y1"]].to_numpy(float)
    else:
        p = _as_points(path, name, min_rows=2)
        seg = np.concatenate([p[:-1], p[1:]], axis=1)
    if seg.size == 0 or not np.all(np.isfinite(seg)):
        raise ParameterError(f"{name} should hold at least one finite segment")
    return seg


def _densify_segments(seg: np.ndarray, spacing: float) -> np.ndarray:
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
    sp, sm = _segments(predicted, "predicted"), _segments(measured, "measured")
    mp, pp = _densify_segments(sm, spacing), _densify_segments(sp, spacing)
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


# ======================================================================================= adapters
def sites_from_forecast(forecast) -> tuple[np.ndarray, np.ndarray]:
    """``(xy (n, 2) µm, score (n,))`` of the predicted localisation sites of a ``CrackForecast``
    (or a DataFrame with columns ``x``, ``y``, ``score``)."""
    sites = forecast.sites if hasattr(forecast, "sites") else forecast
    if sites is None or len(sites) == 0:
        return np.zeros((0, 2)), np.zeros(0)
    for c in ("x", "y"):
        if c not in sites.columns:
            raise ParameterError(f"forecast sites should have columns x, y, score; missing {c!r}")
    score = sites["score"].to_numpy(float) if "score" in sites.columns else np.ones(len(sites))
    return sites[["x", "y"]].to_numpy(float), score


def path_from_forecast(forecast) -> pd.DataFrame:
    """The predicted path segments (``x0, y0, x1, y1`` µm) of a ``CrackForecast`` or a segment table."""
    path = forecast.path if hasattr(forecast, "path") else forecast
    _segments(path, "forecast path")
    return path


def predicted_dips_from_growth(growth) -> np.ndarray:
    """Crack lengths (µm) of the predicted growth-rate dips.

    Accepts a DataFrame of dips (column ``crack_length`` or ``crack_length_um``), a growth profile
    or result understood by ``slipnet.growth.predicted_dips``, or an object with a ``dips`` table.
    """
    if growth is None:
        return np.zeros(0)
    table = None
    if isinstance(growth, pd.DataFrame) and "depth" in growth.columns:
        table = growth
    elif hasattr(growth, "dips") and isinstance(growth.dips, pd.DataFrame):
        table = growth.dips
    else:
        try:
            from .growth import predicted_dips
        except ImportError as err:
            raise ParameterError("growth should be a dips table (crack_length column) while slipnet.growth "
                                 "is not available") from err
        table = predicted_dips(growth)
    for c in ("crack_length_um", "crack_length"):
        if c in table.columns:
            return table[c].to_numpy(float)
    raise ParameterError(f"predicted dips should have a crack_length column; got {list(table.columns)}")


def growth_profile_from(growth) -> pd.DataFrame | None:
    """A predicted growth profile (``crack_length`` µm, ``dadn`` µm/cycle, optional ``cycles``) or None."""
    if growth is None:
        return None
    prof = growth if isinstance(growth, pd.DataFrame) else getattr(growth, "profile", None)
    if isinstance(prof, pd.DataFrame) and {"crack_length", "dadn"} <= set(prof.columns):
        return prof
    return None


# ===================================================================================== table files
@dataclass(frozen=True)
class ForecastTables:
    """Forecast outputs read back from CSV tables (same columns as a ``CrackForecast``)."""

    sites: pd.DataFrame | None = None
    path: pd.DataFrame | None = None
    barriers: pd.DataFrame | None = None


def read_csv_table(path: str | os.PathLike, required: tuple[str, ...], what: str) -> pd.DataFrame:
    """Read a CSV table and check that it has the ``required`` columns (numeric where named)."""
    path = Path(path)
    if not path.is_file():
        raise InputFileError("no such file", path=str(path))
    try:
        t = pd.read_csv(path, comment="#")
    except (pd.errors.ParserError, pd.errors.EmptyDataError, UnicodeDecodeError) as err:
        raise InputFileError(f"cannot read the {what} table: {err}", path=str(path)) from err
    t.columns = [str(c).strip() for c in t.columns]
    for c in required:
        if c not in t.columns:
            raise InputFileError(f"column {c!r} is missing; a {what} table needs {list(required)}", path=str(path),
                                 column=c)
        vals = pd.to_numeric(t[c], errors="coerce")
        if vals.isna().any():
            row = int(np.flatnonzero(vals.isna().to_numpy())[0])
            raise InputFileError("should be a number", path=str(path), line=row + 2, column=c)
        t[c] = vals.astype(float)
    return t


def read_forecast_tables(*, sites=None, path=None, barriers=None) -> ForecastTables:
    """Read forecast tables written as CSV: sites (``x, y, score``), path (``x0, y0, x1, y1``),
    barriers (``boundary_id, score``); any may be None."""
    return ForecastTables(
        read_csv_table(sites, ("x", "y"), "sites") if sites else None,
        read_csv_table(path, ("x0", "y0", "x1", "y1"), "path") if path else None,
        read_csv_table(barriers, ("boundary_id", "score"), "barriers") if barriers else None,
    )


def read_measured_path(path: str | os.PathLike) -> np.ndarray | pd.DataFrame:
    """A measured crack path: CSV polyline (``x_um, y_um``) or segments (``x0, y0, x1, y1``), µm."""
    t = read_csv_table(path, (), "measured path")
    if {"x0", "y0", "x1", "y1"} <= set(t.columns):
        return read_csv_table(path, ("x0", "y0", "x1", "y1"), "measured path")
    return read_csv_table(path, ("x_um", "y_um"), "measured path")[["x_um", "y_um"]].to_numpy(float)


def read_growth_record(path: str | os.PathLike) -> pd.DataFrame:
    """A crack-growth record: CSV with ``cycles`` and ``crack_length_um``."""
    return read_csv_table(path, ("cycles", "crack_length_um"), "growth record")


def read_forecast_folder(folder: str | os.PathLike) -> ForecastTables:
    """Forecast tables from a folder written by the forecast step (``forecast_sites.csv``,
    ``forecast_path.csv``, ``forecast_barriers.csv``; missing files give None)."""
    folder = Path(folder)
    if not folder.is_dir():
        raise InputFileError("should be a folder of forecast tables", path=str(folder))
    names = {k: folder / f"forecast_{k}.csv" for k in ("sites", "path", "barriers")}
    return read_forecast_tables(**{k: p if p.exists() else None for k, p in names.items()})


@dataclass(frozen=True)
class GrowthTables:
    """Predicted growth outputs read back from CSV (``growth_dips.csv``, ``growth_profile.csv``)."""

    dips: pd.DataFrame | None = None
    profile: pd.DataFrame | None = None


def read_growth_folder(folder: str | os.PathLike) -> GrowthTables:
    """Predicted dips and profile from a folder written by the growth step."""
    folder = Path(folder)
    if not folder.is_dir():
        raise InputFileError("should be a folder of growth tables", path=str(folder))
    dips = folder / "growth_dips.csv"
    prof = folder / "growth_profile.csv"
    return GrowthTables(read_csv_table(dips, ("crack_length",), "growth dips") if dips.exists() else None,
                        read_csv_table(prof, ("crack_length", "dadn"), "growth profile") if prof.exists() else None)


def compare_files(strain_path, *, points=None, kind: str = "affine", map_path=None, threshold_deg: float = 15.0,
                  forecast_folder=None, sites=None, path=None, barriers=None, measured_path=None, record=None,
                  growth_folder=None, **options) -> Comparison:
    """:func:`compare_forecast` on files: a strain file, control points, map, forecast and growth tables.

    ``options`` go to :func:`compare_forecast` (tolerances, strain method, load axis...).
    """
    series = read_strain(strain_path)
    transform = None
    if points is not None:
        src, dst = read_control_points(points)
        transform = fit_transform(src, dst, kind)
    gg = None
    if map_path is not None:
        from .grains import build_grain_graph
        from .io import read_map

        gg = build_grain_graph(read_map(map_path), threshold_deg)
    fc = read_forecast_folder(forecast_folder) if forecast_folder is not None else ForecastTables()
    over = read_forecast_tables(sites=sites, path=path, barriers=barriers)
    fc = ForecastTables(over.sites if over.sites is not None else fc.sites,
                        over.path if over.path is not None else fc.path,
                        over.barriers if over.barriers is not None else fc.barriers)
    has_fc = any(t is not None for t in (fc.sites, fc.path, fc.barriers))
    growth = read_growth_folder(growth_folder) if growth_folder is not None else None
    if growth is not None and growth.dips is None:
        growth = GrowthTables(pd.DataFrame({"crack_length": [], "depth": []}), growth.profile)
    return compare_forecast(series, forecast=fc if has_fc else None, grain_graph=gg, transform=transform,
                            measured_path=read_measured_path(measured_path) if measured_path else None,
                            growth_record=read_growth_record(record) if record else None, growth=growth, **options)


# =================================================================================== whole comparison
@dataclass(eq=False)
class Comparison:
    """Everything measured and scored by :func:`compare_forecast`.

    Attributes
    ----------
    transform : Transform or None
        Strain frame → map frame.
    series : StrainSeries
        The analysed strain series (strain-image frame).
    shear : (ny, nx) ndarray
        Measured γ_max on the strain grid (dimensionless; NaN where missing).
    shear_on_map : ndarray or None
        γ_max resampled onto the map grid.
    peaks, grain_stats, boundary_stats, bands : DataFrame
        Measured localisation (positions in the map frame, strains dimensionless).
    site_pairs : DataFrame
        Matched predicted sites / peaks.
    growth_rates : DataFrame or None
        ``method``, ``crack_length_um``, ``dadn_um_per_cycle`` from the measured record.
    dips : DataFrame or None
        Predicted and measured dips with their status.
    scores : dict
        Flat dict of every score (see :func:`compare_forecast`).
    settings : dict
        The tolerances and options used (``synthetic`` True when the series is invented data).
    predicted_sites : (n, 2) ndarray
        Predicted site positions (µm, map frame).
    predicted_path : DataFrame or None
        Predicted path segments.
    measured_path : (m, 2) ndarray or None
        Measured crack path polyline (µm, map frame).
    predicted_profile : DataFrame or None
        Predicted growth profile (``crack_length``, ``dadn``) for the figure.
    map_extent : tuple or None
        ``imshow`` extent of the map grid (µm) when a grain graph was given.
    """

    transform: Transform | None
    series: StrainSeries
    shear: np.ndarray
    shear_on_map: np.ndarray | None
    peaks: pd.DataFrame
    grain_stats: pd.DataFrame | None
    boundary_stats: pd.DataFrame | None
    bands: pd.DataFrame | None
    site_pairs: pd.DataFrame
    growth_rates: pd.DataFrame | None
    dips: pd.DataFrame | None
    scores: dict
    settings: dict
    predicted_sites: np.ndarray = field(default_factory=lambda: np.zeros((0, 2)))
    predicted_path: pd.DataFrame | None = None
    measured_path: np.ndarray | None = None
    predicted_profile: pd.DataFrame | None = None
    map_extent: tuple[float, float, float, float] | None = None

    def score_table(self) -> pd.DataFrame:
        """Scores as a two-column table (``score``, ``value``)."""
        return pd.DataFrame({"score": list(self.scores), "value": [self.scores[k] for k in self.scores]})


def _grain_traces(gg, load_axis, n_traces: int) -> np.ndarray | None:
    """Trace angles (deg, map frame) of the ``n_traces`` highest-Schmid systems of every grain, or None."""
    try:
        from .slip import schmid_factors, slip_systems, slip_trace_angles
    except ImportError:
        return None
    systems = slip_systems("bcc")
    q = np.asarray(gg.mean_quats, float)
    m = np.abs(schmid_factors(q, np.asarray(load_axis, float), systems))
    t = slip_trace_angles(q, systems)
    top = np.argsort(-m, axis=1)[:, :n_traces]
    return np.take_along_axis(t, top, axis=1)


def compare_forecast(series: StrainSeries, *, forecast=None, grain_graph=None, transform: Transform | None = None,
                     step: int | None = None, strain_method: str = "small", window: int | None = None,
                     peak_threshold: float | None = None, peak_distance_um: float = 5.0, site_tol_um: float = 5.0,
                     band_um: float = 2.0, hot_quantile: float = 0.75, measured_path=None, path_tol_um: float = 5.0,
                     band_sigma_um: float = 2.0, band_tol_deg: float = 10.0, load_axis=None, n_traces: int = 2,
                     growth_record=None, growth=None, dip_prominence: float = 0.1, dip_tol_um: float = 5.0,
                     max_sites: int | None = None) -> Comparison:
    """Measure localisation in a strain series and score a forecast against it (whole job).

    Parameters
    ----------
    series : StrainSeries
        Measured displacement or strain.
    forecast : CrackForecast or None
        Predicted sites (``.sites``), path (``.path``) and barriers (``.barriers``).
    grain_graph : GrainGraph or None
        Grains of the map (labels, boundary polylines, mean orientations).
    transform : Transform or None
        Strain frame → map frame (None: the frames coincide).
    step : int or None
        Load step to analyse (default the last).
    strain_method, window
        See :func:`strain_from_displacement`.
    peak_threshold : float or None
        Smallest γ_max peak (dimensionless); default the 95th percentile of the field.
    peak_distance_um, site_tol_um, band_um, hot_quantile, path_tol_um, band_sigma_um, band_tol_deg
        Peak separation, site matching tolerance, boundary band half-width, hot class quantile,
        path tolerance, structure tensor scale, band direction tolerance.
    measured_path : (n, 2) ndarray or DataFrame or None
        The measured crack path in the map frame (µm).
    load_axis : 3-vector or None
        Load axis (map frame) for the predicted slip traces of each grain.
    n_traces : int
        How many most-stressed systems per grain count as predicted traces.
    growth_record : DataFrame or None
        Measured ``crack_length_um`` and ``cycles``.
    growth : growth result / profile / dips table or None
        Predicted dips (and profile for the figure).
    dip_prominence, dip_tol_um
        Measured dip prominence (decades of rate) and matching tolerance (µm of crack length).
    max_sites : int or None
        Score only the ``max_sites`` highest-scored predicted sites (None: all).
    """
    tr = transform if transform is not None else fit_transform(
        [[0, 0], [1, 0], [0, 1]], [[0, 0], [1, 0], [0, 1]], "affine")
    s = series.strain(strain_method, window=window)
    k = s.step_index(step)
    shear = max_shear_strain(s.components["exx"][k], s.components["eyy"][k], s.components["exy"][k])
    finite = shear[np.isfinite(shear)]
    if finite.size == 0:
        raise NumericalError("the measured strain field has no valid point")
    thr = float(np.quantile(finite, 0.95)) if peak_threshold is None else float(peak_threshold)
    peaks = find_strain_peaks(shear, s, threshold=thr, min_distance_um=peak_distance_um, transform=tr)
    scores: dict = {"registration_rms_um": tr.rms if transform is not None else float("nan"),
                    "n_measured_peaks": len(peaks)}
    sx, sy = s.coordinates()
    mxy = tr.apply(np.stack([sx.ravel(), sy.ravel()], 1))
    grain_stats = boundary_stats = bands = None
    shear_on_map = None
    labels_s = None
    extent = None
    if grain_graph is not None:
        from .figures._common import map_extent

        omap = grain_graph.omap
        extent = tuple(float(e) for e in map_extent(omap))
        gx, gy = omap.coordinates()
        shear_on_map = resample_to_map(shear, s, tr, gx, gy)
        labels_s = labels_on_strain_grid(grain_graph.labels, omap, s, tr)
        grain_stats = grain_statistics(shear, labels_s)
        pts, ids = densify_polylines(grain_graph.boundary_polylines, min(omap.step, s.step) / 2.0)
        boundary_stats = boundary_band_statistics(shear.ravel(), mxy[:, 0], mxy[:, 1], pts, ids, band_um)
        ang, coh = band_orientation(shear, s.step, sigma_um=band_sigma_um)
        # bands only where the strain localised: above the peak threshold, coherent, not a few stray points
        bands = grain_band_directions(shear, labels_s, tr.apply_directions(ang), coh, threshold=thr,
                                      min_coherence=0.5, min_points=10)
        if load_axis is not None and len(bands):
            traces = _grain_traces(grain_graph, load_axis, n_traces)
            if traces is not None:
                t = traces[bands["grain"].to_numpy()]
                bscore, err = score_band_directions(bands["band_angle_deg"], t, band_tol_deg)
                bands = bands.assign(trace_error_deg=err, matched=err <= band_tol_deg)
                scores.update({f"bands_{kk}": vv for kk, vv in bscore.items()})
    pred_xy = np.zeros((0, 2))
    site_pairs = pd.DataFrame(columns=["pred_index", "meas_index", "distance_um"])
    pred_path = None
    if forecast is not None and getattr(forecast, "sites", None) is not None:
        pred_xy, pred_score = sites_from_forecast(forecast)
        if max_sites is not None and len(pred_score) > int(max_sites):
            top = np.sort(np.argsort(-pred_score, kind="stable")[: int(max_sites)])
            pred_xy, pred_score = pred_xy[top], pred_score[top]
        sc, site_pairs = score_sites(pred_xy, peaks[["x_um", "y_um"]].to_numpy(), site_tol_um)
        scores.update({f"sites_{kk}": vv for kk, vv in sc.items()})
        if grain_stats is not None and len(pred_xy):
            fs = getattr(forecast, "sites", None)
            if isinstance(fs, pd.DataFrame) and "grain" in fs.columns and len(fs) == len(pred_xy):
                gid = fs["grain"].to_numpy(np.int64)
            else:  # a handful of sites: one lookup each
                gid = np.array([grain_graph.grain_at(x, y) for x, y in pred_xy], dtype=np.int64)
            per = pd.DataFrame({"grain": gid, "score": pred_score}).query("grain >= 0").groupby("grain")["score"].max()
            pg = per.reindex(grain_stats["grain"]).fillna(0.0).to_numpy()
            ra = rank_agreement(pg, grain_stats["p90"].to_numpy(), hot_quantile=hot_quantile)
            scores.update({f"grains_{kk}": vv for kk, vv in ra.items()})
    if forecast is not None and boundary_stats is not None and len(boundary_stats):
        measured_b = boundary_stats.set_index("boundary_id")["p90"]
        sites = getattr(forecast, "sites", None)
        if isinstance(sites, pd.DataFrame) and {"boundary_id", "score"} <= set(sites.columns):
            # localisation predicted at a boundary: the best site blocked there; boundaries without a site: 0
            per_b = sites.query("boundary_id >= 0").groupby("boundary_id")["score"].max()
            pb = per_b.reindex(measured_b.index).fillna(0.0).to_numpy(float)
            ra = rank_agreement(pb, measured_b.to_numpy(), hot_quantile=hot_quantile)
            scores.update({f"boundaries_{kk}": vv for kk, vv in ra.items()})
        barriers = getattr(forecast, "barriers", None)
        if isinstance(barriers, pd.DataFrame) and {"boundary_id", "score"} <= set(barriers.columns) and len(barriers):
            # ranked barriers only (unranked boundaries have no barrier score)
            b = barriers.groupby("boundary_id")["score"].max()
            ra = rank_agreement(b.reindex(measured_b.index).to_numpy(float), measured_b.to_numpy(),
                                hot_quantile=hot_quantile)
            scores.update({f"barriers_{kk}": vv for kk, vv in ra.items()})
    if forecast is not None:
        if getattr(forecast, "path", None) is not None and len(forecast.path):
            pred_path = path_from_forecast(forecast)
            if measured_path is not None:
                ps = score_path(pred_path, measured_path, path_tol_um)
                scores.update({f"path_{kk}": vv for kk, vv in ps.items()})
    growth_rates = dips = None
    profile = growth_profile_from(growth)
    if growth_record is not None:
        rec = growth_record
        for c in ("crack_length_um", "cycles"):
            if c not in rec.columns:
                raise ParameterError(f"growth_record should have columns crack_length_um and cycles; missing {c!r}")
        a, n = rec["crack_length_um"].to_numpy(float), rec["cycles"].to_numpy(float)
        a1, r1 = dadn_secant(a, n)
        a2, r2 = dadn_incremental_polynomial(a, n)
        growth_rates = pd.concat([
            pd.DataFrame({"method": "secant", "crack_length_um": a1, "dadn_um_per_cycle": r1}),
            pd.DataFrame({"method": "incremental_polynomial", "crack_length_um": a2, "dadn_um_per_cycle": r2}),
        ], ignore_index=True)
        measured_dips = find_rate_dips(a2, r2, prominence=dip_prominence)
        pred_dips = predicted_dips_from_growth(growth) if growth is not None else np.zeros(0)
        dsc, dips = match_dips(pred_dips, measured_dips["crack_length_um"].to_numpy(), dip_tol_um)
        scores.update({f"dips_{kk}": vv for kk, vv in dsc.items()})
    settings = {"step": k, "strain_method": strain_method, "window": window, "peak_threshold": thr,
                "peak_distance_um": peak_distance_um, "site_tol_um": site_tol_um, "band_um": band_um,
                "hot_quantile": hot_quantile, "path_tol_um": path_tol_um, "band_sigma_um": band_sigma_um,
                "band_tol_deg": band_tol_deg, "dip_prominence": dip_prominence, "dip_tol_um": dip_tol_um,
                "max_sites": max_sites,
                "synthetic": bool(series.meta.get("synthetic", False))}
    mp = None
    if measured_path is not None:
        seg = _segments(measured_path, "measured_path")
        mp = np.concatenate([seg[:, :2], seg[-1:, 2:]])
    return Comparison(tr if transform is not None else None, s, shear, shear_on_map, peaks, grain_stats,
                      boundary_stats, bands, site_pairs, growth_rates, dips, scores, settings, pred_xy, pred_path,
                      mp, profile, extent)


def write_comparison(comp: Comparison, folder: str | os.PathLike, *, title: str = "Forecast against measurements",
                     figures: bool = True) -> list[Path]:
    """Write tables, figures and a summary (with the caution) into ``folder``; returns the paths."""
    folder = Path(folder)
    written = [write_table(comp.score_table(), folder / "scores.csv"),
               write_table(comp.peaks, folder / "measured_peaks.csv")]
    if comp.transform is not None:
        written.append(write_table(comp.transform.table(), folder / "control_points.csv"))
    for name, table in (("grain_strain", comp.grain_stats), ("boundary_band_strain", comp.boundary_stats),
                        ("slip_bands", comp.bands), ("growth_rates", comp.growth_rates), ("dips", comp.dips)):
        if table is not None:
            written.append(write_table(table, folder / f"{name}.csv"))
    if figures:
        from .figures import compare as fig

        written += fig.write_figures(comp, folder)
    lines = []
    if comp.settings.get("synthetic"):
        lines += ["**The measured strain field and growth record here are SYNTHETIC (invented by slipnet's demo), "
                  "not measurements.**", ""]
    if comp.transform is not None:
        lines.append(f"Registration: {comp.transform.kind}, {len(comp.transform.residuals)} control points, "
                     f"RMS residual {comp.transform.rms:.3g} µm, largest {comp.transform.residuals.max():.3g} µm.")
    lines += ["", "| score | value |", "| --- | --- |"]
    for k, v in comp.scores.items():
        lines.append(f"| {k} | {v:.4g} |" if isinstance(v, float) else f"| {k} | {v} |")
    lines += ["", "Strain: γ_max = √(((ε_xx − ε_yy)/2)² + ε_xy²) (tensor shear) of load step "
              f"{comp.settings['step']} ({comp.settings['strain_method']} strain).",
              "Settings: " + ", ".join(f"{k}={v}" for k, v in comp.settings.items())]
    written.append(write_summary(folder, title, lines))
    return written

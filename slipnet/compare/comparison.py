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

from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from slipnet.columns import FORECAST_BARRIERS, FORECAST_SITES
from slipnet.compare.growth_records import dadn_incremental_polynomial, dadn_secant, find_rate_dips
from slipnet.compare.localisation import (
    band_orientation,
    boundary_band_statistics,
    densify_polylines,
    find_strain_peaks,
    grain_band_directions,
    grain_statistics,
)
from slipnet.compare.registration import (
    Transform,
    check_registration,
    fit_transform,
    labels_on_strain_grid,
    resample_to_map,
)
from slipnet.compare.scores import (
    match_dips,
    path_segments,
    rank_agreement,
    score_band_directions,
    score_path,
    score_sites,
)
from slipnet.crystal.slip_systems import schmid_factors, slip_systems, slip_trace_angles
from slipnet.errors import NumericalError, ParameterError
from slipnet.grains.build import build_grain_graph
from slipnet.io.maps import read_map
from slipnet.io.strain import read_strain
from slipnet.io.tables import (
    ForecastTables,
    GrowthTables,
    read_control_points,
    read_forecast_folder,
    read_forecast_tables,
    read_growth_folder,
    read_growth_record,
    read_measured_path,
)
from slipnet.maps.strain import StrainSeries, max_shear_strain

#: The score columns of the forecast tables this module reads.
SITE_SCORE = FORECAST_SITES[3]
BARRIER_SCORE = FORECAST_BARRIERS[4]

__all__ = [
    "Comparison",
    "compare_files",
    "compare_forecast",
    "grain_traces",
    "growth_profile_from",
    "path_from_forecast",
    "predicted_dips_from_growth",
    "sites_from_forecast",
]


# ======================================================================================= adapters
def sites_from_forecast(forecast) -> tuple[np.ndarray, np.ndarray]:
    """``(xy (n, 2) µm, score (n,))`` of the predicted localisation sites of a ``CrackForecast``
    (or a DataFrame with columns ``x_um``, ``y_um`` and optionally ``site_score_mpa_um``)."""
    sites = forecast.sites if hasattr(forecast, "sites") else forecast
    if sites is None or len(sites) == 0:
        return np.zeros((0, 2)), np.zeros(0)
    for c in ("x_um", "y_um"):
        if c not in sites.columns:
            raise ParameterError(f"forecast sites should have columns x_um, y_um, site_score_mpa_um; missing {c!r}")
    score = sites[SITE_SCORE].to_numpy(float) if SITE_SCORE in sites.columns else np.ones(len(sites))
    return sites[["x_um", "y_um"]].to_numpy(float), score


def path_from_forecast(forecast) -> pd.DataFrame:
    """The predicted path segments (``x0_um, y0_um, x1_um, y1_um``) of a ``CrackForecast`` or a segment table."""
    path = forecast.path if hasattr(forecast, "path") else forecast
    path_segments(path, "forecast path")
    return path


def predicted_dips_from_growth(growth) -> np.ndarray:
    """Crack lengths (µm) of the predicted growth-rate dips.

    Accepts a DataFrame of dips (column ``crack_length_um``), a growth profile
    or result understood by ``slipnet.growth.predicted_dips``, or an object with a ``dips`` table.
    """
    if growth is None:
        return np.zeros(0)
    table = None
    if isinstance(growth, pd.DataFrame) and "depth_ratio" in growth.columns:
        table = growth
    elif hasattr(growth, "dips") and isinstance(growth.dips, pd.DataFrame):
        table = growth.dips
    else:
        try:
            from slipnet.growth.model import predicted_dips
        except ImportError as err:
            raise ParameterError("growth should be a dips table (crack_length_um column) while slipnet.growth "
                                 "is not available") from err
        table = predicted_dips(growth)
    if "crack_length_um" in table.columns:
        return table["crack_length_um"].to_numpy(float)
    raise ParameterError(f"predicted dips should have a crack_length_um column; got {list(table.columns)}")


def growth_profile_from(growth) -> pd.DataFrame | None:
    """A predicted growth profile (``crack_length_um``, ``dadn_um_per_cycle``, optional ``cycles``) or None."""
    if growth is None:
        return None
    prof = growth if isinstance(growth, pd.DataFrame) else getattr(growth, "profile", None)
    if isinstance(prof, pd.DataFrame) and {"crack_length_um", "dadn_um_per_cycle"} <= set(prof.columns):
        return prof
    return None


















def compare_files(strain_path, *, points=None, kind: str = "affine", gg=None, map_path=None,
                  threshold_deg: float = 15.0, forecast_folder=None, sites=None, path=None, barriers=None,
                  measured_path=None, record=None, growth_folder=None, strain_options: dict | None = None,
                  points_options: dict | None = None, record_options: dict | None = None,
                  **options) -> Comparison:
    """:func:`compare_forecast` on files: a strain file, control points, map, forecast and growth tables.

    The grains come from ``gg`` or, failing that, from the map at ``map_path`` rebuilt at
    ``threshold_deg``. ``strain_options`` go to :func:`slipnet.io.read_strain` (column mapping,
    units, encoding...), ``points_options`` to :func:`slipnet.io.read_control_points` and
    ``record_options`` to :func:`slipnet.io.read_growth_record`; what those readers had to guess
    joins :attr:`Comparison.warnings`. ``options`` go to :func:`compare_forecast` (tolerances,
    strain method, load axis...).
    """
    series = read_strain(strain_path, **(strain_options or {}))
    notes: list[str] = []
    transform = None
    if points is not None:
        cp_notes: list[str] = []
        src, dst = read_control_points(points, notes=cp_notes, **(points_options or {}))
        notes += [f"control points: {n}" for n in cp_notes]
        transform = fit_transform(src, dst, kind)
    if gg is None and map_path is not None:
        gg = build_grain_graph(read_map(map_path), threshold_deg)
    fc = read_forecast_folder(forecast_folder) if forecast_folder is not None else ForecastTables()
    over = read_forecast_tables(sites=sites, path=path, barriers=barriers)
    fc = ForecastTables(over.sites if over.sites is not None else fc.sites,
                        over.path if over.path is not None else fc.path,
                        over.barriers if over.barriers is not None else fc.barriers)
    has_fc = any(t is not None for t in (fc.sites, fc.path, fc.barriers))
    growth = read_growth_folder(growth_folder) if growth_folder is not None else None
    if growth is not None and growth.dips is None:
        growth = GrowthTables(pd.DataFrame({"crack_length_um": [], "depth_ratio": []}), growth.profile)
    rec = None
    if record:
        rec_notes: list[str] = []
        rec = read_growth_record(record, notes=rec_notes, **(record_options or {}))
        notes += [f"growth record: {n}" for n in rec_notes]
    comp = compare_forecast(series, forecast=fc if has_fc else None, gg=gg, transform=transform,
                            measured_path=read_measured_path(measured_path) if measured_path else None,
                            growth_record=rec, growth=growth, **options)
    comp.warnings.extend(notes)
    return comp


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
        Predicted growth profile (``crack_length_um``, ``dadn_um_per_cycle``) for the figure.
    map_extent : tuple or None
        ``imshow`` extent of the map grid (µm) when a grain graph was given.
    warnings : list of str
        What the user should check: registration checks (grid step against the map's, residual,
        overlap), notes of the strain reader, scores that could not be computed.
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
    warnings: list = field(default_factory=list)

    def score_table(self) -> pd.DataFrame:
        """Scores as a two-column table (``score``, ``value``)."""
        return pd.DataFrame({"score": list(self.scores), "value": [self.scores[k] for k in self.scores]})


def grain_traces(gg, load_axis, n_traces: int) -> np.ndarray | None:
    """Trace angles (deg, map frame) of the ``n_traces`` highest-Schmid systems of every grain, or None."""
    systems = slip_systems("bcc")
    q = np.asarray(gg.mean_quats, float)
    m = np.abs(schmid_factors(q, np.asarray(load_axis, float), systems))
    t = slip_trace_angles(q, systems)
    top = np.argsort(-m, axis=1)[:, :n_traces]
    return np.take_along_axis(t, top, axis=1)


def compare_forecast(series: StrainSeries, *, forecast=None, gg=None, transform: Transform | None = None,
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
    gg : GrainGraph or None
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
    valid = np.isfinite(shear)
    finite = shear[valid]
    if finite.size == 0:
        raise NumericalError("the measured strain field has no valid point")
    warnings = [f"strain file: {n}" for n in series.meta.get("notes", []) or []]
    # stop before any statistics when the registered field cannot be compared with the map
    if gg is not None:
        sx, sy = s.coordinates()
        pm = tr.apply(np.stack([sx.ravel(), sy.ravel()], 1))
        ii, jj = gg.omap.index_of(pm[:, 0], pm[:, 1])
        on_map = ((ii >= 0) & (jj >= 0)).reshape(shear.shape)
        warnings += check_registration(s, transform, map_step=gg.omap.step, on_map=on_map, valid=valid,
                                       map_extent=gg.omap.extent)
    else:
        warnings += check_registration(s, transform)
    thr = float(np.quantile(finite, 0.95)) if peak_threshold is None else float(peak_threshold)
    peaks = find_strain_peaks(shear, s, threshold=thr, min_distance_um=peak_distance_um, transform=tr)
    scores: dict = {"registration_rms_um": tr.rms if transform is not None else float("nan"),
                    "n_measured_peaks": len(peaks)}
    on_grains = _measure_on_grains(gg, shear, s, tr, thr, band_um=band_um, band_sigma_um=band_sigma_um,
                                   load_axis=load_axis, n_traces=n_traces, band_tol_deg=band_tol_deg, scores=scores)
    pred_xy, site_pairs = _score_forecast_sites(forecast, gg, peaks, on_grains["grain_stats"], site_tol_um,
                                                hot_quantile, max_sites, scores)
    _score_boundaries(forecast, on_grains["boundary_stats"], hot_quantile, scores)
    pred_path = None
    if forecast is not None and getattr(forecast, "path", None) is not None and len(forecast.path):
        pred_path = path_from_forecast(forecast)
        if measured_path is not None:
            scores.update({f"path_{kk}": vv for kk, vv in score_path(pred_path, measured_path, path_tol_um).items()})
    growth_rates, dips = _score_growth(growth_record, growth, dip_prominence, dip_tol_um, scores)
    settings = {"step": k, "strain_method": strain_method, "window": window, "peak_threshold": thr,
                "peak_distance_um": peak_distance_um, "site_tol_um": site_tol_um, "band_um": band_um,
                "hot_quantile": hot_quantile, "path_tol_um": path_tol_um, "band_sigma_um": band_sigma_um,
                "band_tol_deg": band_tol_deg, "dip_prominence": dip_prominence, "dip_tol_um": dip_tol_um,
                "max_sites": max_sites,
                "synthetic": bool(series.meta.get("synthetic", False))}
    nan = [key for key, v in scores.items() if key != "registration_rms_um" and isinstance(v, float) and v != v]
    if nan:
        warnings.append(f"these scores could not be computed (NaN): {', '.join(nan)}; rank scores need at least "
                        "two grains (or boundaries) with measured strain and distinct predictions, site scores at "
                        "least one predicted site and one measured peak")
    mp = None
    if measured_path is not None:
        seg = path_segments(measured_path, "measured_path")
        mp = np.concatenate([seg[:, :2], seg[-1:, 2:]])
    return Comparison(tr if transform is not None else None, s, shear, on_grains["shear_on_map"], peaks,
                      on_grains["grain_stats"], on_grains["boundary_stats"], on_grains["bands"], site_pairs,
                      growth_rates, dips, scores, settings, pred_xy, pred_path, mp, growth_profile_from(growth),
                      on_grains["extent"], warnings)


def _measure_on_grains(gg, shear, s, tr, thr: float, *, band_um, band_sigma_um, load_axis, n_traces, band_tol_deg,
                       scores: dict) -> dict:
    """Step: the measured shear on the map grid, per grain, per boundary band, and its band directions."""
    out = {"grain_stats": None, "boundary_stats": None, "bands": None, "shear_on_map": None, "extent": None}
    if gg is None:
        return out
    omap = gg.omap
    sx, sy = s.coordinates()
    mxy = tr.apply(np.stack([sx.ravel(), sy.ravel()], 1))
    out["extent"] = tuple(float(e) for e in omap.pixel_extent())
    gx, gy = omap.coordinates()
    out["shear_on_map"] = resample_to_map(shear, s, tr, gx, gy)
    labels_s = labels_on_strain_grid(gg.labels, omap, s, tr)
    out["grain_stats"] = grain_statistics(shear, labels_s)
    pts, ids = densify_polylines(gg.boundary_polylines, min(omap.step, s.step) / 2.0)
    out["boundary_stats"] = boundary_band_statistics(shear.ravel(), mxy[:, 0], mxy[:, 1], pts, ids, band_um)
    ang, coh = band_orientation(shear, s.step, sigma_um=band_sigma_um)
    # bands only where the strain localised: above the peak threshold, coherent, not a few stray points
    bands = grain_band_directions(shear, labels_s, tr.apply_directions(ang), coh, threshold=thr,
                                  min_coherence=0.5, min_points=10)
    if load_axis is not None and len(bands):
        traces = grain_traces(gg, load_axis, n_traces)
        if traces is not None:
            t = traces[bands["grain"].to_numpy()]
            bscore, err = score_band_directions(bands["band_angle_deg"], t, band_tol_deg)
            bands = bands.assign(trace_error_deg=err, matched=err <= band_tol_deg)
            scores.update({f"bands_{kk}": vv for kk, vv in bscore.items()})
    out["bands"] = bands
    return out


def _score_forecast_sites(forecast, gg, peaks, grain_stats, site_tol_um, hot_quantile, max_sites,
                          scores: dict) -> tuple[np.ndarray, pd.DataFrame]:
    """Step: predicted sites against measured peaks, and per-grain rank agreement."""
    pred_xy = np.zeros((0, 2))
    site_pairs = pd.DataFrame(columns=["pred_index", "meas_index", "distance_um"])
    if forecast is None or getattr(forecast, "sites", None) is None:
        return pred_xy, site_pairs
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
            gid = np.array([gg.grain_at(x, y) for x, y in pred_xy], dtype=np.int64)
        per = pd.DataFrame({"grain": gid, "s": pred_score}).query("grain >= 0").groupby("grain")["s"].max()
        pg = per.reindex(grain_stats["grain"]).fillna(0.0).to_numpy()
        ra = rank_agreement(pg, grain_stats["p90"].to_numpy(), hot_quantile=hot_quantile)
        scores.update({f"grains_{kk}": vv for kk, vv in ra.items()})
    return pred_xy, site_pairs


def _score_boundaries(forecast, boundary_stats, hot_quantile, scores: dict) -> None:
    """Step: boundary-band strain against the sites blocked at each boundary and the ranked barriers."""
    if forecast is None or boundary_stats is None or not len(boundary_stats):
        return
    measured_b = boundary_stats.set_index("boundary_id")["p90"]
    sites = getattr(forecast, "sites", None)
    if isinstance(sites, pd.DataFrame) and {"boundary_id", SITE_SCORE} <= set(sites.columns):
        # localisation predicted at a boundary: the best site blocked there; boundaries without a site: 0
        per_b = sites.query("boundary_id >= 0").groupby("boundary_id")[SITE_SCORE].max()
        pb = per_b.reindex(measured_b.index).fillna(0.0).to_numpy(float)
        ra = rank_agreement(pb, measured_b.to_numpy(), hot_quantile=hot_quantile)
        scores.update({f"boundaries_{kk}": vv for kk, vv in ra.items()})
    barriers = getattr(forecast, "barriers", None)
    ranked = isinstance(barriers, pd.DataFrame) and {"boundary_id", BARRIER_SCORE} <= set(barriers.columns)
    if ranked and len(barriers):
        # ranked barriers only (unranked boundaries have no barrier score)
        b = barriers.groupby("boundary_id")[BARRIER_SCORE].max()
        ra = rank_agreement(b.reindex(measured_b.index).to_numpy(float), measured_b.to_numpy(),
                            hot_quantile=hot_quantile)
        scores.update({f"barriers_{kk}": vv for kk, vv in ra.items()})


def _score_growth(growth_record, growth, dip_prominence, dip_tol_um, scores: dict):
    """Step: measured da/dN (ASTM E647 secant and incremental polynomial) and its dips against the predicted."""
    if growth_record is None:
        return None, None
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
    return growth_rates, dips



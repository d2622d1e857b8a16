"""Tables read back from files: forecast and growth outputs, measured paths, growth records, control points."""

from __future__ import annotations

import os
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from slipnet._inputs import checked_input
from slipnet.columns import SEGMENT_XY
from slipnet.errors import InputFileError

__all__ = ["ForecastTables", "GrowthTables", "read_control_points", "read_csv_table", "read_forecast_folder",
           "read_forecast_tables", "read_growth_folder", "read_growth_record", "read_measured_path"]


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
    if not path.exists():
        raise InputFileError(f"{what} not found (no such file)", path=str(path))
    checked_input(path, f"{what} table")
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
    """Read forecast tables written as CSV: sites (``x_um, y_um``, optionally ``site_score_mpa_um``),
    path (``x0_um, y0_um, x1_um, y1_um``), barriers (``boundary_id, barrier_score``); any may be None."""
    return ForecastTables(
        read_csv_table(sites, ("x_um", "y_um"), "sites") if sites else None,
        read_csv_table(path, SEGMENT_XY, "path") if path else None,
        read_csv_table(barriers, ("boundary_id", "barrier_score"), "barriers") if barriers else None,
    )


def read_measured_path(path: str | os.PathLike) -> np.ndarray | pd.DataFrame:
    """A measured crack path: CSV polyline (``x_um, y_um``) or segments (``x0_um, y0_um, x1_um, y1_um``)."""
    t = read_csv_table(path, (), "measured path")
    if set(SEGMENT_XY) <= set(t.columns):
        return read_csv_table(path, SEGMENT_XY, "measured path")
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
    return GrowthTables(
        read_csv_table(dips, ("crack_length_um",), "growth dips") if dips.exists() else None,
        read_csv_table(prof, ("crack_length_um", "dadn_um_per_cycle"), "growth profile") if prof.exists() else None)


_CP_COLUMNS = ("strain_x_um", "strain_y_um", "map_x_um", "map_y_um")


def read_control_points(path: str | os.PathLike) -> tuple[np.ndarray, np.ndarray]:
    """Control-point pairs from a CSV with columns ``strain_x_um, strain_y_um, map_x_um, map_y_um``.

    Returns ``(strain_points, map_points)``, each ``(n, 2)`` µm.
    """
    path = Path(path)
    try:
        t = pd.read_csv(path, comment="#")
    except (OSError, pd.errors.ParserError, pd.errors.EmptyDataError) as err:
        raise InputFileError(f"cannot read control points: {err}", path=str(path)) from err
    t.columns = [str(c).strip() for c in t.columns]
    for c in _CP_COLUMNS:
        if c not in t.columns:
            raise InputFileError(f"column {c!r} is missing; control points need {_CP_COLUMNS}", path=str(path),
                                 column=c)
    vals = t[list(_CP_COLUMNS)].apply(pd.to_numeric, errors="coerce").to_numpy(float)
    bad = ~np.all(np.isfinite(vals), axis=1)
    if bad.any():
        raise InputFileError("control point coordinates should be finite numbers", path=str(path),
                             line=int(np.flatnonzero(bad)[0]) + 2)
    return vals[:, :2], vals[:, 2:]

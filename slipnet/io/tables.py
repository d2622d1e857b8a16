"""Tables read back from files: forecast and growth outputs, measured paths, growth records, control points.

Control points and growth records come from laboratories in their own shape: any delimiter, any
column names (a mapping from slipnet's names), lengths in nm, µm, mm or pixels and cycles as
counts or thousands, stated in the header brackets (``a [mm]``, ``N [kcycles]``) or as options
(``docs/own-data.md``). Text encodings are detected (UTF-8, UTF-16, else Windows-1252, noted) or
stated.
"""

from __future__ import annotations

import io as _io
import os
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from slipnet._inputs import check_allocation, checked_input, guarded_reader
from slipnet.columns import SEGMENT_XY
from slipnet.errors import InputFileError
from slipnet.io.strain import (
    canonical_length_unit,
    decode_text,
    length_factor,
    match_columns,
    name_key,
    read_text_table,
    split_unit,
)

__all__ = [
    "CONTROL_POINT_NAMES",
    "CYCLE_UNITS",
    "GROWTH_RECORD_NAMES",
    "ForecastTables",
    "GrowthTables",
    "read_control_points",
    "read_csv_table",
    "read_forecast_folder",
    "read_forecast_tables",
    "read_growth_folder",
    "read_growth_record",
    "read_measured_path",
]


# ===================================================================================== table files
@dataclass(frozen=True)
class ForecastTables:
    """Forecast outputs read back from CSV tables (same columns as a ``CrackForecast``)."""

    sites: pd.DataFrame | None = None
    path: pd.DataFrame | None = None
    barriers: pd.DataFrame | None = None


@guarded_reader("table", "check that it is a comma-separated table with a header row")
def read_csv_table(path: str | os.PathLike, required: tuple[str, ...], what: str) -> pd.DataFrame:
    """Read a CSV table and check that it has the ``required`` columns (numeric where named)."""
    path = Path(path)
    if not path.exists():
        raise InputFileError(f"{what} not found (no such file)", path=str(path))
    checked_input(path, f"{what} table")
    check_allocation(path.stat().st_size * 12.0, 1, f"the {what} table once parsed (about 12 bytes per character)",
                     path=path)
    text, _ = decode_text(path.read_bytes(), path, None, f"{what} table", [])
    try:
        t = pd.read_csv(_io.StringIO(text), comment="#")
    except (pd.errors.ParserError, pd.errors.EmptyDataError, ValueError) as err:
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


@guarded_reader("measured crack path", "give a CSV of x_um, y_um points (docs/own-data.md)")
def read_measured_path(path: str | os.PathLike) -> np.ndarray | pd.DataFrame:
    """A measured crack path: CSV polyline (``x_um, y_um``) or segments (``x0_um, y0_um, x1_um, y1_um``)."""
    t = read_csv_table(path, (), "measured path")
    if set(SEGMENT_XY) <= set(t.columns):
        return read_csv_table(path, SEGMENT_XY, "measured path")
    return read_csv_table(path, ("x_um", "y_um"), "measured path")[["x_um", "y_um"]].to_numpy(float)


#: slipnet's names for the columns of a crack-growth record.
GROWTH_RECORD_NAMES = ("cycles", "crack_length")

#: Cycle units the record reader accepts, as cycles per unit.
CYCLE_UNITS = {"cycles": 1.0, "kcycles": 1e3, "mcycles": 1e6}

_RECORD_ALIASES = {
    "cycles": {"cycles", "cycle", "n", "ncycles", "numberofcycles", "kcycles", "kilocycles", "life", "nk"},
    "crack_length": {"cracklength", "a", "length", "crack", "surfacecracklength", "cracksize", "lengtha", "c"},
}
_CYCLE_SPELLINGS = {"cycles": "cycles", "cycle": "cycles", "cyc": "cycles", "n": "cycles", "1": "cycles",
                    "count": "cycles", "kcycles": "kcycles", "kcycle": "kcycles", "kcyc": "kcycles",
                    "kilocycles": "kcycles", "k": "kcycles", "x1000": "kcycles", "×1000": "kcycles", "1e3": "kcycles",
                    "10^3": "kcycles", "x10^3": "kcycles", "×10^3": "kcycles", "x1e3": "kcycles", "×10³": "kcycles",
                    "thousands": "kcycles", "mcycles": "mcycles", "megacycles": "mcycles", "x10^6": "mcycles",
                    "×10^6": "mcycles", "1e6": "mcycles", "x1e6": "mcycles", "millions": "mcycles"}
_RECORD_FLAGS = {"columns": "--record-column NAME=COLUMN", "length_unit": "--record-length-unit",
                 "cycles_unit": "--record-cycles-unit", "encoding": "--encoding"}


def _lab_table(path: Path, what: str, encoding, delimiter, flags: dict, notes: list):
    """A lab table (any delimiter, header, encoding) of a small file, after the input guard."""
    if not path.exists():
        raise InputFileError(f"{what} not found (no such file)", path=str(path))
    checked_input(path, what)
    check_allocation(path.stat().st_size * 12.0, 1, f"the {what} once parsed (about 12 bytes per character)",
                     path=path)
    text, used = decode_text(path.read_bytes(), path, encoding, what, notes)
    return read_text_table(text, path, delimiter=delimiter, encoding=used, what=what, flags=flags)


def _cycles_unit(text) -> str | None:
    if text is None:
        return None
    return _CYCLE_SPELLINGS.get(str(text).strip().lower().replace(" ", ""))


@guarded_reader("crack-growth record", "give a CSV of cycles and crack length (docs/own-data.md)")
def read_growth_record(path: str | os.PathLike, *, columns: dict | None = None, length_unit: str | None = None,
                       cycles_unit: str | None = None, encoding: str | None = None, delimiter: str | None = None,
                       notes: list | None = None) -> pd.DataFrame:
    """A crack-growth record: cycles and surface crack length, in any column names and units.

    Parameters
    ----------
    path
        CSV/TXT table (any delimiter; see ``docs/own-data.md``). Our own form is ``cycles,
        crack_length_um``.
    columns
        slipnet's names ``cycles`` and ``crack_length`` → the file's headers (as written, without the
        unit, or ``"#N"``); default by the documented aliases (``N``, ``a``, ``crack length``...).
    length_unit
        Unit of the crack lengths (nm, um, mm); default the header's (``a [mm]``, ``crack_length_um``).
    cycles_unit
        ``cycles``, ``kcycles`` (thousands) or ``mcycles``; default the header's (``N [kcycles]``,
        ``N (x1000)``, a column named ``kcycles``), else plain counts.
    encoding, delimiter
        As :func:`slipnet.io.read_strain` (default detected).
    notes
        A list the reader appends what it had to guess to (printed by the commands).

    Returns
    -------
    DataFrame
        ``cycles`` (counts) and ``crack_length_um`` (µm), one row per reading.

    Raises
    ------
    InputFileError
        Columns not found, units missing or unknown, a value that is not a number, cycles that do
        not increase, negative lengths; naming the file, line and column and the fix.
    """
    path = Path(path)
    notes = [] if notes is None else notes
    t = _lab_table(path, "growth record", encoding, delimiter, _RECORD_FLAGS, notes)
    found = match_columns(t.headers, _RECORD_ALIASES, columns, path, what="growth record", flags=_RECORD_FLAGS)
    for name in GROWTH_RECORD_NAMES:
        if name not in found:
            raise InputFileError(f"no {name} column found (columns found: {', '.join(repr(h) for h in t.headers)}); "
                                 f"map it with columns={{{name!r}: 'NAME IN FILE'}} ({_RECORD_FLAGS['columns']} "
                                 "on the command line)", path=str(path))
    kc, ka = found["cycles"], found["crack_length"]
    unit_c = cycles_unit if cycles_unit is not None else t.units[kc]
    if unit_c is None:
        bare = name_key(split_unit(t.headers[kc])[0])
        unit_c = "kcycles" if bare in ("kcycles", "kilocycles", "nk") else "cycles"
        stated = False
    else:
        stated = True
    canon_c = _cycles_unit(unit_c)
    if canon_c is None:
        raise InputFileError(f"{unit_c!r} is not a cycles unit slipnet reads (cycles, kcycles, mcycles, x1000); give "
                             f"it with cycles_unit='kcycles' ({_RECORD_FLAGS['cycles_unit']})", path=str(path),
                             column=t.headers[kc])
    unit_a = length_unit if length_unit is not None else t.units[ka]
    if length_unit is not None and t.units[ka] is not None and canonical_length_unit(t.units[ka]) != \
            canonical_length_unit(length_unit):
        notes.append(f"column {t.headers[ka]!r} says [{t.units[ka]}] but length_unit={length_unit!r} was given: "
                     f"read as {length_unit}")
    if unit_a is None:
        raise InputFileError(f"column {t.headers[ka]!r} states no length unit (a header such as 'a [mm]' or "
                             f"'crack_length_um'); give it with length_unit='mm' ({_RECORD_FLAGS['length_unit']})",
                             path=str(path), column=t.headers[ka])
    if canonical_length_unit(unit_a) == "px":
        raise InputFileError("crack lengths in pixels: convert them to µm or mm first", path=str(path),
                             column=t.headers[ka])
    fa = length_factor(unit_a, path=path, column=t.headers[ka], flags=_RECORD_FLAGS)
    n = t.numbers(kc, path) * CYCLE_UNITS[canon_c]
    a = t.numbers(ka, path) * fa
    for vals, k in ((n, kc), (a, ka)):
        bad = ~np.isfinite(vals)
        if bad.any():
            r = int(np.flatnonzero(bad)[0])
            raise InputFileError("should be a number (a record has no missing readings; drop the row)",
                                 path=str(path), line=int(t.lines[r]), column=t.headers[k])
    if np.any(a < 0):
        r = int(np.flatnonzero(a < 0)[0])
        raise InputFileError(f"crack length {a[r]:g} µm is negative", path=str(path), line=int(t.lines[r]),
                             column=t.headers[ka])
    if np.any(np.diff(n) <= 0):
        r = int(np.flatnonzero(np.diff(n) <= 0)[0]) + 1
        raise InputFileError(f"cycles should increase from row to row; {n[r]:g} follows {n[r - 1]:g}: sort the record "
                             "by cycles, or check that the cycles column is mapped (not the crack length)",
                             path=str(path), line=int(t.lines[r]), column=t.headers[kc])
    if a.size and float(a.max()) < 1.0:
        notes.append(f"the crack lengths reach only {a.max():.3g} µm: if the record is in mm, give "
                     f"length_unit='mm' ({_RECORD_FLAGS['length_unit']})")
    if not stated and n.size and float(n.max()) < 1000:
        notes.append(f"the cycles reach only {n.max():g}: if the record counts thousands of cycles, give "
                     f"cycles_unit='kcycles' ({_RECORD_FLAGS['cycles_unit']})")
    out = pd.DataFrame({"cycles": n, "crack_length_um": a})
    out.attrs["reader"] = {"columns": {k: t.headers[v] for k, v in found.items()}, "length_unit": str(unit_a),
                           "cycles_unit": canon_c, "encoding": t.encoding}
    return out


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


#: slipnet's names for the columns of a control-point table.
CONTROL_POINT_NAMES = ("strain_x", "strain_y", "map_x", "map_y")

_CP_ALIASES = {
    "strain_x": {"strainx", "dicx", "imagex", "srcx", "sourcex", "xstrain", "xdic", "ximage"},
    "strain_y": {"strainy", "dicy", "imagey", "srcy", "sourcey", "ystrain", "ydic", "yimage"},
    "map_x": {"mapx", "ebsdx", "dstx", "destx", "xmap", "xebsd"},
    "map_y": {"mapy", "ebsdy", "dsty", "desty", "ymap", "yebsd"},
}
_CP_FLAGS = {"columns": "--points-column NAME=COLUMN", "length_unit": "--points-length-unit",
             "strain_length_unit": "--points-strain-unit", "pixel_size_um": "--strain-pixel-size",
             "encoding": "--encoding"}


@guarded_reader("control-point table", "give a CSV of strain and map positions (docs/own-data.md)")
def read_control_points(path: str | os.PathLike, *, columns: dict | None = None, length_unit: str | None = None,
                        strain_length_unit: str | None = None, pixel_size_um: float | None = None,
                        encoding: str | None = None, delimiter: str | None = None,
                        notes: list | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Control-point pairs: each fiducial mark's position in the strain images and in the map.

    Parameters
    ----------
    path
        CSV/TXT table (any delimiter). Our own form is ``strain_x_um, strain_y_um, map_x_um,
        map_y_um``; any other names by ``columns`` or the documented aliases (``dic_x``, ``ebsd_x``...).
    columns
        slipnet's names ``strain_x, strain_y, map_x, map_y`` → the file's headers.
    length_unit
        Unit of every position (nm, um, mm); default each header's (``map_x [mm]``, ``map_x_um``).
    strain_length_unit
        Unit of the strain-image positions only (e.g. ``px`` with ``pixel_size_um``, the strain
        file's pixel size).
    pixel_size_um
        µm per pixel of the strain images, for positions in ``px``.
    encoding, delimiter
        As :func:`slipnet.io.read_strain` (default detected).
    notes
        A list the reader appends what it had to guess to.

    Returns
    -------
    (strain_points, map_points)
        Each ``(n, 2)`` µm.
    """
    path = Path(path)
    notes = [] if notes is None else notes
    t = _lab_table(path, "control points", encoding, delimiter, _CP_FLAGS, notes)
    found = match_columns(t.headers, _CP_ALIASES, columns, path, what="control-point table", flags=_CP_FLAGS)
    for name in CONTROL_POINT_NAMES:
        if name not in found:
            raise InputFileError(f"column {name + '_um'!r} is missing; control points need strain_x_um, strain_y_um, "
                                 f"map_x_um, map_y_um (columns found: {', '.join(repr(h) for h in t.headers)}); "
                                 f"map other names with columns={{{name!r}: 'NAME IN FILE'}} "
                                 f"({_CP_FLAGS['columns']} on the command line)", path=str(path), column=name + "_um")
    vals = []
    for name in CONTROL_POINT_NAMES:
        k = found[name]
        given = strain_length_unit if name.startswith("strain") and strain_length_unit is not None else length_unit
        unit = given if given is not None else t.units[k]
        if given is not None and t.units[k] is not None and canonical_length_unit(t.units[k]) != \
                canonical_length_unit(given):
            notes.append(f"column {t.headers[k]!r} says [{t.units[k]}] but {given!r} was given: read as {given}")
        if unit is None:
            raise InputFileError(f"column {t.headers[k]!r} states no length unit (a header such as 'map_x [mm]' or "
                                 f"'map_x_um'); give it with length_unit='um' ({_CP_FLAGS['length_unit']})",
                                 path=str(path), column=t.headers[k])
        if canonical_length_unit(unit) == "px" and name.startswith("map"):
            raise InputFileError("map positions in pixels: give them in µm (point index × map step)",
                                 path=str(path), column=t.headers[k])
        f = length_factor(unit, path=path, column=t.headers[k], pixel_size_um=pixel_size_um,
                          option="strain_length_unit" if name.startswith("strain") else "length_unit", flags=_CP_FLAGS)
        vals.append(t.numbers(k, path) * f)
    v = np.stack(vals, axis=1)
    bad = ~np.all(np.isfinite(v), axis=1)
    if bad.any():
        raise InputFileError("control point coordinates should be finite numbers", path=str(path),
                             line=int(t.lines[int(np.flatnonzero(bad)[0])]))
    return v[:, :2], v[:, 2:]

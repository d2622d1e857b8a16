"""slipnet's own text table of map points ("slipnet-points", version 1); see ``docs/map-format.md``.

Layout::

    # slipnet-points 1
    # units = x_um y_um: µm; phi1_deg Phi_deg phi2_deg: degrees, Bunge, sample -> crystal; quality: as recorded
    # grid = square
    # step_um = 0.5
    # nx = 120
    # ny = 80
    # name = my map
    # phase 0 = ferrite bcc 0.2866
    # phase 1 = austenite fcc 0.3591
    # meta = {"frame_rotation": [0, 1, 0, 0]}
    x_um  y_um  phi1_deg  Phi_deg  phi2_deg  phase  quality
    0.000000  0.000000  12.3400000000  ...

Header lines start with ``#``; ``key = value`` lines carry settings, other ``#`` lines are free
comments. The first line without ``#`` names the columns (any order, whitespace separated). Data
rows follow, whitespace separated, in any order. Parsing of data rows is vectorised (pandas' C
reader); the per-line scan below runs only to locate an error.
"""

from __future__ import annotations

import json
import math
import os
from pathlib import Path

import numpy as np
import pandas as pd

from slipnet.crystal.orientation import quat_from_euler
from slipnet.errors import InputFileError
from slipnet.io._grid import place_points, short_rows_note
from slipnet.maps.orientation_map import CUBIC_STRUCTURES, GRIDS, STRUCTURES, OrientationMap, Phase

FORMAT_NAME = "slipnet-points"
FORMAT_VERSION = 1
MAGIC = f"# {FORMAT_NAME} {FORMAT_VERSION}"
COLUMNS = ("x_um", "y_um", "phi1_deg", "Phi_deg", "phi2_deg", "phase", "quality")
ANGLE_LIMITS = {"phi1_deg": 360.0, "Phi_deg": 180.0, "phi2_deg": 360.0}
HEADER_KEYS = ("units", "grid", "step_um", "nx", "ny", "name", "phase N", "meta")
# Enough digits that the quaternions rebuilt from the printed angles agree to ~1e-12.
_ROW_FORMAT = "%.6f\t%.6f\t%.10f\t%.10f\t%.10f\t%d\t%.10g\n"
_CHUNK = 4096
_ANGLE_TOL = 1e-7


# ---------------------------------------------------------------------------------------- writing
def write_text(omap: OrientationMap, tmp: Path) -> None:
    """Write ``omap`` as a slipnet-points table into the (temporary) path ``tmp``."""
    ny, nx = omap.shape
    x, y = omap.coordinates()
    eul = omap.euler()
    eul[~omap.indexed] = 0.0
    data = np.column_stack(
        [x.ravel(), y.ravel(), eul.reshape(-1, 3), omap.phase.ravel().astype(np.float64), omap.quality.ravel()]
    )
    try:
        meta = json.dumps(omap.meta, ensure_ascii=False, default=json_default)
    except (TypeError, ValueError) as err:
        from slipnet.errors import ParameterError

        raise ParameterError(f"map meta should hold JSON-compatible values only; {err}") from err
    lines = [
        MAGIC,
        "# units = x_um y_um: µm; phi1_deg Phi_deg phi2_deg: degrees, Bunge, sample -> crystal; "
        "phase: index into the phase lines, -1 unindexed (angles then 0); quality: as recorded",
        f"# grid = {omap.grid}",
        f"# step_um = {omap.step!r}",
        f"# nx = {nx}",
        f"# ny = {ny}",
        f"# name = {_one_line(omap.name)}",
    ]
    lines += [f"# phase {k} = {p.name} {p.structure} {p.lattice_parameter_nm!r}" for k, p in enumerate(omap.phases)]
    lines += [f"# meta = {meta}", "\t".join(COLUMNS)]
    with open(tmp, "w", encoding="utf-8", newline="\n") as fh:
        fh.write("\n".join(lines) + "\n")
        # A Python loop over chunks of rows (not over rows): one format call per chunk.
        for s in range(0, data.shape[0], _CHUNK):
            blk = data[s : s + _CHUNK]
            fh.write((_ROW_FORMAT * blk.shape[0]) % tuple(blk.ravel().tolist()))


def _one_line(text: str) -> str:
    return " ".join(str(text).split())


def json_default(value):
    if isinstance(value, np.generic):
        return value.item()
    if isinstance(value, np.ndarray):
        return value.tolist()
    raise TypeError(f"{type(value).__name__} is not JSON serialisable")


# ---------------------------------------------------------------------------------------- reading
def looks_like_text_table(head: bytes) -> bool:
    """Whether the first bytes of a file start with our format line."""
    return head.lstrip(b"\xef\xbb\xbf").startswith(f"# {FORMAT_NAME}".encode())


def _header(path: str, fh) -> tuple[dict, list[str], int]:
    """Read header lines and the column line; return settings, column names and the column line number."""
    settings: dict = {"phases": {}}
    lineno = 0
    first = True
    for raw in fh:
        lineno += 1
        line = raw.rstrip("\r\n")
        if first:
            first = False
            parts = line.lstrip("\ufeff").split()
            if len(parts) < 2 or parts[0] != "#" or parts[1] != FORMAT_NAME:
                raise InputFileError(
                    f"the first line should be {MAGIC!r} naming the format; got {line[:60]!r}. "
                    "Write slipnet text tables with slipnet.io.write_map, or add that line",
                    path=path,
                    line=1,
                )
            if len(parts) != 3 or parts[2] != str(FORMAT_VERSION):
                raise InputFileError(
                    f"unsupported {FORMAT_NAME} version {' '.join(parts[2:])!r}; this slipnet reads version "
                    f"{FORMAT_VERSION}",
                    path=path,
                    line=1,
                )
            continue
        if not line.strip():
            continue
        if not line.startswith("#"):
            return settings, line.split(), lineno
        body = line[1:].strip()
        if "=" not in body:
            continue  # a free comment
        key, value = (s.strip() for s in body.split("=", 1))
        _header_value(path, lineno, key, value, settings)
    raise InputFileError(
        "the file ends before the column line and data rows; after the '#' header give a line naming the "
        f"columns ({' '.join(COLUMNS)}) and one row per point",
        path=path,
        line=lineno,
    )


def _header_value(path: str, lineno: int, key: str, value: str, settings: dict) -> None:
    def bad(what: str) -> InputFileError:
        return InputFileError(f"header {key!r}: {what}; got {value!r}", path=path, line=lineno)

    if key == "units":
        return
    if key == "grid":
        if value not in GRIDS:
            raise bad(f"grid should be one of {', '.join(GRIDS)}")
        settings["grid"] = value
    elif key == "step_um":
        try:
            step = float(value)
        except ValueError:
            step = math.nan
        if not (math.isfinite(step) and step > 0):
            raise bad("step_um should be a positive number of µm")
        settings["step"] = step
    elif key in ("nx", "ny"):
        if not value.isdigit() or int(value) < 1:
            raise bad(f"{key} should be a positive whole number of points")
        settings[key] = int(value)
    elif key == "name":
        settings["name"] = value
    elif key == "meta":
        try:
            meta = json.loads(value)
        except json.JSONDecodeError as err:
            raise bad(f"meta should be one line of JSON text ({err.msg})") from err
        if not isinstance(meta, dict):
            raise bad("meta should be a JSON object {...}")
        settings["meta"] = meta
    elif key.startswith("phase ") and key[6:].strip().isdigit():
        parts = value.split()
        try:
            phase = Phase(" ".join(parts[:-2]), parts[-2].lower(), float(parts[-1]))
        except (IndexError, ValueError) as err:
            raise bad(
                f"a phase line should read 'phase N = NAME STRUCTURE LATTICE_NM' with STRUCTURE one of "
                f"{', '.join(STRUCTURES)} and the lattice parameter in nm ({err})"
            ) from err
        settings["phases"][int(key[6:])] = phase
    else:
        raise InputFileError(
            f"unknown header key {key!r}; accepted keys are {', '.join(HEADER_KEYS)} "
            "(free comments may not contain '=')",
            path=path,
            line=lineno,
        )


def _data_line_numbers(path: str, col_line: int) -> list[int]:
    """1-based line numbers of the data rows (non-blank lines after the column line). Error path only."""
    out = []
    with open(path, encoding="utf-8", errors="replace") as fh:
        for lineno, raw in enumerate(fh, start=1):
            if lineno > col_line and raw.strip():
                out.append(lineno)
    return out


def _locate_parse_error(path: str, col_line: int, columns: list[str], err: Exception) -> InputFileError:
    """Find the first data line that is not a row of numbers (called only when pandas fails)."""
    with open(path, encoding="utf-8", errors="replace") as fh:
        for lineno, raw in enumerate(fh, start=1):
            if lineno <= col_line or not raw.strip():
                continue
            fields = raw.split()
            if len(fields) != len(columns):
                return InputFileError(
                    f"expected {len(columns)} values ({' '.join(columns)}), found {len(fields)}; give one "
                    "whitespace-separated value per column on every row",
                    path=path,
                    line=lineno,
                )
            for name, tok in zip(columns, fields, strict=True):
                try:
                    float(tok)
                except ValueError:
                    return InputFileError(
                        f"{tok[:40]!r} is not a number; write plain decimal numbers",
                        path=path,
                        line=lineno,
                        column=name,
                    )
    return InputFileError(f"the data rows could not be read as numbers ({err})", path=path)


def read_text(path: str | os.PathLike) -> OrientationMap:
    """Read a slipnet-points table; raise :class:`InputFileError` on any malformed content."""
    path = str(path)
    with open(path, encoding="utf-8", newline=None) as fh:
        settings, columns, col_line = _header(path, fh)
    phases = _check_header(path, settings, columns, col_line)
    df = _read_rows(path, columns, col_line)
    where = _row_locator(path, col_line)
    cols = {c: df[c].to_numpy() for c in COLUMNS}
    indexed = _check_values(path, cols, len(phases), where)
    return _build_map(path, settings, phases, cols, indexed, where)


def _check_header(path: str, settings: dict, columns: list[str], col_line: int) -> tuple[Phase, ...]:
    """Check that the header gives grid, step, nx, ny and numbered phases and the column line every column once."""
    for key in ("grid", "step", "nx", "ny"):
        if key not in settings:
            hk = "step_um" if key == "step" else key
            raise InputFileError(
                f"the header lacks '# {hk} = ...'; every table states grid (square/hex), step_um, nx and ny",
                path=path,
            )
    phases_by_id = settings["phases"]
    if not phases_by_id:
        raise InputFileError(
            "the header lists no phase; add at least one line '# phase 0 = NAME bcc|fcc LATTICE_NM'", path=path
        )
    if sorted(phases_by_id) != list(range(len(phases_by_id))):
        raise InputFileError(
            f"phase lines should be numbered 0, 1, 2, ... without gaps; got {sorted(phases_by_id)}", path=path
        )
    phases = tuple(phases_by_id[k] for k in range(len(phases_by_id)))
    if phases[0].structure not in CUBIC_STRUCTURES:
        raise InputFileError(
            f"phase 0 is {phases[0].name!r} ({phases[0].structure}); phase 0 should be a phase slipnet analyses "
            f"({', '.join(CUBIC_STRUCTURES)}): renumber the phase lines and the phase column",
            path=path,
        )
    unknown = [c for c in columns if c not in COLUMNS]
    if unknown:
        raise InputFileError(
            f"unknown column {unknown[0]!r}; the columns are {' '.join(COLUMNS)}",
            path=path,
            line=col_line,
            column=unknown[0],
        )
    missing = [c for c in COLUMNS if c not in columns]
    if missing:
        raise InputFileError(
            f"column {missing[0]!r} is missing; the column line should name all of {' '.join(COLUMNS)}",
            path=path,
            line=col_line,
            column=missing[0],
        )
    if len(set(columns)) != len(columns):
        dup = next(c for c in columns if columns.count(c) > 1)
        raise InputFileError(f"column {dup!r} is named twice", path=path, line=col_line, column=dup)
    return phases


def _read_rows(path: str, columns: list[str], col_line: int) -> pd.DataFrame:
    """Read the data rows with pandas' C reader; on failure, find and name the first bad line."""
    try:
        df = pd.read_csv(
            path,
            sep=r"\s+",
            header=None,
            names=columns,
            skiprows=col_line,
            dtype=np.float64,
            engine="c",
            comment=None,
            skip_blank_lines=True,
            encoding="utf-8",
        )
    except (ValueError, pd.errors.ParserError) as err:
        raise _locate_parse_error(path, col_line, columns, err) from err
    except pd.errors.EmptyDataError:
        df = pd.DataFrame(columns=columns, dtype=np.float64)
    if len(df) == 0:
        raise InputFileError("the table has a header but no data rows; give one row per map point", path=path)
    return df


def _row_locator(path: str, col_line: int):
    """``where(k)``: the name and file line of data row ``k``, the line numbers read on first use only."""
    line_cache: list[list[int]] = []

    def where(k: int) -> tuple[str, int]:
        if not line_cache:
            line_cache.append(_data_line_numbers(path, col_line))
        return f"data row {k + 1}", line_cache[0][k]

    return where


def _check_values(path: str, cols: dict, n_phases: int, where) -> np.ndarray:
    """Check every value is finite, every phase known, every angle in range and in degrees; the indexed rows."""
    for c in COLUMNS:
        bad = ~np.isfinite(cols[c])
        if bad.any():
            k = int(np.flatnonzero(bad)[0])
            raise InputFileError(
                f"value {float(cols[c][k])!r} is not a finite number; write a number (unindexed points: phase -1 and "
                "angles 0)",
                path=path,
                line=where(k)[1],
                column=c,
            )
    ph = cols["phase"]
    bad = (ph != np.rint(ph)) | (ph < -1) | (ph >= n_phases)
    if bad.any():
        k = int(np.flatnonzero(bad)[0])
        raise InputFileError(
            f"unknown phase {float(ph[k])!r}; phases are the whole numbers 0..{n_phases - 1} listed in the header "
            "('# phase N = ...'), or -1 for unindexed points",
            path=path,
            line=where(k)[1],
            column="phase",
        )
    indexed = ph >= 0
    for c, hi in ANGLE_LIMITS.items():
        a = cols[c]
        bad = indexed & ((a < -_ANGLE_TOL) | (a > hi + _ANGLE_TOL))
        if bad.any():
            k = int(np.flatnonzero(bad)[0])
            raise InputFileError(
                f"angle {float(a[k])!r}° lies outside [0, {hi:g}]; Bunge angles are in degrees with φ1, φ2 in [0, 360] "
                "and Φ in [0, 180] (wrap negative angles by adding 360)",
                path=path,
                line=where(k)[1],
                column=c,
            )
    if indexed.sum() >= 10:
        amax = max(float(np.abs(cols[c][indexed]).max()) for c in ANGLE_LIMITS)
        if amax <= 2.0 * math.pi + 1e-6:
            raise InputFileError(
                f"every angle is at most {amax:.4f}, which looks like radians; this format wants degrees "
                "(multiply the angle columns by 180/π)",
                path=path,
                column="phi1_deg",
            )
    return indexed


def _build_map(path: str, settings: dict, phases: tuple[Phase, ...], cols: dict, indexed: np.ndarray,
               where) -> OrientationMap:
    """Place the rows on the grid and build the map once (quaternions from the Bunge angles)."""
    ny, nx = settings["ny"], settings["nx"]
    place = place_points(
        cols["x_um"], cols["y_um"], settings["step"], settings["grid"], shape=(ny, nx), where=where, path=path
    )
    n = ny * nx
    # build quaternions here and the map once (constructing it twice would double the checks)
    quats = np.full((n, 4), np.nan)
    rows = place.flat[indexed]
    quats[rows] = quat_from_euler(
        np.column_stack([cols["phi1_deg"][indexed], cols["Phi_deg"][indexed], cols["phi2_deg"][indexed]])
    )
    phase = np.full(n, -1, np.int32)
    phase[place.flat] = cols["phase"].astype(np.int32)
    quality = np.zeros(n)
    quality[place.flat] = cols["quality"]
    ind = np.zeros(n, bool)
    ind[rows] = True
    meta = dict(settings.get("meta", {}))
    if place.filled:
        meta["decisions"] = [*list(meta.get("decisions") or []), short_rows_note(place)]
    return OrientationMap(
        quats=quats.reshape(ny, nx, 4),
        phase=phase.reshape(ny, nx),
        quality=quality.reshape(ny, nx),
        indexed=ind.reshape(ny, nx),
        step=settings["step"],
        grid=settings["grid"],
        phases=phases,
        origin=place.origin,
        name=settings.get("name", Path(path).stem),
        meta=meta,
    )

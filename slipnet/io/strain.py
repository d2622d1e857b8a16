"""Measured strain files: our own three formats, and the files laboratories export.

Our formats (``docs/strain-format.md``): a text table with a header stating units and grid, a
compressed npz bundle (no pickled objects) and a multi-page TIFF (one page per component per
step, metadata as JSON in each page's description), read into and written from a
:class:`~slipnet.maps.StrainSeries`.

Files as laboratories export them (``docs/own-data.md``): CSV/TXT tables with any delimiter,
any header and the units in brackets (``x [mm]``, ``exx [%]``), MATLAB ``.mat`` files (v4–v7
through :mod:`scipy.io`, v7.3 through :mod:`h5py`), HDF5 files and plain TIFF stacks with a
small sidecar (JSON or TOML) giving what the pixels do not say. A column mapping names the file's
columns (or variables) for slipnet's names ``x, y, u, v, exx, eyy, exy, step``; every unit comes
from the file when it says so unambiguously, else it must be given, and the error names the
option. Every decision the reader takes is kept in the series' ``meta["reader"]``; the ones the
user should check (an encoding guessed, a unit given that contradicts the header) in
``meta["notes"]``.

Every failure is an :class:`~slipnet.errors.InputFileError` naming the file, the place and the
fix; declared array sizes are checked against the memory budget before anything is allocated.
"""

from __future__ import annotations

import io as _io
import json
import math
import os
import re
import struct
import zipfile
import zlib
from pathlib import Path

import numpy as np
import pandas as pd

from slipnet._files import atomic_path
from slipnet._inputs import check_allocation, check_npz_sizes, checked_input, guarded_reader
from slipnet.errors import InputFileError, ParameterError
from slipnet.maps.strain import DISPLACEMENT_COMPONENTS, STRAIN_COMPONENTS, StrainSeries

__all__ = ["FORMAT_TAG", "LENGTH_UNITS", "STRAIN_NAMES", "STRAIN_UNITS", "read_strain", "write_strain"]


FORMAT_TAG = "slipnet-strain/1"

#: Length units the readers accept, µm per unit (``px`` also, with a pixel size).
LENGTH_UNITS = {"nm": 1e-3, "um": 1.0, "mm": 1e3}

#: Strain units the readers accept, as the factor to a plain number.
STRAIN_UNITS = {"1": 1.0, "%": 1e-2, "ustrain": 1e-6}

#: slipnet's names for the columns (or variables) of a strain file.
STRAIN_NAMES = ("x", "y", "u", "v", "exx", "eyy", "exy", "step")

_LENGTH_SPELLINGS = {"nm": "nm", "um": "um", "µm": "um", "μm": "um", "micron": "um", "microns": "um",
                     "micrometre": "um", "micrometer": "um", "mm": "mm", "px": "px", "pix": "px", "pixel": "px",
                     "pixels": "px"}
_STRAIN_SPELLINGS = {"1": "1", "-": "1", "mm/mm": "1", "m/m": "1", "um/um": "1", "fraction": "1", "%": "%",
                     "pct": "%", "percent": "%", "ustrain": "ustrain", "µstrain": "ustrain", "μstrain": "ustrain",
                     "µε": "ustrain", "με": "ustrain", "microstrain": "ustrain", "ue": "ustrain"}

# names a file may use for slipnet's columns, compared after dropping case, spaces, punctuation and the unit
_ALIASES = {
    "x": {"x", "xpos", "posx", "xcoord", "coordx", "xposition"},
    "y": {"y", "ypos", "posy", "ycoord", "coordy", "yposition"},
    "u": {"u", "ux", "dispx", "displacementx", "dx"},
    "v": {"v", "uy", "dispy", "displacementy", "dy"},
    "exx": {"exx", "epsxx", "strainxx", "e11", "eps11", "exxstrain"},
    "eyy": {"eyy", "epsyy", "strainyy", "e22", "eps22", "eyystrain"},
    "exy": {"exy", "epsxy", "strainxy", "e12", "eps12", "exystrain"},
    "step": {"step", "loadstep", "cycle", "cycles", "frame", "stage", "ncycles"},
}

# the command-line spelling of each reader option, for messages
_FLAGS = {"columns": "--strain-column NAME=COLUMN", "length_unit": "--strain-length-unit",
          "value_unit": "--strain-value-unit", "pixel_size_um": "--strain-pixel-size",
          "quantity": "--strain-quantity", "grid_step": "--strain-grid-step", "encoding": "--encoding",
          "delimiter": "--strain-delimiter", "sidecar": "--strain-sidecar", "shear": "--strain-shear"}

_SIDECAR_KEYS = ("quantity", "components", "steps", "step_name", "step", "x0", "y0", "length_unit", "value_unit",
                 "pixel_size_um", "shear", "name", "columns", "meta")

# what the array libraries raise on a damaged file (their own error classes derive from these)
_LIB_ERRORS = (OSError, ValueError, KeyError, IndexError, TypeError, EOFError, RuntimeError, NotImplementedError,
               AttributeError, OverflowError, struct.error, zlib.error, zipfile.BadZipFile, MemoryError)


def _hint(option: str, example: str = "", flags: dict | None = None) -> str:
    """``option=example`` with its command-line spelling, for the fix part of a message."""
    flag = (_FLAGS if flags is None else flags).get(option, "")
    shown = f"{option}={example}" if example else f"{option}="
    return f"{shown} ({flag} on the command line)" if flag else shown


# ===================================================================================== units
def canonical_length_unit(text) -> str | None:
    """The canonical length unit (``nm``, ``um``, ``mm``, ``px``) for a spelling, or None.

    Examples
    --------
    >>> canonical_length_unit("µm"), canonical_length_unit("MM"), canonical_length_unit("inch")
    ('um', 'mm', None)
    """
    if text is None:
        return None
    return _LENGTH_SPELLINGS.get(str(text).strip().lower().replace("μ", "µ"))


def canonical_strain_unit(text) -> str | None:
    """The canonical strain unit (``1``, ``%``, ``ustrain``) for a spelling, or None.

    Examples
    --------
    >>> canonical_strain_unit("%"), canonical_strain_unit("mm/mm"), canonical_strain_unit("mm")
    ('%', '1', None)
    """
    if text is None:
        return None
    return _STRAIN_SPELLINGS.get(str(text).strip().lower().replace("μ", "µ"))


def length_factor(unit, *, path, column: str | None = None, pixel_size_um=None,
                  option: str = "length_unit", pixel_option: str = "pixel_size_um", flags: dict | None = None) -> float:
    """µm per ``unit``; ``px`` needs ``pixel_size_um``. Raises the project's error naming the options."""
    canon = canonical_length_unit(unit)
    if canon is None:
        raise InputFileError(f"{unit!r} is not a length unit slipnet reads (nm, um or µm, mm, px); "
                             f"give the unit with {_hint(option, 'mm', flags)}", path=str(path), column=column)
    if canon == "px":
        if pixel_size_um is None:
            raise InputFileError(f"lengths are in pixels: give the pixel size in µm with "
                                 f"{_hint(pixel_option, '0.85', flags)}", path=str(path), column=column)
        try:
            size = float(pixel_size_um)
        except (TypeError, ValueError):
            size = float("nan")
        if not (size > 0 and math.isfinite(size)):
            raise InputFileError(f"{pixel_option} should be a positive number of µm per pixel; got {pixel_size_um!r}",
                                 path=str(path), column=column)
        return size
    return LENGTH_UNITS[canon]


def _given_over_file(given, stated, column: str, path, notes: list, canon, option: str):
    """The unit to use: the one given (noted when it contradicts the file's) or the file's."""
    if given is None:
        return stated
    if stated is not None and canon(stated) != canon(given):
        notes.append(f"column {column!r} says [{stated}] but {option}={given!r} was given: read as {given}")
    return given


# ===================================================================================== text decoding
_BOMS = ((b"\xef\xbb\xbf", "utf-8-sig"), (b"\xff\xfe", "utf-16"), (b"\xfe\xff", "utf-16"))


def decode_text(raw: bytes, path, encoding: str | None, what: str, notes: list) -> tuple[str, str]:
    """The text of a file's bytes and the encoding used: the one stated, else detected.

    Detection: a byte-order mark (UTF-8, UTF-16), UTF-16 without one (NUL bytes every other byte),
    UTF-8, and, when the bytes are not UTF-8, Windows-1252 (a superset of Latin-1; every byte a
    character), which is noted so the user can state the right encoding. A file with NUL bytes
    that is not UTF-16 is refused as binary.
    """
    p = str(path)
    if encoding is not None:
        try:
            return raw.decode(encoding), encoding
        except LookupError:
            raise InputFileError(f"encoding {encoding!r} is not one Python knows; give a name such as 'utf-8', "
                                 "'cp1252' or 'latin-1'", path=p) from None
        except UnicodeDecodeError as err:
            line = raw[:err.start].count(b"\n") + 1
            raise InputFileError(f"the {what} is not {encoding} text (byte 0x{raw[err.start]:02x} at byte "
                                 f"{err.start}); state its real encoding with {_hint('encoding', repr('cp1252'))}",
                                 path=p, line=line) from err
    for bom, name in _BOMS:
        if raw.startswith(bom):
            try:
                return raw.decode(name), name
            except UnicodeDecodeError as err:
                raise InputFileError(f"the {what} starts with a {name} byte-order mark but is not {name} text; "
                                     f"state its encoding with {_hint('encoding', repr('cp1252'))}", path=p) from err
    head = raw[:4096]
    if b"\x00" in head:
        even, odd = head[0::2].count(0), head[1::2].count(0)
        name = "utf-16-le" if odd > 0.3 * len(head) / 2 and even == 0 else (
            "utf-16-be" if even > 0.3 * len(head) / 2 and odd == 0 else None)
        if name is not None:
            try:
                text = raw.decode(name)
                notes.append(f"the {what} has no byte-order mark; read as {name}")
                return text, name
            except UnicodeDecodeError:
                pass
        raise InputFileError(f"the {what} holds binary data, not text, and is none of the binary formats slipnet "
                             "reads (npz, TIFF, MATLAB .mat, HDF5); export it as CSV or one of those",
                             path=p)
    try:
        return raw.decode("utf-8"), "utf-8"
    except UnicodeDecodeError as err:
        bad = raw[err.start:err.start + 1]
        line = raw[:err.start].count(b"\n") + 1
        try:
            text, used = raw.decode("cp1252"), "cp1252"
        except UnicodeDecodeError:
            text, used = raw.decode("latin-1"), "latin-1"
        shown = bad.decode(used, errors="replace")
        notes.append(f"the {what} is not UTF-8 (byte 0x{bad[0]:02x} on line {line}); read as {used} "
                     f"('{shown}'): if that character is wrong, state the encoding with "
                     f"{_hint('encoding', repr('latin-1'))}")
        return text, used


# ===================================================================================== text tables
_COMMENT = ("#", "%", "//", "!")
_NA = {"", "nan", "na", "n/a", "null", "none", "-", "--", "#n/a", "nan%"}
_UNIT_RE = re.compile(r"^(?P<name>.*?)\s*[\[\(\{]\s*(?P<unit>[^\]\)\}]*?)\s*[\]\)\}]\s*$")
_SUFFIX_RE = re.compile(r"^(?P<name>.+?)[_ ](?P<unit>um|µm|mm|nm|px|pct|kcycles|cycles|kcyc)$", re.IGNORECASE)


def split_unit(header: str) -> tuple[str, str | None]:
    """``(name, unit)`` of a column header: the unit in brackets, or our ``_um``-style suffix.

    Examples
    --------
    >>> split_unit("x [mm]"), split_unit("E_xx (%)"), split_unit("crack_length_um"), split_unit("exx")
    (('x', 'mm'), ('E_xx', '%'), ('crack_length', 'um'), ('exx', None))
    """
    h = str(header).strip().strip("\"'").strip()
    m = _UNIT_RE.match(h)
    if m and m.group("name"):
        return m.group("name").strip(), (m.group("unit").strip() or None)
    m = _SUFFIX_RE.match(h)
    if m:
        return m.group("name").strip(), m.group("unit")
    return h, None


def name_key(name: str) -> str:
    """A column name compared without case, spaces, punctuation (``E_xx`` and ``exx`` match)."""
    s = str(name).lower().replace("µ", "u").replace("μ", "u")
    return re.sub(r"[^0-9a-z]", "", s)


class TextTable:
    """A table read from text: headers, their units, the values as text, and where each row was."""

    def __init__(self, headers, units, frame, lines, delimiter, decimal, encoding):
        self.headers, self.units, self.frame = headers, units, frame
        self.lines, self.delimiter, self.decimal, self.encoding = lines, delimiter, decimal, encoding

    def numbers(self, index: int, path) -> np.ndarray:
        """Column ``index`` as floats (missing values NaN); a value that is not a number is refused by line."""
        raw = self.frame.iloc[:, index]
        if pd.api.types.is_numeric_dtype(raw.dtype) and not pd.api.types.is_bool_dtype(raw.dtype):
            out = raw.to_numpy(np.float64)
            if np.isinf(out).any():
                r = int(np.flatnonzero(np.isinf(out))[0])
                raise InputFileError("infinite value; mark a missing point with nan or an empty field",
                                     path=str(path), line=int(self.lines[r]), column=self.headers[index])
            return out
        col = raw.astype(str).str.strip().str.strip("\"'")
        if self.decimal == ",":
            col = col.str.replace(",", ".", regex=False)
        vals = pd.to_numeric(col, errors="coerce")
        bad = vals.isna().to_numpy() & ~col.str.lower().isin(_NA).to_numpy()
        if bad.any():
            r = int(np.flatnonzero(bad)[0])
            raise InputFileError(f"{col.iloc[r]!r} is not a number (missing values may be empty, nan or NaN)",
                                 path=str(path), line=int(self.lines[r]), column=self.headers[index])
        out = vals.to_numpy(np.float64)
        if np.isinf(out).any():
            r = int(np.flatnonzero(np.isinf(out))[0])
            raise InputFileError("infinite value; mark a missing point with nan or an empty field",
                                 path=str(path), line=int(self.lines[r]), column=self.headers[index])
        return out


def _fields(line: str, delim: str | None) -> list[str]:
    parts = line.split() if delim is None else line.split(delim)
    return [p.strip().strip("\"'").strip() for p in parts]


def _is_number(tok: str, decimal: str) -> bool:
    t = tok.strip()
    if t.lower() in _NA:
        return True
    if decimal == ",":
        t = t.replace(",", ".")
    try:
        float(t)
    except ValueError:
        return False
    return True


def _guess_delimiter(sample: list[str]) -> str | None:
    """The delimiter that splits the most trailing rows into one number of fields (a preamble may differ)."""
    def run(count) -> int:
        want = count(sample[-1])
        n = 0
        for ln in reversed(sample):
            if count(ln) != want:
                break
            n += 1
        return n if want > 0 else 0

    best, best_run = "", 0
    for d in ("\t", ";", "|", ","):  # tab, semicolon or bar before comma: with those a comma is the decimal mark
        r = run(lambda ln, d=d: ln.count(d))
        if r > best_run:
            best, best_run = d, r
    r = run(lambda ln: len(ln.split()) if len(ln.split()) > 1 else 0)
    if r > best_run:
        best, best_run = None, r
    return best


def read_text_table(text: str, path, *, delimiter: str | None = None, encoding: str = "utf-8",
                    what: str = "table", delimiter_option: str = "delimiter", flags: dict | None = None) -> TextTable:
    """A table from text with any delimiter, an optional preamble, a header line (or none) and a units row.

    Comment lines start with ``#``, ``%``, ``//`` or ``!``. The header is the line just above the
    first row of numbers (or, when that line is a row of units, the line above it); a commented
    line with as many fields as the data serves when there is no other. Raises the project's error
    with the line and the fix when the table cannot be parsed.
    """
    p = str(path)
    lines = text.splitlines()
    live = [n for n, ln in enumerate(lines) if ln.strip() and not ln.lstrip().startswith(_COMMENT)]
    if not live:
        raise InputFileError(f"the {what} holds no table (only comments or blank lines)", path=p)
    if delimiter is not None and delimiter != "":
        delim = None if delimiter in (" ", "whitespace", r"\s+") else ("\t" if delimiter in ("tab", "\\t")
                                                                      else delimiter)
    else:
        delim = _guess_delimiter([lines[n] for n in live[-min(len(live), 50):]])
        if delim == "":
            raise InputFileError(f"cannot tell the column delimiter of the {what}: the last rows do not split "
                                 f"into equal fields by tab, ';', '|', ',' or spaces; give it with "
                                 f"{_hint(delimiter_option, repr(';'), flags)}", path=p, line=live[-1] + 1)
    tail = [_fields(lines[n], delim) for n in live[-min(len(live), 20):]]
    width = max(set(map(len, tail)), key=[len(t) for t in tail].count)
    decimal = "."
    if delim != ",":
        toks = [t for row in tail if len(row) == width for t in row
                if re.fullmatch(r"[-+]?[\d.,]+([eE][-+]?\d+)?", t)]
        if any(re.fullmatch(r"[-+]?\d*,\d+([eE][-+]?\d+)?", t) for t in toks) and not any("." in t for t in toks):
            decimal = ","
    # the columns that hold numbers in every trailing row; a text column (a label) may sit beside them
    rows_w = [t for t in tail if len(t) == width]
    numeric = [c for c in range(width) if 2 * sum(_is_number(t[c], decimal) and t[c] != "" for t in rows_w)
               >= len(rows_w)]
    first = None
    for k, n in enumerate(live):
        f = _fields(lines[n], delim)
        if len(f) == width and numeric and all(_is_number(f[c], decimal) for c in numeric) \
                and any(f[c] for c in numeric):
            first = k
            break
    if first is None:
        raise InputFileError(f"the {what} has no row of numbers with {width} fields", path=p)
    headers: list[str] | None = None
    units: list[str | None] = [None] * width
    above = [_fields(lines[n], delim) for n in live[max(first - 2, 0):first]]
    if above and len(above[-1]) == width:
        last = above[-1]
        is_units = all(t == "" or canonical_length_unit(t.strip("[]()")) or canonical_strain_unit(t.strip("[]()"))
                       or t.strip("[]()").lower() in ("cycles", "kcycles", "1") for t in last)
        if is_units and len(above) == 2 and len(above[0]) == width:
            headers, units = above[0], [t.strip("[]()") or None for t in last]
        else:
            headers = last
    if headers is None:
        start = live[first]
        for n in range(start - 1, -1, -1):
            body = lines[n].strip()
            if not body:
                continue
            if body.startswith(_COMMENT):
                f = _fields(body.lstrip("#%/! ").strip(), delim)
                if len(f) == width and not all(_is_number(t, decimal) for t in f):
                    headers = f
            break
    if headers is None:
        headers = [f"#{k + 1}" for k in range(width)]
    names, parsed_units = [], []
    for h, u in zip(headers, units, strict=True):
        name, unit = split_unit(h)
        names.append(h.strip() or name)
        parsed_units.append(u if u is not None else unit)
    rows = live[first:]
    body = "\n".join(lines[n] for n in rows)
    try:
        # numbers parsed by pandas at C speed; a column with text in it stays text and is checked by numbers()
        frame = pd.read_csv(_io.StringIO(body), sep=r"\s+" if delim is None else delim, header=None,
                            decimal=decimal, na_values=sorted(_NA), keep_default_na=False, skipinitialspace=True,
                            engine="c")
    except (pd.errors.ParserError, pd.errors.EmptyDataError, ValueError) as err:
        m = re.search(r"line (\d+)", str(err))
        line = rows[int(m.group(1)) - 1] + 1 if m and int(m.group(1)) - 1 < len(rows) else None
        raise InputFileError(f"cannot split the {what} into columns ({err}); check the delimiter "
                             f"({'whitespace' if delim is None else repr(delim)} was used) or give it with "
                             f"{_hint(delimiter_option, repr(';'), flags)}", path=p, line=line) from err
    if frame.shape[1] != width:
        raise InputFileError(f"rows have {frame.shape[1]} fields but the header has {width}", path=p,
                             line=rows[0] + 1)
    return TextTable(names, parsed_units, frame, np.asarray(rows) + 1, delim, decimal, encoding)


def match_columns(headers: list[str], wanted: dict, columns: dict | None, path, *, what: str = "file",
                  option: str = "columns", names_word: str = "columns", flags: dict | None = None) -> dict[str, int]:
    """Which of ``headers`` holds each of slipnet's names: from the mapping, else by the documented aliases.

    ``wanted`` maps slipnet's names to their aliases. A mapping value is a header as written
    (``"x [mm]"``), its name without the unit (``"x"``), or ``"#N"`` for the N-th column (from 1).
    Names not found are left out; a name two headers could be, a mapping to no header, or one
    header mapped twice are refused with the headers found.
    """
    p = str(path)
    found = {}
    bare = [split_unit(h)[0] for h in headers]
    shown = ", ".join(repr(h) for h in headers[:40]) + (" ..." if len(headers) > 40 else "")
    for name, target in (columns or {}).items():
        if name not in wanted:
            raise InputFileError(f"{option} maps {name!r}, which is not one of slipnet's names "
                                 f"{', '.join(wanted)}", path=p)
        t = str(target).strip()
        if re.fullmatch(r"#\d+", t):
            k = int(t[1:]) - 1
            if not 0 <= k < len(headers):
                raise InputFileError(f"{option} maps {name!r} to {t}, but the {what} has {len(headers)} "
                                     f"{names_word}", path=p)
            found[name] = k
            continue
        hits = [k for k, h in enumerate(headers) if h.strip().lower() == t.lower()]
        hits = hits or [k for k, b in enumerate(bare) if b.strip().lower() == t.lower()]
        hits = hits or [k for k, b in enumerate(bare) if name_key(b) == name_key(t) and name_key(t)]
        if len(hits) != 1:
            why = "no" if not hits else "more than one"
            raise InputFileError(f"{option} maps {name!r} to {target!r}, but {why} {names_word[:-1]} has that "
                                 f"name; {names_word} found: {shown}", path=p, column=str(target))
        found[name] = hits[0]
    for name, aliases in wanted.items():
        if name in found:
            continue
        hits = [k for k, b in enumerate(bare) if name_key(b) in aliases and k not in found.values()]
        if len(hits) > 1:
            exact = [k for k in hits if name_key(bare[k]) == name_key(name)]
            hits = exact if len(exact) == 1 else hits
        if len(hits) > 1:
            raise InputFileError(f"{', '.join(repr(headers[k]) for k in hits)} could each be {name!r}; say which "
                                 f"with {_hint(option, f'{{{name!r}: {headers[hits[0]]!r}}}', flags)}", path=p)
        if hits:
            found[name] = hits[0]
    seen: dict[int, str] = {}
    for name, k in found.items():
        if k in seen:
            raise InputFileError(f"{names_word[:-1]} {headers[k]!r} is mapped to both {seen[k]!r} and {name!r}",
                                 path=p)
        seen[k] = name
    return found


# ===================================================================================== grids
def _spacing(values: np.ndarray) -> float | None:
    """The grid spacing of sorted coordinate values (rounding noise of printed numbers tolerated)."""
    u = np.unique(values)
    if u.size < 2:
        return None
    d = np.diff(u)
    span = float(u[-1] - u[0])
    d = d[d > 1e-6 * span]
    if d.size == 0:
        return None
    small = d[d < 1.5 * d.min()]
    return float(np.median(small))


def grid_from_points(x_um: np.ndarray, y_um: np.ndarray, labels: np.ndarray | None, values: dict, path, *,
                     lines=None, budget=None) -> tuple[dict, float, tuple[float, float], np.ndarray | None, int]:
    """Arrays ``(n_steps, ny, nx)`` on the regular square grid the points lie on.

    Returns ``(components, step_um, (x0, y0), step labels or None, missing points)``. Rows whose
    position is off the grid, two rows for one point of one step, rows and columns spaced
    differently, and points so sparse that they cannot be one grid (a stray point far off, or
    coordinates in two units) are refused with the numbers; the grid is checked against the
    memory budget before it is allocated.
    """
    p = str(path)
    bad = ~(np.isfinite(x_um) & np.isfinite(y_um))
    if bad.any():
        r = int(np.flatnonzero(bad)[0])
        raise InputFileError("a point has no position (x or y missing): every row needs both", path=p,
                             line=None if lines is None else int(lines[r]))
    sx, sy = _spacing(x_um), _spacing(y_um)
    if sx is None and sy is None:
        raise InputFileError("all points share one position: a strain map needs a grid of points", path=p)
    step = sx if sy is None else sy if sx is None else sx
    if sx is not None and sy is not None and abs(sx - sy) > 0.01 * max(sx, sy):
        raise InputFileError(f"points are {sx:.6g} µm apart along x but {sy:.6g} µm along y; slipnet needs a square "
                             "grid: resample the field onto one spacing first", path=p)
    if sx is not None and sy is not None:
        step = 0.5 * (sx + sy)
    x0, y0 = float(np.min(x_um)), float(np.min(y_um))
    jf, if_ = (x_um - x0) / step, (y_um - y0) / step
    j, i = np.rint(jf), np.rint(if_)
    off = (np.abs(jf - j) > 0.1) | (np.abs(if_ - i) > 0.1)
    if off.any():
        r = int(np.flatnonzero(off)[0])
        raise InputFileError(f"point ({x_um[r]:.6g}, {y_um[r]:.6g}) µm is not on the grid of step {step:.6g} µm "
                             f"from ({x0:.6g}, {y0:.6g}) µm that the other points form", path=p,
                             line=None if lines is None else int(lines[r]))
    nx, ny = float(j.max()) + 1.0, float(i.max()) + 1.0
    if labels is None:
        uniq = np.zeros(1)
        k = np.zeros(x_um.size, dtype=np.int64)
    else:
        uniq, k = np.unique(labels, return_inverse=True)
    n_steps = int(uniq.size)
    per_step = x_um.size / n_steps
    fill = per_step / (nx * ny)
    if fill < 0.02:
        raise InputFileError(f"the {x_um.size} points span a grid of {ny:.0f} × {nx:.0f} points at step "
                             f"{step:.6g} µm but fill only {100 * fill:.3g} % of it: they do not form one grid. "
                             f"Likely causes: a stray point far from the others (x from {x0:.6g} to "
                             f"{float(np.max(x_um)):.6g} µm, y from {y0:.6g} to {float(np.max(y_um)):.6g} µm), "
                             "or coordinates in two units", path=p)
    check_allocation(n_steps * nx * ny * (len(values) + 1), 8,
                     f"a grid of {n_steps} step(s) × {ny:.0f} × {nx:.0f} points × {len(values)} components",
                     path=p, budget=budget)
    nxi, nyi = int(nx), int(ny)
    flat = (k * nyi + i.astype(np.int64)) * nxi + j.astype(np.int64)
    counts = np.bincount(flat, minlength=n_steps * nyi * nxi)
    if np.any(counts > 1):
        r0 = int(np.flatnonzero(counts[flat] > 1)[0])
        same = np.flatnonzero(flat == flat[r0])[:2]
        where = "" if lines is None else f" (lines {int(lines[same[0]])} and {int(lines[same[1]])})"
        raise InputFileError(f"two rows{where} give the point ({x_um[r0]:.6g}, {y_um[r0]:.6g}) µm of one load "
                             "step; each point once per step (map a load-step column with "
                             f"{_hint('columns', repr({'step': 'NAME IN FILE'}))} if the file holds several)",
                             path=p, line=None if lines is None else int(lines[same[1]]))
    comps = {}
    for c, vals in values.items():
        a = np.full(n_steps * nyi * nxi, np.nan)
        a[flat] = vals
        comps[c] = a.reshape(n_steps, nyi, nxi)
    missing = int(n_steps * nyi * nxi - x_um.size)
    return comps, float(step), (x0, y0), (None if labels is None else uniq.astype(float)), missing


def _axis_from_coords(c: np.ndarray, along: int, name: str, path) -> tuple[float, float, bool]:
    """``(start, spacing, reversed)`` of a coordinate vector or meshgrid varying along axis ``along``."""
    c = np.asarray(c, dtype=np.float64)
    if c.ndim == 2 and 1 in c.shape:  # a MATLAB row or column vector
        c = c.ravel()
    if c.ndim == 2:
        ref = c[0, :] if along == 1 else c[:, 0]
        other = c - (ref[None, :] if along == 1 else ref[:, None])
        if np.nanmax(np.abs(other)) > 1e-6 * max(np.nanmax(np.abs(c)), 1e-300):
            raise InputFileError(f"{name} should vary along the {'columns' if along == 1 else 'rows'} only "
                                 "(a meshgrid) or be a vector", path=str(path), column=name)
        c = ref
    c = c.ravel()
    if c.size < 2 or not np.all(np.isfinite(c)):
        raise InputFileError(f"{name} should hold finite coordinates, at least two", path=str(path), column=name)
    d = np.diff(c)
    step = float(np.mean(d))
    if step == 0 or np.max(np.abs(d - step)) > 1e-3 * abs(step):
        raise InputFileError(f"{name} is not evenly spaced (steps from {d.min():.6g} to {d.max():.6g}); slipnet "
                             "needs a regular grid", path=str(path), column=name)
    return (float(c[0]), step, False) if step > 0 else (float(c[-1]), -step, True)


# ===================================================================================== sidecars
def find_sidecar(path: Path, sidecar) -> Path | None:
    """The sidecar given, else ``<stem>.json`` / ``<stem>.toml`` / ``<name>.json`` / ``<name>.toml`` beside."""
    if sidecar is not None:
        return Path(sidecar)
    found = [c for c in (path.with_suffix(".json"), path.with_suffix(".toml"), path.with_name(path.name + ".json"),
                         path.with_name(path.name + ".toml")) if c != path and c.is_file()]
    if len(found) > 1:
        raise InputFileError(f"two sidecars lie beside the file ({', '.join(c.name for c in found)}); keep one, or "
                             f"name it with {_hint('sidecar', 'FILE')}", path=str(path))
    return found[0] if found else None


def read_sidecar(side: Path) -> dict:
    """The settings of a JSON or TOML sidecar (keys in ``docs/own-data.md``), checked."""
    checked_input(side, "sidecar", max_bytes="1M")
    raw = side.read_bytes()
    text, _ = decode_text(raw, side, None, "sidecar", [])
    try:
        if side.suffix.lower() == ".toml":
            import tomllib

            data = tomllib.loads(text)
        else:
            data = json.loads(text)
    except json.JSONDecodeError as err:
        raise InputFileError(f"the sidecar is not valid JSON ({err.msg})", path=str(side), line=err.lineno) from err
    except ValueError as err:  # tomllib.TOMLDecodeError
        raise InputFileError(f"the sidecar is not valid TOML ({err})", path=str(side)) from err
    if not isinstance(data, dict):
        raise InputFileError("the sidecar should hold one object of settings (key: value)", path=str(side))
    unknown = sorted(set(data) - set(_SIDECAR_KEYS) - {"format"})
    if unknown:
        raise InputFileError(f"unknown sidecar keys {unknown}; accepted: {', '.join(_SIDECAR_KEYS)}", path=str(side))
    for key in ("step", "x0", "y0", "pixel_size_um"):
        if key in data and not (isinstance(data[key], (int, float)) and not isinstance(data[key], bool)
                                and math.isfinite(data[key])):
            raise InputFileError(f"sidecar key {key!r} should be a number; got {data[key]!r}", path=str(side))
    for key in ("components", "steps"):
        if key in data and not isinstance(data[key], list):
            raise InputFileError(f"sidecar key {key!r} should be a list; got {data[key]!r}", path=str(side))
    if "columns" in data and not isinstance(data["columns"], dict):
        raise InputFileError("sidecar key 'columns' should map slipnet's names to the file's", path=str(side))
    return data


# ===================================================================================== assembling
def _quantity_of(found: dict, quantity, path, what: str) -> str:
    have_s = all(c in found for c in STRAIN_COMPONENTS)
    have_d = all(c in found for c in DISPLACEMENT_COMPONENTS)
    if quantity is not None:
        q = str(quantity).strip().lower()
        if q not in ("strain", "displacement"):
            raise InputFileError(f"quantity should be 'strain' or 'displacement'; got {quantity!r}", path=str(path))
        names = STRAIN_COMPONENTS if q == "strain" else DISPLACEMENT_COMPONENTS
        missing = [c for c in names if c not in found]
        if missing:
            raise InputFileError(f"a {q} file needs {', '.join(names)}; {', '.join(missing)} not found among the "
                                 f"{what}; map them with {_hint('columns', repr({missing[0]: 'NAME IN FILE'}))}",
                                 path=str(path))
        return q
    if have_s and have_d:
        raise InputFileError(f"the file holds both displacements (u, v) and strains (exx, eyy, exy); say which to "
                             f"read with {_hint('quantity', repr('strain'))}", path=str(path))
    if have_s:
        return "strain"
    if have_d:
        return "displacement"
    part = sorted(c for c in found if c in STRAIN_COMPONENTS + DISPLACEMENT_COMPONENTS)
    raise InputFileError(f"no complete set of components found (strain needs exx, eyy, exy; displacement u, v; "
                         f"found {part or 'none'}); map the file's {what} to slipnet's names with "
                         f"{_hint('columns', repr({'exx': 'E_xx', 'eyy': 'E_yy', 'exy': 'E_xy'}))}", path=str(path))


def _value_factor(quantity: str, unit, column: str, path, pixel_size_um) -> float:
    """Factor from the file's value unit of ``column`` to µm (displacement) or a plain number (strain)."""
    if quantity == "displacement":
        if unit is None:
            raise InputFileError(f"the displacement {column!r} states no unit (a header such as 'u [um]'); give "
                                 f"it with {_hint('value_unit', repr('um'))}", path=str(path), column=column)
        if canonical_length_unit(unit) is None:
            raise InputFileError(f"value unit {str(unit)!r} does not match quantity 'displacement'; expected a length "
                                 f"unit (nm, um, mm, px); give it with {_hint('value_unit', repr('um'))}",
                                 path=str(path), column=column)
        return length_factor(unit, path=path, column=column, pixel_size_um=pixel_size_um, option="value_unit")
    if unit is None:
        raise InputFileError(f"the strain {column!r} states no unit (a header such as 'exx [%]'); give it with "
                             f"{_hint('value_unit', repr('%'))} (or '1' for plain numbers)", path=str(path),
                             column=column)
    canon = canonical_strain_unit(unit)
    if canon is None:
        raise InputFileError(f"value unit {str(unit)!r} does not match quantity 'strain'; expected a strain unit "
                             f"(1, %, ustrain); give it with {_hint('value_unit', repr('%'))}", path=str(path),
                             column=column)
    return STRAIN_UNITS[canon]


def _finish(quantity: str, comps: dict, step_um: float, origin, steps, step_name: str, name: str, meta: dict,
            shear, path, notes: list) -> StrainSeries:
    """The series, with engineering shear halved, implausible strain magnitudes noted, reader notes in meta."""
    sh = "tensor" if shear is None else str(shear).strip().lower()
    if sh not in ("tensor", "engineering"):
        raise InputFileError(f"shear should be 'tensor' or 'engineering'; got {shear!r}", path=str(path))
    if quantity == "strain":
        if sh == "engineering":
            comps = {**comps, "exy": comps["exy"] * 0.5}
        big = max(float(np.nanmax(np.abs(a))) if np.isfinite(a).any() else 0.0 for a in comps.values())
        if big > 0.5:
            notes.append(f"strains reach {big:.3g} ({100 * big:.3g} %) after unit conversion: if the file holds "
                         f"percent, give {_hint('value_unit', repr('%'))}")
    elif sh == "engineering":
        raise InputFileError("shear applies to strain files only", path=str(path))
    meta = dict(meta)
    if notes:
        meta["notes"] = [*meta.get("notes", []), *notes]
    try:
        return StrainSeries(quantity, comps, step_um, origin, steps, step_name, name, meta)
    except ParameterError as err:
        raise InputFileError(str(err), path=str(path)) from err


# ===================================================================================== our formats
def _kind_of(path: Path) -> str:
    suffix = path.suffix.lower()
    if suffix == ".npz":
        return "npz"
    if suffix in (".tif", ".tiff"):
        return "tiff"
    return "text"


def _sniff(path: Path) -> str:
    """The file's format from its first bytes (the suffix only where the bytes say nothing)."""
    try:
        with open(path, "rb") as fh:
            head = fh.read(4096)
    except OSError as err:
        raise InputFileError(f"the strain file cannot be read ({err})", path=str(path)) from err
    hdf5 = b"\x89HDF\r\n\x1a\n"
    if head[:4] in (b"II*\x00", b"MM\x00*", b"II+\x00", b"MM\x00+"):
        return "tiff"
    if head.startswith(b"PK\x03\x04") or head.startswith(b"PK\x05\x06"):
        return "npz"
    if head.startswith(b"MATLAB 7.3") or (head.startswith(b"MATLAB") and head[512:520] == hdf5):
        return "mat73"
    if head.startswith(b"MATLAB 5.0 MAT-file"):
        return "mat5"
    if any(head[o:o + 8] == hdf5 for o in (0, 512, 1024, 2048)):
        return "hdf5"
    suffix = path.suffix.lower()
    if suffix == ".mat":
        return "mat5"  # v4 files have no signature; scipy.io tells
    if suffix in (".h5", ".hdf5", ".he5", ".hdf"):
        return "hdf5"
    if suffix in (".npz", ".tif", ".tiff"):
        return _kind_of(path)
    return "text"


def _header_dict(series: StrainSeries, value_unit: str) -> dict:
    ny, nx = series.shape
    return {
        "format": FORMAT_TAG,
        "quantity": series.quantity,
        "length_unit": "um",
        "value_unit": value_unit,
        "nx": int(nx), "ny": int(ny), "step": float(series.step),
        "x0": float(series.origin[0]), "y0": float(series.origin[1]),
        "step_name": series.step_name,
        "steps": [float(s) for s in series.steps],
        "components": list(series.components),
        "name": series.name,
        "meta": series.meta,
    }


def write_strain(series: StrainSeries, path: str | os.PathLike) -> Path:
    """Write a :class:`StrainSeries` in our documented format chosen by the suffix.

    ``.npz``: compressed bundle; ``.tif``/``.tiff``: multi-page TIFF; anything else: text table.
    Values are written in µm (displacement) or as plain numbers (strain). Missing points are NaN.
    Returns the path written.
    """
    path = Path(path)
    kind = _kind_of(path)
    header = _header_dict(series, "um" if series.quantity == "displacement" else "1")
    with atomic_path(path) as tmp:
        if kind == "npz":
            arrays = {c: a for c, a in series.components.items()}
            arrays["steps"] = series.steps
            arrays["header"] = np.array(json.dumps(header))
            with open(tmp, "wb") as fh:
                np.savez_compressed(fh, **arrays)
        elif kind == "tiff":
            import tifffile

            with tifffile.TiffWriter(tmp) as tif:
                for k in range(series.n_steps):
                    for c, arr in series.components.items():
                        page = {**header, "page_component": c, "page_step": k}
                        tif.write(arr[k].astype(np.float32 if arr.dtype == np.float32 else np.float64),
                                  description=json.dumps(page), metadata=None)
        else:
            ny, nx = series.shape
            x, y = series.coordinates()
            cols = {"step": np.repeat(series.steps, ny * nx),
                    "x": np.tile(x.ravel(), series.n_steps), "y": np.tile(y.ravel(), series.n_steps)}
            for c, arr in series.components.items():
                cols[c] = arr.reshape(-1)
            lines = [
                f"# {FORMAT_TAG}",
                f"# quantity: {series.quantity}",
                "# length_unit: um",
                f"# value_unit: {header['value_unit']}",
                f"# grid: nx={nx} ny={ny} step={series.step!r} x0={series.origin[0]!r} y0={series.origin[1]!r}",
                f"# step_name: {series.step_name}",
                f"# name: {series.name}",
                f"# meta: {json.dumps(series.meta)}",
            ]
            buf = _io.StringIO()
            pd.DataFrame(cols).to_csv(buf, index=False, float_format="%.10g", na_rep="nan")
            tmp.write_text("\n".join(lines) + "\n" + buf.getvalue(), encoding="utf-8")
    return path


def _value_scale(quantity: str, unit: str, path: Path) -> float:
    unit = str(unit).strip()
    if quantity == "displacement":
        canon = canonical_length_unit(unit)
        if canon is None or canon == "px":
            raise InputFileError(f"value_unit {unit!r} does not match quantity {quantity!r}; expected a length unit "
                                 "(um, nm, mm)", path=str(path))
        return LENGTH_UNITS[canon]
    canon = canonical_strain_unit(unit)
    if canon is None:
        raise InputFileError(f"value_unit {unit!r} does not match quantity {quantity!r}; expected a strain unit "
                             "(1, %, ustrain)", path=str(path))
    return STRAIN_UNITS[canon]


def _length_scale(unit: str, path: Path) -> float:
    canon = canonical_length_unit(unit)
    if canon is None or canon == "px":
        raise InputFileError(f"length_unit should be one of um, nm, mm; got {str(unit).strip()!r}", path=str(path))
    return LENGTH_UNITS[canon]


def _override(header: dict, opts: dict, path: Path) -> dict:
    """Units given to the reader replace the header's (a file labelled µm that holds mm), noted."""
    header = dict(header)
    notes = list((header.get("meta") or {}).get("notes", []))
    for key in ("length_unit", "value_unit", "quantity"):
        given = opts.get(key)
        if given is not None and str(given).strip() != str(header.get(key, "")).strip():
            if key in header:
                notes.append(f"the file says {key} {header[key]!r}; {key}={given!r} was given: read as {given}")
            header[key] = given
    if notes:
        header["meta"] = {**(header.get("meta") or {}), "notes": notes}
    return header


def _from_header(header: dict, arrays: dict, path: Path) -> StrainSeries:
    for key in ("quantity", "length_unit", "value_unit", "nx", "ny", "step"):
        if key not in header:
            raise InputFileError(f"header lacks {key!r}; see docs/strain-format.md", path=str(path))
    quantity = str(header["quantity"]).strip().lower()
    if quantity not in ("displacement", "strain"):
        raise InputFileError(f"quantity should be 'displacement' or 'strain'; got {quantity!r}", path=str(path))
    lscale = _length_scale(header["length_unit"], path)
    vscale = _value_scale(quantity, header["value_unit"], path)
    names = DISPLACEMENT_COMPONENTS if quantity == "displacement" else STRAIN_COMPONENTS
    try:
        ny, nx = int(header["ny"]), int(header["nx"])
    except (TypeError, ValueError, OverflowError) as err:
        raise InputFileError(f"nx and ny should be whole numbers; got {header['nx']!r}, {header['ny']!r}",
                             path=str(path)) from err
    comps = {}
    for c in names:
        if c not in arrays:
            raise InputFileError(f"component {c!r} is missing; a {quantity} file needs {names}", path=str(path),
                                 column=c)
        a = np.asarray(arrays[c], dtype=np.float64)
        if a.ndim == 2:
            a = a[None]
        if a.shape[1:] != (ny, nx):
            raise InputFileError(f"component {c!r} has grid {a.shape[1:]} but the header states ny={ny}, nx={nx}",
                                 path=str(path), column=c)
        comps[c] = a * vscale
    shapes = {a.shape for a in comps.values()}
    if len(shapes) != 1:
        raise InputFileError(f"components have unequal shapes {sorted(shapes)}", path=str(path))
    steps = header.get("steps")
    try:
        return StrainSeries(quantity, comps, float(header["step"]) * lscale,
                            (float(header.get("x0", 0.0)) * lscale, float(header.get("y0", 0.0)) * lscale),
                            None if steps is None else np.asarray(steps, float),
                            str(header.get("step_name", "cycles")), str(header.get("name", "")),
                            dict(header.get("meta") or {}))
    except (ParameterError, TypeError, ValueError) as err:
        raise InputFileError(str(err), path=str(path)) from err


_GRID_RE = re.compile(r"(\w+)\s*=\s*([^\s]+)")


def _is_our_text(text: str) -> bool:
    for line in text.splitlines()[:40]:
        s = line.strip()
        if not s:
            continue
        if not s.startswith("#"):
            return False
        body = s[1:].strip()
        if body == FORMAT_TAG or body.lower().startswith("quantity:"):
            return True
    return False


def _read_our_text(text: str, path: Path, opts: dict, budget) -> StrainSeries:
    header: dict = {}
    n_header = 0
    lines = text.splitlines(keepends=True)
    for line in lines:
        if not line.startswith("#"):
            break
        n_header += 1
        body = line[1:].strip()
        if ":" not in body:
            continue
        key, val = (s.strip() for s in body.split(":", 1))
        if key == "grid":
            for k, vv in _GRID_RE.findall(val):
                header[k] = vv
        elif key == "meta":
            try:
                header["meta"] = json.loads(val) if val else {}
            except json.JSONDecodeError as err:
                raise InputFileError(f"meta should be JSON; {err}", path=str(path), line=n_header) from err
            if not isinstance(header["meta"], dict):
                raise InputFileError("meta should be a JSON object", path=str(path), line=n_header)
        else:
            header[key] = val
    for key in ("nx", "ny", "step", "x0", "y0"):
        if key in header:
            try:
                header[key] = float(header[key])
            except ValueError as err:
                raise InputFileError(f"grid value {key}={header[key]!r} should be a number", path=str(path)) from err
            if not math.isfinite(header[key]):
                raise InputFileError(f"grid value {key}={header[key]!r} should be finite", path=str(path))
    header = _override(header, opts, path)
    for key in ("quantity", "length_unit", "value_unit", "nx", "ny", "step"):
        if key not in header:
            raise InputFileError(f"header lacks {key!r}; see docs/strain-format.md", path=str(path))
    nx, ny = header["nx"], header["ny"]
    if nx < 1 or ny < 1 or nx != int(nx) or ny != int(ny):
        raise InputFileError(f"the grid line should give whole nx, ny >= 1; got nx={nx:g}, ny={ny:g}", path=str(path))
    # the declared grid, before the table is parsed or any array made (a step in mm read as µm overflows)
    check_allocation(nx * ny * 6, 8, f"a grid of {ny:.0f} × {nx:.0f} points (grid line of the header)",
                     path=path, budget=budget)
    nx, ny = int(nx), int(ny)
    try:
        table = pd.read_csv(_io.StringIO("".join(lines[n_header:])), na_values=["nan", "NaN"])
    except (pd.errors.ParserError, pd.errors.EmptyDataError, ValueError) as err:
        raise InputFileError(f"cannot parse the table: {err}", path=str(path), line=n_header + 1) from err
    table.columns = [str(c).strip() for c in table.columns]
    if opts.get("columns"):
        table = table.rename(columns={str(v): k for k, v in opts["columns"].items()})
    quantity = str(header["quantity"]).strip().lower()
    names = DISPLACEMENT_COMPONENTS if quantity == "displacement" else STRAIN_COMPONENTS
    for c in ("step", "x", "y", *names):
        if c not in table.columns:
            raise InputFileError(f"column {c!r} is missing; columns found: {list(table.columns)}", path=str(path),
                                 column=c)
    _length_scale(header["length_unit"], path)  # refuse unknown units before parsing the table
    step_um = float(header["step"])
    if not step_um > 0:
        raise InputFileError(f"the grid step should be > 0; got {step_um:g}", path=str(path))
    x0, y0 = float(header.get("x0", 0.0)), float(header.get("y0", 0.0))
    try:
        steps_col = table["step"].to_numpy(float)
        xcol, ycol = table["x"].to_numpy(float), table["y"].to_numpy(float)
    except (TypeError, ValueError) as err:
        raise InputFileError(f"step, x and y should be numbers ({err})", path=str(path)) from err
    labels = pd.unique(steps_col)
    if table.shape[0] != labels.size * nx * ny:
        raise InputFileError(f"{table.shape[0]} rows do not fill {labels.size} step(s) of the stated "
                             f"{ny} x {nx} grid", path=str(path))
    # each row's grid point from its coordinates; they must fall on the stated grid
    jf = (xcol - x0) / step_um
    if_ = (ycol - y0) / step_um
    with np.errstate(invalid="ignore"):
        j = np.rint(np.nan_to_num(jf, nan=-1.0)).astype(np.int64)
        i = np.rint(np.nan_to_num(if_, nan=-1.0)).astype(np.int64)
    off = (~np.isfinite(jf)) | (~np.isfinite(if_)) | (np.abs(jf - j) > 1e-3) | (np.abs(if_ - i) > 1e-3) | (j < 0) \
        | (j >= nx) | (i < 0) | (i >= ny)
    if off.any():
        row = int(np.flatnonzero(off)[0])
        raise InputFileError(f"point ({table['x'].iloc[row]}, {table['y'].iloc[row]}) is not on the stated grid "
                             f"(nx={nx}, ny={ny}, step={step_um}, x0={x0}, y0={y0})", path=str(path),
                             line=n_header + 2 + row)
    order_labels = np.sort(labels)
    k = np.searchsorted(order_labels, steps_col)
    flat = (k * ny + i) * nx + j
    counts = np.bincount(flat, minlength=labels.size * ny * nx)
    if np.any(counts != 1):
        raise InputFileError("the points of each step should cover the grid exactly once (duplicates or gaps found)",
                             path=str(path))
    arrays = {}
    for c in names:
        vals = pd.to_numeric(table[c], errors="coerce").to_numpy(float)
        a = np.full(labels.size * ny * nx, np.nan)
        a[flat] = vals
        arrays[c] = a.reshape(labels.size, ny, nx)
    header["steps"] = order_labels.tolist()
    # positions are rescaled by _from_header; x0/y0/step stay in the file's length unit until then
    return _from_header(header, arrays, path)


def _read_npz(path: Path, opts: dict, budget) -> StrainSeries:
    check_npz_sizes(path, "strain bundle", budget=budget)
    try:
        # our own handle: numpy leaves the file open when the zip inside is damaged
        with open(path, "rb") as fh, np.load(fh, allow_pickle=False) as data:
            arrays = {k: data[k] for k in data.files}
    except ValueError as err:
        raise InputFileError(f"not a plain npz bundle (pickled objects are refused): {err}", path=str(path)) from err
    except _LIB_ERRORS as err:
        raise InputFileError(f"the npz bundle is damaged ({type(err).__name__}: {err}); write it again",
                             path=str(path)) from err
    if "header" not in arrays:
        raise InputFileError("npz bundle lacks the 'header' JSON array; see docs/strain-format.md", path=str(path))
    try:
        header = json.loads(str(arrays.pop("header")))
    except json.JSONDecodeError as err:
        raise InputFileError(f"header should be JSON: {err}", path=str(path)) from err
    if not isinstance(header, dict):
        raise InputFileError("header should be a JSON object; see docs/strain-format.md", path=str(path))
    if "steps" in arrays:
        header["steps"] = arrays.pop("steps").tolist()
    return _from_header(_override(header, opts, path), arrays, path)


# ===================================================================================== TIFF
def _tiff_pages(path: Path, budget) -> list:
    """The pages of a TIFF, their declared sizes checked against the memory budget before any pixel is read."""
    import logging

    import tifffile

    p = str(path)
    log = logging.getLogger("tifffile")
    level = log.level
    log.setLevel(logging.CRITICAL)  # its notes on a damaged file would precede our error; ours names the damage
    try:
        return _tiff_pages_of(tifffile, path, p, budget)
    finally:
        log.setLevel(level)


def _tiff_pages_of(tifffile, path: Path, p: str, budget) -> list:
    try:
        tif = tifffile.TiffFile(path)
    except _LIB_ERRORS as err:
        raise InputFileError(f"not a readable TIFF ({type(err).__name__}: {err}); the file is damaged or not a "
                             "TIFF", path=p) from err
    with tif:
        try:
            pages = list(tif.pages)
            declared = []
            for n, page in enumerate(pages):
                shape, dtype = tuple(int(s) for s in page.shape), page.dtype
                if dtype is None or not shape or 0 in shape:
                    raise InputFileError(f"page {n} declares no readable image (shape {shape}, sample format "
                                         f"{dtype}); the file is damaged or uses a sample format slipnet cannot read",
                                         path=p)
                declared.append((n, shape, np.dtype(dtype)))
            if not declared:
                raise InputFileError("the TIFF has no pages", path=p)
            total = sum(float(np.prod([float(s) for s in sh])) * max(dt.itemsize, 8) for _, sh, dt in declared)
            big = max(declared, key=lambda d: float(np.prod([float(s) for s in d[1]])))
            check_allocation(total, 1, f"{len(declared)} page(s) (the largest, page {big[0]}, of shape {big[1]} "
                             f"{big[2]})", path=p, budget=budget)
            out = []
            for n, page in enumerate(pages):
                desc = page.description
                arr = page.asarray()
                if arr.ndim != 2:
                    raise InputFileError(f"page {n} has shape {arr.shape}; each page should be one 2-D field "
                                         "(one component of one step, a single channel)", path=p)
                if not (np.issubdtype(arr.dtype, np.floating) or np.issubdtype(arr.dtype, np.integer)):
                    raise InputFileError(f"page {n} holds {arr.dtype} values; a field page holds numbers", path=p)
                out.append((desc, arr))
            return out
        except InputFileError:
            raise
        except _LIB_ERRORS as err:
            raise InputFileError(f"the TIFF is damaged ({type(err).__name__}: {err}); export it again", path=p) from err


def _our_page_header(desc) -> dict | None:
    if not desc:
        return None
    try:
        d = json.loads(desc)
    except (json.JSONDecodeError, TypeError):
        return None
    return d if isinstance(d, dict) and "page_component" in d else None


def _read_our_tiff(pages: list, path: Path, opts: dict) -> StrainSeries:
    heads = []
    for n, (desc, arr) in enumerate(pages):
        d = _our_page_header(desc)
        if d is None:
            raise InputFileError(f"page {n} description should be our JSON header; see docs/strain-format.md",
                                 path=str(path))
        heads.append((d, arr))
    header = dict(heads[0][0])
    try:
        n_steps = len(header.get("steps") or [0])
    except TypeError as err:
        raise InputFileError("page 0 states steps that are not a list", path=str(path)) from err
    arrays: dict = {}
    for n, (desc, arr) in enumerate(heads):
        c, k = desc.get("page_component"), desc.get("page_step")
        if c is None or k is None:
            raise InputFileError(f"page {n} lacks page_component/page_step", path=str(path))
        for key in ("quantity", "length_unit", "value_unit", "step"):
            if desc.get(key) != header.get(key):
                raise InputFileError(f"page {n} states {key}={desc.get(key)!r} but page 0 states {header.get(key)!r}",
                                     path=str(path))
        arrays.setdefault(c, [None] * n_steps)
        if not isinstance(k, int) or not 0 <= k < n_steps:
            raise InputFileError(f"page {n} step index {k} is outside 0..{n_steps - 1}", path=str(path))
        arrays[c][k] = arr
    for c, lst in arrays.items():
        if any(a is None for a in lst):
            raise InputFileError(f"component {c!r} lacks a page for some step", path=str(path), column=c)
        shapes = {a.shape for a in lst}
        if len(shapes) != 1:
            raise InputFileError(f"component {c!r} pages have unequal grids {sorted(shapes)}", path=str(path), column=c)
        arrays[c] = np.stack(lst)
    return _from_header(_override(header, opts, path), arrays, path)


def _read_plain_tiff(pages: list, path: Path, opts: dict, notes: list) -> StrainSeries:
    """A plain TIFF stack: pages step-major, components in the order the sidecar (or the quantity) gives."""
    quantity = opts.get("quantity")
    comps = opts.get("components")
    if comps is None and quantity is None:
        n = len(pages)
        raise InputFileError(f"a plain TIFF stack ({n} page(s), no slipnet header in the pages) needs to be told what "
                             f"its pages hold: a sidecar {path.with_suffix('.json').name} beside it with quantity, "
                             "components (the page order of one step), step and units (docs/own-data.md), or "
                             f"{_hint('quantity', repr('strain'))}, {_hint('grid_step', '0.5')}, "
                             f"{_hint('length_unit', repr('um'))} and {_hint('value_unit', repr('%'))}",
                             path=str(path))
    if comps is None:
        comps = list(STRAIN_COMPONENTS if str(quantity).strip().lower() == "strain" else DISPLACEMENT_COMPONENTS)
    comps = [str(c) for c in comps]
    bad = [c for c in comps if c not in STRAIN_COMPONENTS + DISPLACEMENT_COMPONENTS]
    if bad or len(set(comps)) != len(comps):
        raise InputFileError(f"components should list distinct names among u, v, exx, eyy, exy (the page order of "
                             f"one step); got {comps}", path=str(path))
    q = _quantity_of(dict.fromkeys(comps, 0), quantity, path, "pages")
    nc = len(comps)
    if len(pages) % nc:
        raise InputFileError(f"{len(pages)} pages do not split into steps of {nc} components ({', '.join(comps)})",
                             path=str(path))
    n_steps = len(pages) // nc
    shapes = {a.shape for _, a in pages}
    if len(shapes) != 1:
        raise InputFileError(f"the pages have unequal sizes {sorted(shapes)}; every page should be the same grid",
                             path=str(path))
    arrays = {c: np.stack([pages[k * nc + m][1].astype(np.float64) for k in range(n_steps)])
              for m, c in enumerate(comps)}
    return _series_from_arrays(arrays, None, None, q, opts, path, notes, {}, n_steps_given=n_steps)


# ===================================================================================== arrays (.mat, HDF5, TIFF)
def _series_from_arrays(arrays: dict, x, y, quantity: str, opts: dict, path: Path, notes: list, units: dict, *,
                        n_steps_given: int | None = None, steps_values=None) -> StrainSeries:
    """A series from component arrays ``(n_steps, ny, nx)`` in the file's units and optional coordinates."""
    p = str(path)
    names = STRAIN_COMPONENTS if quantity == "strain" else DISPLACEMENT_COMPONENTS
    shapes = {arrays[c].shape for c in names}
    if len(shapes) != 1:
        listed = ", ".join(f"{c}: {arrays[c].shape}" for c in names)
        raise InputFileError(f"the components have unequal shapes ({listed})", path=p)
    n_steps, ny, nx = shapes.pop()
    pixel = opts.get("pixel_size_um")
    lunit = opts.get("length_unit") or units.get("x") or units.get("y")
    if x is not None or y is not None:
        if x is None or y is None:
            raise InputFileError("the file gives only one of the x, y coordinates; give both, or neither (then the "
                                 f"grid step comes from {_hint('grid_step', '0.5')} or the sidecar)", path=p)
        x0, sx, flip_x = _axis_from_coords(x, 1, "x", path)
        y0, sy, flip_y = _axis_from_coords(y, 0, "y", path)
        nxc = np.asarray(x).shape[-1] if np.ndim(x) == 2 and 1 not in np.shape(x) else np.size(x)
        nyc = np.asarray(y).shape[0] if np.ndim(y) == 2 and 1 not in np.shape(y) else np.size(y)
        if (nyc, nxc) != (ny, nx):
            raise InputFileError(f"the coordinates describe a {nyc} × {nxc} grid but the fields are {ny} × {nx}",
                                 path=p)
        if abs(sx - sy) > 1e-3 * max(sx, sy):
            raise InputFileError(f"x is spaced {sx:.6g} and y {sy:.6g}; slipnet needs a square grid", path=p)
        if flip_x or flip_y:
            arrays = {c: a[:, ::-1 if flip_y else 1, ::-1 if flip_x else 1] for c, a in arrays.items()}
            notes.append(f"{'x' if flip_x else ''}{' and ' if flip_x and flip_y else ''}{'y' if flip_y else ''} "
                         "decrease along the file's arrays: rows/columns were reversed so they increase "
                         "(positions unchanged)")
        step, origin = 0.5 * (sx + sy), (x0, y0)
    else:
        step = opts.get("grid_step")
        if step is None:
            raise InputFileError(f"the file gives no x, y coordinates: give the grid step with "
                                 f"{_hint('grid_step', '0.5')} (in the length unit) or as 'step' in a sidecar",
                                 path=p)
        try:
            step = float(step)
        except (TypeError, ValueError):
            step = float("nan")
        if not (step > 0 and math.isfinite(step)):
            raise InputFileError(f"the grid step should be a positive number; got {opts.get('grid_step')!r}", path=p)
        origin = (float(opts.get("x0") or 0.0), float(opts.get("y0") or 0.0))
    if lunit is None:
        raise InputFileError(f"the file does not say its length unit: give it with {_hint('length_unit', repr('um'))}"
                             " or as 'length_unit' in a sidecar", path=p)
    lf = length_factor(lunit, path=path, pixel_size_um=pixel)
    comps = {}
    for c in names:
        unit = opts.get("value_unit") or units.get(c)
        comps[c] = arrays[c].astype(np.float64, copy=False) * _value_factor(quantity, unit, c, path, pixel)
    steps = steps_values if steps_values is not None else opts.get("steps")
    if steps is not None:
        try:
            steps = np.asarray(steps, dtype=float).ravel()
        except (TypeError, ValueError) as err:
            raise InputFileError(f"steps should be numbers; got {steps!r}", path=p) from err
        if steps.size != n_steps:
            raise InputFileError(f"{steps.size} step labels are given for {n_steps} load step(s) in the file",
                                 path=p)
    meta = dict(opts.get("meta") or {})
    meta["reader"] = {**meta.get("reader", {}), "length_unit": str(lunit), "grid_step_um": step * lf}
    return _finish(quantity, comps, step * lf, (origin[0] * lf, origin[1] * lf), steps,
                   str(opts.get("step_name") or ("cycles" if steps is not None else "load_step")),
                   str(opts.get("name") or ""), meta, opts.get("shear"), path, notes)


def _stack_layout(a: np.ndarray, name: str, layout: str, path) -> np.ndarray:
    """A field as ``(n_steps, ny, nx)``: MATLAB's ``(ny, nx, n_steps)`` or HDF5's ``(n_steps, ny, nx)``."""
    a = np.asarray(a)
    if not (np.issubdtype(a.dtype, np.floating) or np.issubdtype(a.dtype, np.integer)):
        raise InputFileError(f"{name} holds {a.dtype} values, not numbers", path=str(path), column=name)
    if a.ndim == 2:
        return a[None]
    if a.ndim == 3:
        return np.moveaxis(a, -1, 0) if layout == "matlab" else a
    raise InputFileError(f"{name} has shape {a.shape}; a field is 2-D (one step) or 3-D "
                         f"({'ny × nx × steps' if layout == 'matlab' else 'steps × ny × nx'})", path=str(path),
                         column=name)


def _pick(leaves: dict, opts: dict, path, what: str) -> tuple[dict, str]:
    """slipnet's names → leaf names of a .mat/HDF5 file, and the quantity."""
    keys = list(leaves)
    headers = [k.replace("/", ".").split(".")[-1] for k in keys]
    mapping = {}
    for name, target in (opts.get("columns") or {}).items():
        t = str(target).replace("/", ".").strip(".")
        full = [k for k in keys if k.replace("/", ".").strip(".") == t]
        mapping[name] = full[0].replace("/", ".").split(".")[-1] if len(full) == 1 and headers.count(
            full[0].replace("/", ".").split(".")[-1]) == 1 else target
        if len(full) == 1 and headers.count(headers[keys.index(full[0])]) > 1:
            mapping[name] = f"#{keys.index(full[0]) + 1}"
    found = match_columns(headers, _ALIASES, mapping, path, what=what, names_word="variables")
    quantity = _quantity_of(found, opts.get("quantity"), path, "variables")
    return {n: keys[k] for n, k in found.items()}, quantity


def _read_mat5(path: Path, opts: dict, notes: list, budget) -> StrainSeries:
    import scipy.io as sio
    from scipy.io.matlab import MatReadError

    p = str(path)
    errors = (*_LIB_ERRORS, MatReadError)
    try:
        info = sio.whosmat(p)
    except errors as err:
        raise InputFileError(f"not a readable MATLAB file ({type(err).__name__}: {err}); save it again from MATLAB "
                             "(save -v7 or -v7.3) or export a CSV", path=p) from err
    total = sum(float(np.prod([float(s) for s in shape])) * 8 for _, shape, _ in info)
    if info:
        big = max(info, key=lambda v: float(np.prod([float(s) for s in v[1]])))
        check_allocation(total, 1, f"{len(info)} MATLAB variable(s) (the largest, {big[0]!r}, of size {big[1]})",
                         path=p, budget=budget)
    try:
        data = sio.loadmat(p, simplify_cells=True)
    except errors as err:
        raise InputFileError(f"the MATLAB file is damaged ({type(err).__name__}: {err})", path=p) from err
    leaves: dict = {}

    def walk(prefix: str, v) -> None:
        if isinstance(v, dict):
            for k, w in v.items():
                if not str(k).startswith("__"):
                    walk(f"{prefix}.{k}" if prefix else str(k), w)
        elif isinstance(v, np.ndarray) and v.dtype != object and v.size:
            leaves[prefix] = v
        elif isinstance(v, (int, float)) and not isinstance(v, bool):
            leaves[prefix] = np.asarray(float(v))

    walk("", data)
    return _from_leaves(leaves, {}, path, opts, notes, "matlab")


def _attr_text(v) -> str | None:
    if isinstance(v, bytes):
        return v.decode("utf-8", errors="replace")
    if isinstance(v, np.ndarray):
        if v.dtype.kind in "SU" and v.size == 1:
            return _attr_text(v.ravel()[0])
        if v.dtype.kind in "ui" and v.ndim == 1 and v.size < 64:  # MATLAB char arrays
            return "".join(chr(int(c)) for c in v)
        return None
    return str(v) if isinstance(v, str) else None


def _read_hdf5(path: Path, opts: dict, notes: list, budget, matlab: bool) -> StrainSeries:
    import h5py

    p = str(path)
    try:
        fh = h5py.File(p, "r")
    except _LIB_ERRORS as err:
        raise InputFileError(f"not a readable HDF5 file ({type(err).__name__}: {err})", path=p) from err
    try:
        with fh:
            sets: dict = {}
            fh.visititems(lambda name, obj: sets.__setitem__(name, obj) if isinstance(obj, h5py.Dataset) else None)
            layout = "matlab" if matlab or any("MATLAB_class" in d.attrs for d in sets.values()) else "c"
            numeric = {k: d for k, d in sets.items() if d.dtype.kind in "fiu" and d.shape is not None}
            root = {}
            for key in _SIDECAR_KEYS:
                if key in fh.attrs and key not in ("columns", "meta"):
                    v = fh.attrs[key]
                    t = _attr_text(v)
                    root["grid_step" if key == "step" else key] = t if t is not None else (
                        v.tolist() if isinstance(v, np.ndarray) else v)
            units = {}
            for k, d in numeric.items():
                for key in ("units", "unit"):
                    if key in d.attrs:
                        units[k] = _attr_text(d.attrs[key])
            leaves_shape = {k: d.shape for k, d in numeric.items()}
            given = {k: v for k, v in opts.items() if v is not None}
            chosen, quantity = _pick(leaves_shape, {**root, **given}, path, "HDF5 file")
            need = [chosen[n] for n in chosen]
            total = sum(float(np.prod([float(s) for s in numeric[k].shape])) * 8 for k in need)
            check_allocation(total, 1, f"{len(need)} dataset(s) ({', '.join(f'{k} {numeric[k].shape}' for k in need)})",
                             path=p, budget=budget)
            leaves = {}
            for k in need:
                a = numeric[k][()]
                leaves[k] = np.asarray(a).T if layout == "matlab" else np.asarray(a)
    except InputFileError:
        raise
    except _LIB_ERRORS as err:
        raise InputFileError(f"the HDF5 file is damaged or not in a layout slipnet reads ({type(err).__name__}: "
                             f"{err})", path=p) from err
    return _from_leaves(leaves, units, path, {**root, **given}, notes, layout, chosen=(chosen, quantity))


def _from_leaves(leaves: dict, units: dict, path: Path, opts: dict, notes: list, layout: str, *,
                 chosen=None) -> StrainSeries:
    """A series from the variables (datasets) of a .mat or HDF5 file."""
    if chosen is None:
        chosen, quantity = _pick({k: v.shape for k, v in leaves.items()}, opts, path, "MATLAB file")
    else:
        chosen, quantity = chosen
    names = STRAIN_COMPONENTS if quantity == "strain" else DISPLACEMENT_COMPONENTS
    arrays = {c: _stack_layout(leaves[chosen[c]], chosen[c], layout, path) for c in names}
    x = leaves[chosen["x"]] if "x" in chosen else None
    y = leaves[chosen["y"]] if "y" in chosen else None
    if x is not None and np.ndim(x) == 3:
        x = np.asarray(x)[..., 0] if layout == "matlab" else np.asarray(x)[0]
    if y is not None and np.ndim(y) == 3:
        y = np.asarray(y)[..., 0] if layout == "matlab" else np.asarray(y)[0]
    steps = None
    if "step" in chosen:
        steps = np.asarray(leaves[chosen["step"]], dtype=float).ravel()
    file_units = {n: units.get(chosen[n]) for n in chosen}
    return _series_from_arrays(arrays, x, y, quantity, opts, path, notes, file_units, steps_values=steps)


# ===================================================================================== lab text tables
def _read_lab_text(text: str, used: str, path: Path, opts: dict, notes: list, budget) -> StrainSeries:
    table = read_text_table(text, path, delimiter=opts.get("delimiter"), encoding=used, what="strain file")
    found = match_columns(table.headers, _ALIASES, opts.get("columns"), path, what="strain file")
    quantity = _quantity_of(found, opts.get("quantity"), path, "columns")
    names = STRAIN_COMPONENTS if quantity == "strain" else DISPLACEMENT_COMPONENTS
    for c in ("x", "y"):
        if c not in found:
            raise InputFileError(f"no {c} column found (columns found: {', '.join(repr(h) for h in table.headers)}); "
                                 f"map it with {_hint('columns', repr({c: 'NAME IN FILE'}))}", path=str(path))
    pixel = opts.get("pixel_size_um")
    pos = {}
    for c in ("x", "y"):
        k = found[c]
        unit = _given_over_file(opts.get("length_unit"), table.units[k], table.headers[k], path, notes,
                                canonical_length_unit, "length_unit")
        if unit is None:
            raise InputFileError(f"column {table.headers[k]!r} states no length unit in its header (e.g. "
                                 f"'{c} [mm]'); give it with {_hint('length_unit', repr('mm'))}", path=str(path),
                                 column=table.headers[k])
        pos[c] = table.numbers(k, path) * length_factor(unit, path=path, column=table.headers[k], pixel_size_um=pixel)
    values = {}
    for c in names:
        k = found[c]
        canon = canonical_length_unit if quantity == "displacement" else canonical_strain_unit
        unit = _given_over_file(opts.get("value_unit"), table.units[k], table.headers[k], path, notes, canon,
                                "value_unit")
        values[c] = table.numbers(k, path) * _value_factor(quantity, unit, table.headers[k], path, pixel)
    labels = table.numbers(found["step"], path) if "step" in found else None
    if labels is not None and not np.all(np.isfinite(labels)):
        r = int(np.flatnonzero(~np.isfinite(labels))[0])
        raise InputFileError("the load-step column has an empty value", path=str(path), line=int(table.lines[r]),
                             column=table.headers[found["step"]])
    comps, step, origin, steps, missing = grid_from_points(pos["x"], pos["y"], labels, values, path,
                                                           lines=table.lines, budget=budget)
    step_name = opts.get("step_name")
    if step_name is None:
        step_name = (split_unit(table.headers[found["step"]])[0] or "load_step") if "step" in found else "load_step"
    meta = dict(opts.get("meta") or {})
    meta["reader"] = {"format": "table", "encoding": used,
                      "delimiter": "whitespace" if table.delimiter is None else table.delimiter,
                      "decimal": table.decimal,
                      "columns": {n: table.headers[k] for n, k in found.items()},
                      "units": {n: table.units[k] for n, k in found.items()},
                      "missing_points": missing, "grid_step_um": step}
    return _finish(quantity, comps, step, origin, steps, str(step_name), str(opts.get("name") or ""), meta,
                   opts.get("shear"), path, notes)


# ===================================================================================== entry
@guarded_reader("strain file", "check its format and units against docs/own-data.md and export it again")
def read_strain(path: str | os.PathLike, *, columns: dict | None = None, length_unit: str | None = None,
                value_unit: str | None = None, quantity: str | None = None, pixel_size_um: float | None = None,
                grid_step: float | None = None, shear: str | None = None, sidecar: str | os.PathLike | None = None,
                encoding: str | None = None, delimiter: str | None = None,
                budget: int | str | None = None) -> StrainSeries:
    """Read a displacement or strain series: our formats, or a file as a laboratory exports it.

    The format comes from the file's first bytes: npz bundle, TIFF (ours, or a plain stack with a
    sidecar), MATLAB ``.mat`` (v4–v7 and v7.3), HDF5, else text: our table (``docs/strain-format.md``)
    when it starts with our header, else any CSV/TXT table (``docs/own-data.md``). Lengths are
    converted to µm and strains to plain numbers (tensor shear).

    Parameters
    ----------
    path
        The file.
    columns
        slipnet's names (``x, y, u, v, exx, eyy, exy, step``) → the file's column header, its name
        without the unit, ``"#N"`` (N-th column from 1), or a variable / dataset name (``"dic.exx"``,
        ``"/fields/exx"``). Names not mapped are found by the documented aliases (``E_xx`` is ``exx``).
    length_unit
        Unit of positions and grid step (``nm``, ``um``, ``mm``, ``px``); default the header brackets
        (``x [mm]``), the sidecar or the file's attributes. Given, it wins over the file (noted).
    value_unit
        Unit of the values: strain ``1``, ``%``, ``ustrain``; displacement a length unit.
    quantity
        ``"strain"`` or ``"displacement"`` when the file holds both (or a plain TIFF says neither).
    pixel_size_um
        µm per pixel, needed when a unit is ``px``.
    grid_step
        Grid spacing (in ``length_unit``) of a file without coordinates (TIFF stack, .mat fields only).
    shear
        ``"tensor"`` (default: ``exy`` is half the engineering shear) or ``"engineering"`` (γ_xy, halved
        on reading).
    sidecar
        JSON or TOML settings for a TIFF stack, .mat or HDF5 file (default ``<stem>.json`` /
        ``<stem>.toml`` beside it); the keyword arguments win over it.
    encoding
        Text encoding (default detected: UTF-8/UTF-16 by their marks, else Windows-1252, noted).
    delimiter
        Column delimiter of a text table (default detected).
    budget
        Memory budget for what the file declares (see :func:`slipnet._inputs.memory_budget`).

    Returns
    -------
    StrainSeries
        ``meta["reader"]`` records the decisions (columns, units, encoding...), ``meta["notes"]``
        the ones to check.

    Raises
    ------
    InputFileError
        Anything wrong with the file or the options, naming the file, the line or column and the fix.

    Examples
    --------
    >>> import tempfile, pathlib
    >>> d = pathlib.Path(tempfile.mkdtemp())
    >>> _ = (d / "dic.csv").write_text("x [mm];y [mm];exx [%];eyy [%];exy [%]\\n"
    ...     "0;0;0,1;0;0\\n0,005;0;0,2;0;0\\n0;0,005;0,3;0;0\\n0,005;0,005;0,4;0;0\\n", encoding="utf-8")
    >>> s = read_strain(d / "dic.csv")
    >>> s.step, s.components["exx"][0].tolist()
    (5.0, [[0.001, 0.002], [0.003, 0.004]])
    """
    path = Path(path)
    if not path.exists():
        raise InputFileError("no such file; check the path and the current folder", path=str(path))
    checked_input(path, "strain file")
    notes: list = []
    opts = {"columns": dict(columns) if columns else None, "length_unit": length_unit, "value_unit": value_unit,
            "quantity": quantity, "pixel_size_um": pixel_size_um, "grid_step": grid_step, "shear": shear,
            "delimiter": delimiter}
    for key, val in (("length_unit", length_unit), ("value_unit", value_unit)):
        if val is not None and canonical_length_unit(val) is None and canonical_strain_unit(val) is None:
            raise ParameterError(f"{key} should be a length unit (nm, um, mm, px) or a strain unit (1, %, ustrain); "
                                 f"got {val!r}")
    kind = _sniff(path)
    if kind in ("tiff", "mat5", "mat73", "hdf5"):
        side_path = find_sidecar(path, sidecar)
        side = read_sidecar(side_path) if side_path is not None else {}
        if side_path is not None:
            side = {("grid_step" if k == "step" else k): v for k, v in side.items()}
            merged_cols = {**(side.get("columns") or {}), **(opts["columns"] or {})}
            opts = {**side, **{k: v for k, v in opts.items() if v is not None}, "columns": merged_cols or None}
    elif sidecar is not None:
        side = {("grid_step" if k == "step" else k): v for k, v in read_sidecar(Path(sidecar)).items()}
        merged_cols = {**(side.get("columns") or {}), **(opts["columns"] or {})}
        opts = {**side, **{k: v for k, v in opts.items() if v is not None}, "columns": merged_cols or None}
    if kind == "npz":
        return _read_npz(path, opts, budget)
    if kind == "tiff":
        pages = _tiff_pages(path, budget)
        if _our_page_header(pages[0][0]) is not None:
            return _read_our_tiff(pages, path, opts)
        return _read_plain_tiff(pages, path, opts, notes)
    if kind == "mat5":
        return _read_mat5(path, opts, notes, budget)
    if kind in ("mat73", "hdf5"):
        return _read_hdf5(path, opts, notes, budget, matlab=kind == "mat73")
    check_allocation(path.stat().st_size * 12.0, 1, "the text table once parsed (about 12 bytes per character)",
                     path=path, budget=budget)
    raw = path.read_bytes()
    text, used = decode_text(raw, path, encoding, "strain file", notes)
    if _is_our_text(text):
        series = _read_our_text(text, path, opts, budget)
        if notes:
            meta = {**series.meta, "notes": [*series.meta.get("notes", []), *notes]}
            series = StrainSeries(series.quantity, series.components, series.step, series.origin, series.steps,
                                  series.step_name, series.name, meta)
        return series
    return _read_lab_text(text, used, path, opts, notes, budget)

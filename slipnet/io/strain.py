"""Measured strain files: our text table, npz bundle and multi-page TIFF (``docs/strain-format.md``).

A text table with a header stating units and grid, a compressed npz bundle (no pickled objects)
and a multi-page TIFF (one page per component per step, metadata as JSON in each page's
description), read into and written from a :class:`~slipnet.maps.StrainSeries`.
"""

from __future__ import annotations

import io as _io
import json
import os
import re
from pathlib import Path

import numpy as np
import pandas as pd

from slipnet._files import atomic_path
from slipnet._inputs import check_npz_sizes, checked_input
from slipnet.errors import InputFileError, ParameterError
from slipnet.maps.strain import DISPLACEMENT_COMPONENTS, STRAIN_COMPONENTS, StrainSeries

__all__ = ["FORMAT_TAG", "read_strain", "write_strain"]


FORMAT_TAG = "slipnet-strain/1"


_LENGTH_UNITS = {"um": 1.0, "µm": 1.0, "nm": 1e-3, "mm": 1e3}


_STRAIN_UNITS = {"1": 1.0, "%": 1e-2, "ustrain": 1e-6}


# ------------------------------------------------------------------------------------ file I/O
def _kind_of(path: Path) -> str:
    suffix = path.suffix.lower()
    if suffix == ".npz":
        return "npz"
    if suffix in (".tif", ".tiff"):
        return "tiff"
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
    table = _LENGTH_UNITS if quantity == "displacement" else _STRAIN_UNITS
    if unit not in table:
        want = "a length unit (um, nm, mm)" if quantity == "displacement" else "a strain unit (1, %, ustrain)"
        raise InputFileError(f"value_unit {unit!r} does not match quantity {quantity!r}; expected {want}",
                             path=str(path))
    return table[unit]


def _length_scale(unit: str, path: Path) -> float:
    unit = str(unit).strip()
    if unit not in _LENGTH_UNITS:
        raise InputFileError(f"length_unit should be one of um, nm, mm; got {unit!r}", path=str(path))
    return _LENGTH_UNITS[unit]


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
    ny, nx = int(header["ny"]), int(header["nx"])
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
    except ParameterError as err:
        raise InputFileError(str(err), path=str(path)) from err


_GRID_RE = re.compile(r"(\w+)\s*=\s*([^\s]+)")


def _read_text(path: Path) -> StrainSeries:
    header: dict = {}
    n_header = 0
    with open(path, encoding="utf-8") as fh:
        for line in fh:
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
            else:
                header[key] = val
    if header.get("quantity") is None and n_header == 0:
        raise InputFileError("no '# quantity:' header; see docs/strain-format.md", path=str(path), line=1)
    for key in ("nx", "ny", "step", "x0", "y0"):
        if key in header:
            try:
                header[key] = float(header[key])
            except ValueError as err:
                raise InputFileError(f"grid value {key}={header[key]!r} should be a number", path=str(path)) from err
    for key in ("quantity", "length_unit", "value_unit", "nx", "ny", "step"):
        if key not in header:
            raise InputFileError(f"header lacks {key!r}; see docs/strain-format.md", path=str(path))
    try:
        table = pd.read_csv(path, skiprows=n_header, na_values=["nan", "NaN"])
    except (pd.errors.ParserError, pd.errors.EmptyDataError) as err:
        raise InputFileError(f"cannot parse the table: {err}", path=str(path), line=n_header + 1) from err
    table.columns = [str(c).strip() for c in table.columns]
    quantity = str(header["quantity"]).strip().lower()
    names = DISPLACEMENT_COMPONENTS if quantity == "displacement" else STRAIN_COMPONENTS
    for c in ("step", "x", "y", *names):
        if c not in table.columns:
            raise InputFileError(f"column {c!r} is missing; columns found: {list(table.columns)}", path=str(path),
                                 column=c)
    nx, ny = int(header["nx"]), int(header["ny"])
    _length_scale(header["length_unit"], path)  # refuse unknown units before parsing the table
    step_um = float(header["step"])
    x0, y0 = float(header.get("x0", 0.0)), float(header.get("y0", 0.0))
    steps_col = table["step"].to_numpy(float)
    labels = pd.unique(steps_col)
    if table.shape[0] != labels.size * nx * ny:
        raise InputFileError(f"{table.shape[0]} rows do not fill {labels.size} step(s) of the stated "
                             f"{ny} x {nx} grid", path=str(path))
    # each row's grid point from its coordinates; they must fall on the stated grid
    jf = (table["x"].to_numpy(float) - x0) / step_um
    if_ = (table["y"].to_numpy(float) - y0) / step_um
    j = np.rint(jf).astype(np.int64)
    i = np.rint(if_).astype(np.int64)
    off = (np.abs(jf - j) > 1e-3) | (np.abs(if_ - i) > 1e-3) | (j < 0) | (j >= nx) | (i < 0) | (i >= ny)
    if off.any():
        row = int(np.flatnonzero(off)[0])
        raise InputFileError(f"point ({table['x'].iloc[row]}, {table['y'].iloc[row]}) is not on the stated grid "
                             f"(nx={nx}, ny={ny}, step={step_um}, x0={x0}, y0={y0})", path=str(path),
                             line=n_header + 2 + row)
    k = np.searchsorted(np.sort(labels), steps_col)
    order_labels = np.sort(labels)
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


def _read_npz(path: Path) -> StrainSeries:
    check_npz_sizes(path, "strain bundle")
    try:
        with np.load(path, allow_pickle=False) as data:
            arrays = {k: data[k] for k in data.files}
    except ValueError as err:
        raise InputFileError(f"not a plain npz bundle (pickled objects are refused): {err}", path=str(path)) from err
    if "header" not in arrays:
        raise InputFileError("npz bundle lacks the 'header' JSON array; see docs/strain-format.md", path=str(path))
    try:
        header = json.loads(str(arrays.pop("header")))
    except json.JSONDecodeError as err:
        raise InputFileError(f"header should be JSON: {err}", path=str(path)) from err
    if "steps" in arrays:
        header["steps"] = arrays.pop("steps").tolist()
    return _from_header(header, arrays, path)


def _read_tiff(path: Path) -> StrainSeries:
    import tifffile

    pages = []
    with tifffile.TiffFile(path) as tif:
        for n, page in enumerate(tif.pages):
            try:
                desc = json.loads(page.description)
            except (json.JSONDecodeError, TypeError) as err:
                raise InputFileError(f"page {n} description should be our JSON header; see docs/strain-format.md",
                                     path=str(path)) from err
            pages.append((desc, page.asarray()))
    if not pages:
        raise InputFileError("the TIFF has no pages", path=str(path))
    header = dict(pages[0][0])
    n_steps = len(header.get("steps") or [0])
    arrays: dict = {}
    for n, (desc, arr) in enumerate(pages):
        c, k = desc.get("page_component"), desc.get("page_step")
        if c is None or k is None:
            raise InputFileError(f"page {n} lacks page_component/page_step", path=str(path))
        for key in ("quantity", "length_unit", "value_unit", "step"):
            if desc.get(key) != header.get(key):
                raise InputFileError(f"page {n} states {key}={desc.get(key)!r} but page 0 states {header.get(key)!r}",
                                     path=str(path))
        arrays.setdefault(c, [None] * n_steps)
        if not 0 <= int(k) < n_steps:
            raise InputFileError(f"page {n} step index {k} is outside 0..{n_steps - 1}", path=str(path))
        arrays[c][int(k)] = arr
    for c, lst in arrays.items():
        if any(a is None for a in lst):
            raise InputFileError(f"component {c!r} lacks a page for some step", path=str(path), column=c)
        shapes = {a.shape for a in lst}
        if len(shapes) != 1:
            raise InputFileError(f"component {c!r} pages have unequal grids {sorted(shapes)}", path=str(path), column=c)
        arrays[c] = np.stack(lst)
    return _from_header(header, arrays, path)


def read_strain(path: str | os.PathLike) -> StrainSeries:
    """Read a displacement or strain series from our documented formats (``docs/strain-format.md``).

    The format follows the suffix: ``.npz`` compressed bundle, ``.tif``/``.tiff`` multi-page TIFF,
    anything else the text table. Lengths are converted to µm and strains to plain numbers.

    Raises
    ------
    InputFileError
        Missing header keys or columns, grids that disagree with the header or between
        components, units that do not fit the quantity, unparsable values.
    """
    path = Path(path)
    if not path.exists():
        raise InputFileError("no such file", path=str(path))
    checked_input(path, "strain file")
    kind = _kind_of(path)
    if kind == "npz":
        return _read_npz(path)
    if kind == "tiff":
        return _read_tiff(path)
    return _read_text(path)

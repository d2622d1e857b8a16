"""Measured strain data in: displacement or strain fields on a regular grid, and strain from displacements.

A :class:`StrainSeries` holds one or more load steps (or cycle counts) of either displacement
components ``u, v`` (µm) or in-plane strain components ``exx, eyy, exy`` (dimensionless, tensor
shear) on a regular square grid. Missing correlation points are NaN in the arrays and ``False`` in
:attr:`StrainSeries.valid`; every function here returns NaN exactly where a value cannot be
computed, and statistics downstream use the masks, so NaN never reaches a score.

Files are read from and written to our own documented formats (``docs/strain-format.md``): a text
table with a header stating units and grid, a compressed npz bundle (no pickled objects) and a
multi-page TIFF (one page per component per step, metadata as JSON in each page's description).

Strain definitions (map frame: x right, y down)
-----------------------------------------------
* small strain: ε = ½(H + Hᵀ), H = ∇u the in-plane displacement gradient;
* Green–Lagrange: E = ½(H + Hᵀ + HᵀH) = ½(FᵀF − I), F = I + H;
* maximum in-plane shear: γ_max = √(((ε_xx − ε_yy)/2)² + ε_xy²) (the radius of Mohr's circle, i.e.
  tensor shear; the engineering maximum shear strain is twice this);
* equivalent (von Mises) strain: ε_eq = √(⅔ ε_ij ε_ij) with ε_zz = −(ε_xx + ε_yy) (plastic
  incompressibility) and zero out-of-plane shears, so a uniaxial strain e gives ε_eq = e.
"""

from __future__ import annotations

import io as _io
import json
import os
import re
from dataclasses import dataclass, field, replace
from pathlib import Path

import numpy as np
import pandas as pd
from scipy import ndimage

from ._checks import check_choice, check_positive
from ._files import atomic_path
from .errors import InputFileError, ParameterError

__all__ = [
    "DISPLACEMENT_COMPONENTS",
    "STRAIN_COMPONENTS",
    "StrainSeries",
    "equivalent_strain",
    "max_shear_strain",
    "read_strain",
    "strain_from_displacement",
    "write_strain",
]

FORMAT_TAG = "slipnet-strain/1"
DISPLACEMENT_COMPONENTS = ("u", "v")
STRAIN_COMPONENTS = ("exx", "eyy", "exy")
_LENGTH_UNITS = {"um": 1.0, "µm": 1.0, "nm": 1e-3, "mm": 1e3}
_STRAIN_UNITS = {"1": 1.0, "%": 1e-2, "ustrain": 1e-6}
_METHODS = ("small", "green-lagrange")


# --------------------------------------------------------------------------------------- container
@dataclass(frozen=True, eq=False)
class StrainSeries:
    """Measured fields on a regular square grid, one or more load steps.

    Attributes
    ----------
    quantity : str
        ``"displacement"`` (components ``u``, ``v`` in µm) or ``"strain"`` (components ``exx``,
        ``eyy``, ``exy``, dimensionless; ``exy`` is tensor shear, half the engineering shear).
    components : dict of str to (n_steps, ny, nx) ndarray
        Field values; NaN at missing correlation points.
    step : float
        Grid spacing in µm (equal along x and y).
    origin : tuple of float
        ``(x0, y0)`` in µm of grid point ``(0, 0)`` in the strain-image frame; point ``(i, j)``
        sits at ``(x0 + j·step, y0 + i·step)`` (x along columns, y along rows).
    steps : (n_steps,) ndarray
        Load step label of each step (e.g. cycle count).
    step_name : str
        What :attr:`steps` counts (``"cycles"``, ``"load_step"``...).
    name : str
        A label for reports.
    meta : dict
        Free JSON-safe metadata (``synthetic: True`` marks invented data).
    """

    quantity: str
    components: dict
    step: float
    origin: tuple[float, float] = (0.0, 0.0)
    steps: np.ndarray | None = None
    step_name: str = "cycles"
    name: str = ""
    meta: dict = field(default_factory=dict)

    def __post_init__(self) -> None:
        quantity = check_choice(self.quantity, "quantity", ("displacement", "strain"))
        object.__setattr__(self, "quantity", quantity)
        names = DISPLACEMENT_COMPONENTS if quantity == "displacement" else STRAIN_COMPONENTS
        missing = [c for c in names if c not in self.components]
        if missing:
            raise ParameterError(f"{quantity} fields need components {names}; missing {missing}")
        comps = {}
        shape = None
        for c in names:
            arr = np.asarray(self.components[c], dtype=np.float64)
            if arr.ndim == 2:
                arr = arr[None]
            if arr.ndim != 3 or 0 in arr.shape:
                raise ParameterError(f"component {c!r} should have shape (n_steps, ny, nx) or (ny, nx); "
                                     f"got {arr.shape}")
            if shape is None:
                shape = arr.shape
            elif arr.shape != shape:
                raise ParameterError(f"components should share one grid; {c!r} has shape {arr.shape}, "
                                     f"{names[0]!r} has {shape}")
            if np.any(np.isinf(arr)):
                raise ParameterError(f"component {c!r} holds infinite values; mark missing points with NaN")
            comps[c] = arr
        object.__setattr__(self, "components", comps)
        object.__setattr__(self, "step", check_positive(self.step, "step"))
        origin = tuple(float(o) for o in self.origin)
        if len(origin) != 2 or not np.all(np.isfinite(origin)):
            raise ParameterError(f"origin should be two finite numbers (x0, y0) in µm; got {self.origin!r}")
        object.__setattr__(self, "origin", origin)
        steps = np.arange(shape[0], dtype=np.float64) if self.steps is None else np.asarray(self.steps, float)
        if steps.shape != (shape[0],) or not np.all(np.isfinite(steps)):
            raise ParameterError(f"steps should hold {shape[0]} finite numbers (one per load step); got {steps!r}")
        object.__setattr__(self, "steps", steps)
        object.__setattr__(self, "meta", dict(self.meta))

    # ----------------------------------------------------------------------------- geometry
    @property
    def shape(self) -> tuple[int, int]:
        """``(ny, nx)`` of the grid."""
        return next(iter(self.components.values())).shape[1:]

    @property
    def n_steps(self) -> int:
        """Number of load steps."""
        return int(self.steps.size)

    @property
    def valid(self) -> np.ndarray:
        """``(n_steps, ny, nx)`` bool: True where every component is finite."""
        return np.all(np.isfinite(np.stack(list(self.components.values()))), axis=0)

    def coordinates(self) -> tuple[np.ndarray, np.ndarray]:
        """Point positions ``(x, y)`` in µm (strain-image frame), each ``(ny, nx)``."""
        ny, nx = self.shape
        i, j = np.indices((ny, nx), dtype=np.float64)
        return self.origin[0] + j * self.step, self.origin[1] + i * self.step

    @property
    def extent(self) -> tuple[float, float, float, float]:
        """``(x_min, x_max, y_min, y_max)`` of point centres in µm."""
        ny, nx = self.shape
        x0, y0 = self.origin
        return (x0, x0 + (nx - 1) * self.step, y0, y0 + (ny - 1) * self.step)

    def step_index(self, step: int | None) -> int:
        """Array index of a load step given as an index (negative counts from the end) or None (last)."""
        if step is None:
            return self.n_steps - 1
        k = int(step)
        if not -self.n_steps <= k < self.n_steps:
            raise ParameterError(f"step should be an index in [-{self.n_steps}, {self.n_steps - 1}]; got {step!r}")
        return k % self.n_steps

    # ----------------------------------------------------------------------------- derived
    def strain(self, method: str = "small", *, window: int | None = None, min_points: int = 3) -> StrainSeries:
        """The strain series: itself if it already holds strain, else derived from ``u, v``.

        See :func:`strain_from_displacement` for ``method``, ``window`` and ``min_points``.
        """
        if self.quantity == "strain":
            return self
        u, v = self.components["u"], self.components["v"]
        exx, eyy, exy = strain_from_displacement(u, v, self.step, method=method, window=window,
                                                 min_points=min_points)
        meta = {**self.meta, "strain_method": method, "strain_window": window}
        return replace(self, quantity="strain", components={"exx": exx, "eyy": eyy, "exy": exy}, meta=meta)

    def max_shear(self, step: int | None = None, **kwargs) -> np.ndarray:
        """``(ny, nx)`` maximum in-plane shear γ_max of one load step (default the last); NaN where missing."""
        s = self.strain(**kwargs)
        k = s.step_index(step)
        return max_shear_strain(s.components["exx"][k], s.components["eyy"][k], s.components["exy"][k])

    def equivalent(self, step: int | None = None, **kwargs) -> np.ndarray:
        """``(ny, nx)`` von Mises equivalent strain of one load step (default the last)."""
        s = self.strain(**kwargs)
        k = s.step_index(step)
        return equivalent_strain(s.components["exx"][k], s.components["eyy"][k], s.components["exy"][k])


# --------------------------------------------------------------------------------- strain maths
def _validate_uv(u, v, step) -> tuple[np.ndarray, np.ndarray, float]:
    u = np.asarray(u, dtype=np.float64)
    v = np.asarray(v, dtype=np.float64)
    if u.shape != v.shape:
        raise ParameterError(f"u and v should share one grid; got shapes {u.shape} and {v.shape}")
    if u.ndim < 2 or u.shape[-1] < 2 or u.shape[-2] < 2:
        raise ParameterError(f"u and v should be (..., ny, nx) arrays with ny, nx >= 2; got shape {u.shape}")
    if np.any(np.isinf(u)) or np.any(np.isinf(v)):
        raise ParameterError("u and v hold infinite values; mark missing correlation points with NaN")
    return u, v, check_positive(step, "step")


def _gradient_central(f: np.ndarray, step: float) -> tuple[np.ndarray, np.ndarray]:
    # np.gradient: second-order central differences inside, first-order one-sided at the edges;
    # a NaN neighbour makes the derivative NaN, which is the mask we want.
    dfdy, dfdx = np.gradient(f, step, axis=(-2, -1))
    return dfdx, dfdy


def _gradient_plane(f: np.ndarray, step: float, window: int, min_points: int) -> tuple[np.ndarray, np.ndarray]:
    """Slopes of a least-squares plane f ≈ a + b·x + c·y over a window × window box, masked points excluded.

    Windowed moments of the valid points come from box filters (sums over the window), so the fit
    is vectorised: with centred moments Cxx, Cxy, Cyy, Cxf, Cyf the slopes solve
    [[Cxx, Cxy], [Cxy, Cyy]] · (b, c) = (Cxf, Cyf).
    """
    ok = np.isfinite(f)
    w = ok.astype(np.float64)
    f0 = np.where(ok, f, 0.0)
    shp = f.shape
    ii, jj = np.indices(shp[-2:], dtype=np.float64)
    x = np.broadcast_to(jj, shp)
    y = np.broadcast_to(ii, shp)
    size = [1] * (f.ndim - 2) + [window, window]

    def box(a):
        return ndimage.uniform_filter(a, size=size, mode="constant", cval=0.0)

    s1 = box(w)
    with np.errstate(invalid="ignore", divide="ignore"):
        mx, my, mf = box(w * x) / s1, box(w * y) / s1, box(f0) / s1
        cxx = box(w * x * x) / s1 - mx * mx
        cyy = box(w * y * y) / s1 - my * my
        cxy = box(w * x * y) / s1 - mx * my
        cxf = box(x * f0) / s1 - mx * mf
        cyf = box(y * f0) / s1 - my * mf
        det = cxx * cyy - cxy * cxy
        count = s1 * window * window
        # a plane needs points spanning two directions: refuse near-collinear windows
        good = ok & (np.rint(count) >= min_points) & (det > 1e-9 * np.maximum(cxx + cyy, 1e-300) ** 2)
        b = np.where(good, (cyy * cxf - cxy * cyf) / det, np.nan) / step
        c = np.where(good, (cxx * cyf - cxy * cxf) / det, np.nan) / step
    return b, c


def displacement_gradient(u, v, step: float, *, window: int | None = None,
                          min_points: int = 3) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """In-plane displacement gradient ``(du/dx, du/dy, dv/dx, dv/dy)``, each shaped like ``u``.

    Parameters
    ----------
    u, v : (..., ny, nx) ndarray
        Displacements in µm on a square grid (x along columns, y along rows); NaN where missing.
    step : float
        Grid spacing in µm.
    window : int or None
        None: central differences (``np.gradient``). An odd integer ≥ 3: slopes of a local
        least-squares plane over a ``window × window`` box, missing points excluded.
    min_points : int
        Fewest valid points a plane fit accepts.

    Returns
    -------
    tuple of ndarray
        Dimensionless gradients; NaN where the point is missing or the fit is undetermined.
    """
    u, v, step = _validate_uv(u, v, step)
    if window is None:
        ux, uy = _gradient_central(u, step)
        vx, vy = _gradient_central(v, step)
    else:
        if int(window) != window or window < 3 or window % 2 == 0:
            raise ParameterError(f"window should be an odd integer >= 3 (points per side); got {window!r}")
        if int(min_points) < 3:
            raise ParameterError(f"min_points should be at least 3 (a plane has 3 unknowns); got {min_points!r}")
        ux, uy = _gradient_plane(u, step, int(window), int(min_points))
        vx, vy = _gradient_plane(v, step, int(window), int(min_points))
    missing = ~(np.isfinite(u) & np.isfinite(v))
    out = []
    for g in (ux, uy, vx, vy):
        g = np.where(missing, np.nan, g)
        out.append(g)
    bad = ~np.all(np.isfinite(np.stack(out)), axis=0)
    return tuple(np.where(bad, np.nan, g) for g in out)


def strain_from_displacement(u, v, step: float, method: str = "small", *, window: int | None = None,
                             min_points: int = 3) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """In-plane strain components from a displacement field.

    Parameters
    ----------
    u, v : (..., ny, nx) ndarray
        Displacements along x (columns) and y (rows) in µm; NaN marks missing correlation points.
    step : float
        Grid spacing in µm.
    method : {"small", "green-lagrange"}
        ``"small"``: ε = ½(H + Hᵀ); ``"green-lagrange"``: E = ½(H + Hᵀ + HᵀH), exact for large
        rotations (a rigid rotation gives exactly zero).
    window : int or None
        None for central differences; an odd integer ≥ 3 for a local least-squares plane fit over
        ``window × window`` points (smooths noise).
    min_points : int
        Fewest valid points a plane fit accepts.

    Returns
    -------
    exx, eyy, exy : ndarray
        Dimensionless, shaped like ``u``; ``exy`` is tensor shear (half the engineering shear).
        NaN exactly where the gradient cannot be formed.

    Examples
    --------
    >>> import numpy as np
    >>> y, x = np.mgrid[0:5, 0:6] * 0.5
    >>> exx, eyy, exy = strain_from_displacement(0.01 * x, -0.002 * y, 0.5)
    >>> float(exx[2, 3]), float(eyy[2, 3])
    (0.01, -0.002)
    """
    method = check_choice(method, "method", _METHODS)
    ux, uy, vx, vy = displacement_gradient(u, v, step, window=window, min_points=min_points)
    exx, eyy, exy = ux, vy, 0.5 * (uy + vx)
    if method == "green-lagrange":
        exx = exx + 0.5 * (ux * ux + vx * vx)
        eyy = eyy + 0.5 * (uy * uy + vy * vy)
        exy = exy + 0.5 * (ux * uy + vx * vy)
    return exx, eyy, exy


def max_shear_strain(exx, eyy, exy) -> np.ndarray:
    """Maximum in-plane shear γ_max = √(((ε_xx − ε_yy)/2)² + ε_xy²) (tensor shear; dimensionless).

    NaN wherever any component is NaN.
    """
    exx, eyy, exy = (np.asarray(a, dtype=np.float64) for a in (exx, eyy, exy))
    return np.sqrt((0.5 * (exx - eyy)) ** 2 + exy**2)


def equivalent_strain(exx, eyy, exy) -> np.ndarray:
    """Von Mises equivalent strain √(⅔ ε_ij ε_ij) with ε_zz = −(ε_xx + ε_yy), zero out-of-plane shear.

    This is the plastic-incompressibility form: a uniaxial strain e (lateral −e/2) gives e, a pure
    in-plane tensor shear ε_xy gives 2ε_xy/√3.
    """
    exx, eyy, exy = (np.asarray(a, dtype=np.float64) for a in (exx, eyy, exy))
    ezz = -(exx + eyy)
    return np.sqrt(2.0 / 3.0 * (exx**2 + eyy**2 + ezz**2 + 2.0 * exy**2))


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
    if not path.is_file():
        raise InputFileError("no such file", path=str(path))
    kind = _kind_of(path)
    if kind == "npz":
        return _read_npz(path)
    if kind == "tiff":
        return _read_tiff(path)
    return _read_text(path)

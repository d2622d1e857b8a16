"""Measured strain data: displacement or strain fields on a regular grid, and strain from displacements.

A :class:`StrainSeries` holds one or more load steps (or cycle counts) of either displacement
components ``u, v`` (µm) or in-plane strain components ``exx, eyy, exy`` (dimensionless, tensor
shear) on a regular square grid. Missing correlation points are NaN in the arrays and ``False`` in
:attr:`StrainSeries.valid`; every function here returns NaN exactly where a value cannot be
computed, and statistics downstream use the masks, so NaN never reaches a score.

Files are read and written by :mod:`slipnet.io.strain` (``docs/strain-format.md``).

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

from dataclasses import dataclass, field, replace

import numpy as np

from slipnet._checks import check_choice, check_positive
from slipnet.errors import ParameterError

__all__ = [
    "DISPLACEMENT_COMPONENTS",
    "STRAIN_COMPONENTS",
    "StrainSeries",
    "equivalent_strain",
    "max_shear_strain",
    "strain_from_displacement",
]

DISPLACEMENT_COMPONENTS = ("u", "v")
STRAIN_COMPONENTS = ("exx", "eyy", "exy")
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
    from scipy import ndimage  # here, not at the top: scipy.ndimage costs ~0.5 s at start-up

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























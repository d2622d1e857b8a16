"""Registration of strain images to the orientation map: control-point transforms and resampling.

Public names are re-exported by :mod:`slipnet.compare`; import them from there.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import pandas as pd
from scipy import ndimage

from slipnet._checks import check_choice, check_positive
from slipnet.errors import NumericalError, ParameterError
from slipnet.maps.strain import StrainSeries

_MIN_POINTS = {"similarity": 2, "affine": 3, "projective": 4}


# ===================================================================================== registration
@dataclass(frozen=True, eq=False)
class Transform:
    """A planar transform fitted to control points (source frame → destination frame).

    Attributes
    ----------
    matrix : (3, 3) ndarray
        Homogeneous matrix: ``[x', y', w]ᵀ = matrix · [x, y, 1]ᵀ``, then divide by ``w``
        (``w = 1`` for similarity and affine).
    kind : str
        ``"similarity"``, ``"affine"`` or ``"projective"``.
    residuals : (n,) ndarray
        Distance in µm between each transformed source point and its destination point.
    src, dst : (n, 2) ndarray
        The control points used (µm).
    """

    matrix: np.ndarray
    kind: str
    residuals: np.ndarray
    src: np.ndarray
    dst: np.ndarray

    @property
    def rms(self) -> float:
        """Root-mean-square of :attr:`residuals`, µm."""
        return float(np.sqrt(np.mean(self.residuals**2)))

    @property
    def linear(self) -> np.ndarray:
        """(2, 2) linear part (exact for similarity/affine; at the origin for projective)."""
        return self.matrix[:2, :2] / self.matrix[2, 2]

    def apply(self, points) -> np.ndarray:
        """Transform ``(n, 2)`` points (µm) → ``(n, 2)`` points (µm)."""
        p = as_points(points, "points")
        h = p @ self.matrix[:, :2].T + self.matrix[:, 2]
        with np.errstate(divide="ignore", invalid="ignore"):
            return h[:, :2] / h[:, 2:3]

    def apply_directions(self, angles_deg) -> np.ndarray:
        """Map line directions (degrees from +x towards +y, any range) through the linear part → [0, 180)."""
        a = np.radians(np.asarray(angles_deg, dtype=float))
        d = np.stack([np.cos(a), np.sin(a)], axis=-1) @ self.linear.T
        return np.degrees(np.arctan2(d[..., 1], d[..., 0])) % 180.0

    def inverse(self) -> Transform:
        """The inverse transform (destination → source), residuals measured in the source frame."""
        inv = np.linalg.inv(self.matrix)
        inv = inv / inv[2, 2]
        back = Transform(inv, self.kind, np.zeros(len(self.dst)), self.dst, self.src)
        res = np.linalg.norm(back.apply(self.dst) - self.src, axis=1)
        return Transform(inv, self.kind, res, self.dst, self.src)

    def table(self) -> pd.DataFrame:
        """One row per control point: source, destination, fitted position and residual (µm)."""
        fit = self.apply(self.src)
        return pd.DataFrame({
            "src_x_um": self.src[:, 0], "src_y_um": self.src[:, 1],
            "dst_x_um": self.dst[:, 0], "dst_y_um": self.dst[:, 1],
            "fit_x_um": fit[:, 0], "fit_y_um": fit[:, 1], "residual_um": self.residuals,
        })


def as_points(points, name: str, *, min_rows: int = 0) -> np.ndarray:
    try:
        p = np.asarray(points, dtype=np.float64)
    except (TypeError, ValueError) as err:
        raise ParameterError(f"{name} should be an (n, 2) array of µm positions; got {points!r}") from err
    if p.ndim == 1 and p.size == 2:
        p = p[None]
    if p.ndim != 2 or p.shape[1] != 2:
        raise ParameterError(f"{name} should be an (n, 2) array of µm positions; got shape {p.shape}")
    if not np.all(np.isfinite(p)):
        raise ParameterError(f"{name} holds NaN or infinite coordinates")
    if p.shape[0] < min_rows:
        raise ParameterError(f"{name} should hold at least {min_rows} points; got {p.shape[0]}")
    return p


def _normaliser(p: np.ndarray) -> np.ndarray:
    """Hartley (1997) normalisation: centroid to the origin, mean distance √2."""
    c = p.mean(axis=0)
    d = np.mean(np.linalg.norm(p - c, axis=1))
    s = math.sqrt(2.0) / d
    return np.array([[s, 0.0, -s * c[0]], [0.0, s, -s * c[1]], [0.0, 0.0, 1.0]])


def fit_transform(src_points, dst_points, kind: str = "affine") -> Transform:
    """Least-squares planar transform from control-point pairs.

    Parameters
    ----------
    src_points, dst_points : (n, 2) array_like
        Matching positions in µm (e.g. fiducial marks in the strain image and in the map).
    kind : {"similarity", "affine", "projective"}
        Similarity (rotation, uniform scale, shift; ≥ 2 points) and affine (≥ 3 points, not
        collinear) by linear least squares on the destination residuals; projective (≥ 4 points,
        no three collinear in a minimal set) by the normalised direct linear transform of
        Hartley (1997).

    Returns
    -------
    Transform
        With ``.matrix`` (3 × 3), ``.residuals`` (µm per point), ``.rms``, ``.apply``, ``.inverse``.

    Raises
    ------
    ParameterError
        Too few points, mismatched counts, duplicate points, collinear (rank-deficient) sets.

    References
    ----------
    Hartley, R. I. (1997). In defense of the eight-point algorithm. IEEE TPAMI 19(6), 580–593.
    """
    kind = check_choice(kind, "kind", tuple(_MIN_POINTS))
    need = _MIN_POINTS[kind]
    src = as_points(src_points, "src_points")
    dst = as_points(dst_points, "dst_points")
    if src.shape != dst.shape:
        raise ParameterError(f"src_points and dst_points should hold the same number of points; "
                             f"got {src.shape[0]} and {dst.shape[0]}")
    if src.shape[0] < need:
        raise ParameterError(f"a {kind} transform needs at least {need} control points; got {src.shape[0]}")
    for name, p in (("src_points", src), ("dst_points", dst)):
        scale = max(float(np.ptp(p)), 1e-300)
        dd = np.linalg.norm(p[:, None, :] - p[None, :, :], axis=-1)
        iu = np.triu_indices(len(p), 1)
        close = dd[iu] <= 1e-9 * scale
        if np.any(close) or scale <= 1e-300:
            a, b = (int(iu[0][close][0]), int(iu[1][close][0])) if np.any(close) else (0, 1)
            raise ParameterError(f"{name} {a} and {b} are the same point; each control point should be distinct")
        if kind != "similarity":
            sv = np.linalg.svd(p - p.mean(axis=0), compute_uv=False)
            if sv[1] <= 1e-9 * sv[0]:
                raise ParameterError(f"{name} are collinear; a {kind} transform needs points spanning two "
                                     f"directions (rank-deficient set)")
    n = src.shape[0]
    if kind == "projective":
        ts, td = _normaliser(src), _normaliser(dst)
        s = src @ ts[:2, :2].T + ts[:2, 2]
        d = dst @ td[:2, :2].T + td[:2, 2]
        a = np.zeros((2 * n, 9))
        a[:n, 0:2], a[:n, 2] = s, 1.0
        a[:n, 6:8], a[:n, 8] = -s * d[:, :1], -d[:, 0]
        a[n:, 3:5], a[n:, 5] = s, 1.0
        a[n:, 6:8], a[n:, 8] = -s * d[:, 1:], -d[:, 1]
        _, sv, vt = np.linalg.svd(a)
        # a unique homography leaves a one-dimensional null space: the 8th singular value must not vanish
        # (it does when three of four points are collinear, or too many lie on one line)
        if sv[7] <= 1e-10 * sv[0]:
            raise ParameterError("the control points do not determine a projective transform "
                                 "(too many collinear points)")
        h = vt[-1].reshape(3, 3)
        m = np.linalg.inv(td) @ h @ ts
        if abs(m[2, 2]) < 1e-12 * np.abs(m).max() or abs(np.linalg.det(m)) < 1e-12 * np.abs(m).max() ** 3:
            raise ParameterError("the control points give a degenerate projective transform; "
                                 "check for collinear or mismatched points")
        m = m / m[2, 2]
    else:
        # linear least squares on dst residuals, solved in centred coordinates for conditioning
        cs, cd = src.mean(axis=0), dst.mean(axis=0)
        s, d = src - cs, dst - cd
        if kind == "affine":
            lin, _, rank, _ = np.linalg.lstsq(s, d, rcond=None)
            if rank < 2:
                raise ParameterError("src_points are rank-deficient (collinear); an affine transform needs 3 "
                                     "points spanning two directions")
            lin = lin.T
        else:
            # x' = a x − b y, y' = b x + a y: stack both rows
            am = np.concatenate([np.stack([s[:, 0], -s[:, 1]], 1), np.stack([s[:, 1], s[:, 0]], 1)])
            bm = np.concatenate([d[:, 0], d[:, 1]])
            (pa, pb), *_ = np.linalg.lstsq(am, bm, rcond=None)
            lin = np.array([[pa, -pb], [pb, pa]])
        if abs(np.linalg.det(lin)) < 1e-12 * max(np.abs(lin).max(), 1e-300) ** 2:
            raise ParameterError("the fitted transform is singular; check that the control points match")
        m = np.eye(3)
        m[:2, :2] = lin
        m[:2, 2] = cd - lin @ cs
    tr = Transform(m, kind, np.zeros(n), src, dst)
    fitted = tr.apply(src)
    if not np.all(np.isfinite(fitted)):
        raise NumericalError("the fitted transform sends a control point to infinity")
    return Transform(m, kind, np.linalg.norm(fitted - dst, axis=1), src, dst)






# ===================================================================================== resampling
def grid_geometry(grid) -> tuple[tuple[int, int], float, tuple[float, float]]:
    if isinstance(grid, StrainSeries):
        return grid.shape, grid.step, grid.origin
    try:
        shape, step, origin = grid
        return (int(shape[0]), int(shape[1])), check_positive(step, "step"), (float(origin[0]), float(origin[1]))
    except (TypeError, ValueError) as err:
        raise ParameterError("grid should be a StrainSeries or ((ny, nx), step_um, (x0, y0))") from err


def resample_to_map(values, grid, transform: Transform, map_x, map_y, *, order: int = 1) -> np.ndarray:
    """Resample a field on the strain grid onto map positions; NaN where it is missing or outside.

    Parameters
    ----------
    values : (ny, nx) ndarray
        Field on the strain grid; NaN where missing.
    grid : StrainSeries or ((ny, nx), step_um, (x0, y0))
        Geometry of the strain grid.
    transform : Transform
        Strain frame → map frame.
    map_x, map_y : ndarray
        Map positions in µm (e.g. ``omap.coordinates()``), any matching shapes.
    order : {0, 1}
        Nearest (0) or bilinear (1) interpolation; a map point is NaN unless every strain point it
        draws from is valid.
    """
    shape, step, origin = grid_geometry(grid)
    values = np.asarray(values, dtype=np.float64)
    if values.shape != shape:
        raise ParameterError(f"values should have the strain grid shape {shape}; got {values.shape}")
    if order not in (0, 1):
        raise ParameterError(f"order should be 0 or 1; got {order!r}")
    mx, my = np.broadcast_arrays(np.asarray(map_x, float), np.asarray(map_y, float))
    p = transform.inverse().apply(np.stack([mx.ravel(), my.ravel()], axis=1))
    rows = (p[:, 1] - origin[1]) / step
    cols = (p[:, 0] - origin[0]) / step
    ok = np.isfinite(values)
    filled = np.where(ok, values, 0.0)
    coords = np.stack([rows, cols])
    out = ndimage.map_coordinates(filled, coords, order=order, mode="constant", cval=0.0)
    # the interpolated validity must be 1: every contributing strain point is valid
    w = ndimage.map_coordinates(ok.astype(np.float64), coords, order=order, mode="constant", cval=0.0)
    # bilinear needs the point inside the grid; nearest accepts up to half a step beyond the edge
    pad = 0.5 if order == 0 else 1e-9
    inside = (rows >= -pad) & (rows <= shape[0] - 1 + pad) & (cols >= -pad) & (cols <= shape[1] - 1 + pad)
    good = inside & (w > 1.0 - 1e-9)
    return np.where(good, out, np.nan).reshape(mx.shape)


def labels_on_strain_grid(labels, omap, grid, transform: Transform) -> np.ndarray:
    """Grain label of the map point nearest each strain-grid point (−1 outside the map or no grain).

    Parameters
    ----------
    labels : (ny_map, nx_map) int ndarray
        Grain labels on the map grid (e.g. ``GrainGraph.labels``).
    omap : OrientationMap
        The map (for its grid geometry; square or hexagonal).
    grid : StrainSeries or ((ny, nx), step_um, (x0, y0))
        Strain grid geometry.
    transform : Transform
        Strain frame → map frame.

    Returns
    -------
    (ny, nx) int64 ndarray
    """
    shape, step, origin = grid_geometry(grid)
    labels = np.asarray(labels)
    if labels.shape != tuple(omap.shape):
        raise ParameterError(f"labels should have the map shape {omap.shape}; got {labels.shape}")
    i, j = np.indices(shape, dtype=np.float64)
    pts = np.stack([origin[0] + j.ravel() * step, origin[1] + i.ravel() * step], axis=1)
    pm = transform.apply(pts)
    ii, jj = omap.index_of(pm[:, 0], pm[:, 1])
    ok = (ii >= 0) & (jj >= 0)
    out = np.full(ii.shape, -1, dtype=np.int64)
    out[ok] = labels[ii[ok], jj[ok]]
    return out.reshape(shape)


# ===================================================================================== sanity checks
#: A grid step this many times off the map's (either way) is taken as a unit error and stops.
STEP_RATIO_STOP = 300.0
#: A grid step (or a registration scale) this many times off warns.
STEP_RATIO_WARN = 30.0
#: Registration RMS residual, in map steps, that warns and that stops.
RESIDUAL_WARN_STEPS = 3.0
RESIDUAL_STOP_STEPS = 20.0
#: Fraction of the valid strain points on the map below which a warning is given.
OVERLAP_WARN = 0.25


def check_registration(series: StrainSeries, transform: Transform | None, *, map_step: float | None = None,
                       on_map: np.ndarray | None = None, valid: np.ndarray | None = None,
                       map_extent: tuple[float, float, float, float] | None = None) -> list[str]:
    """Check that a registered strain field can be compared with the map; stop or warn with the numbers.

    Parameters
    ----------
    series
        The strain series (its own frame, µm).
    transform
        Strain frame → map frame (None: the frames are taken as equal).
    map_step
        The map's step, µm (None: no map; the residual is judged against the registered strain step).
    on_map
        ``(ny, nx)`` bool: strain points that land on a map point after registration.
    valid
        ``(ny, nx)`` bool: strain points with a measured value.
    map_extent
        ``(x_min, x_max, y_min, y_max)`` of the map's points, µm, for the message.

    Returns
    -------
    list of str
        Warnings: the comparison can go on, but the user should look.

    Raises
    ------
    ParameterError
        A grid step more than :data:`STEP_RATIO_STOP` times off the map's, a registration residual
        above :data:`RESIDUAL_STOP_STEPS` map steps, or no measured strain point on the map.

    Examples
    --------
    >>> import numpy as np
    >>> s = StrainSeries("strain", {c: np.zeros((4, 4)) for c in ("exx", "eyy", "exy")}, 0.001)
    >>> check_registration(s, None, map_step=1.0)
    Traceback (most recent call last):
    ...
    slipnet.errors.ParameterError: the strain grid step is 0.001 µm, 1/1000 of the map's step ...
    """
    out: list[str] = []
    scale = 1.0
    if transform is not None:
        scale = float(np.sqrt(abs(np.linalg.det(transform.linear))))
    reg_step = series.step * scale
    reg_note = f" ({reg_step:.4g} µm on the map after registration)" if transform is not None else ""
    if map_step is not None:
        ratio = reg_step / float(map_step)
        shown = f"{ratio:.4g} ×" if ratio >= 1 else f"1/{1 / ratio:.4g}"
        text = (f"the strain grid step is {series.step:.4g} µm{reg_note}, {shown} of the map's step "
                f"{map_step:.4g} µm")
        if ratio > STEP_RATIO_STOP or ratio < 1 / STEP_RATIO_STOP:
            raise ParameterError(f"{text}: a unit is likely wrong (a factor near 1000 is mm read as µm or µm read "
                                 "as nm). Fix: give the strain file's length unit (length_unit=, "
                                 "--strain-length-unit) or correct the unit in its header, and check the control "
                                 "points' units")
        if ratio > STEP_RATIO_WARN or ratio < 1 / STEP_RATIO_WARN:
            out.append(f"{text}: check the units of the strain file and the control points")
    if transform is not None and (scale > STEP_RATIO_WARN or scale < 1 / STEP_RATIO_WARN):
        out.append(f"the registration scales the strain frame by {scale:.4g} ×: the strain file and the control "
                   "points' strain positions are probably not in the unit they state (results hold only if both "
                   "are wrong alike); check length_unit / --strain-length-unit and the control-point units")
    if transform is not None and len(transform.residuals):
        ref = float(map_step) if map_step is not None else reg_step
        what = "map steps" if map_step is not None else "strain steps"
        rms = transform.rms
        worst = int(np.argmax(transform.residuals))
        text = (f"the registration RMS residual is {rms:.4g} µm = {rms / ref:.3g} {what} over "
                f"{len(transform.residuals)} control points; the worst, point {worst + 1} (strain "
                f"({transform.src[worst, 0]:.4g}, {transform.src[worst, 1]:.4g}) µm → map "
                f"({transform.dst[worst, 0]:.4g}, {transform.dst[worst, 1]:.4g}) µm), is off by "
                f"{transform.residuals[worst]:.4g} µm")
        if rms > RESIDUAL_STOP_STEPS * ref:
            raise ParameterError(f"{text}. A mark is matched to the wrong one, x and y are swapped, or the points "
                                 "are in another unit: fix the control points (or try kind='projective' for a "
                                 "tilted view)")
        if rms > RESIDUAL_WARN_STEPS * ref:
            out.append(f"{text}: check that point (a mismatched mark) or the transform kind")
    if on_map is not None:
        ok = np.ones(on_map.shape, bool) if valid is None else np.asarray(valid, bool)
        n_valid = int(ok.sum())
        n_on = int((on_map & ok).sum())
        if n_valid and n_on < OVERLAP_WARN * n_valid:
            x, y = series.coordinates()
            pts = np.stack([x[ok], y[ok]], axis=1)
            pm = pts if transform is None else transform.apply(pts)
            span = (f"the measured field lies at x {pm[:, 0].min():.4g}…{pm[:, 0].max():.4g} µm, y "
                    f"{pm[:, 1].min():.4g}…{pm[:, 1].max():.4g} µm in the map frame")
            if map_extent is not None:
                span += (f"; the map covers x {map_extent[0]:.4g}…{map_extent[1]:.4g} µm, y "
                         f"{map_extent[2]:.4g}…{map_extent[3]:.4g} µm")
            if n_on == 0:
                fix = ("give control points (--control-points) to register the frames" if transform is None else
                       "check that the control points' strain_* and map_* columns are not swapped, that their units "
                       "are right, and that they belong to this map")
                raise ParameterError(f"no measured strain point falls on the map after registration ({span}). "
                                     f"Fix: {fix}")
            out.append(f"only {n_on} of {n_valid} measured strain points ({100 * n_on / n_valid:.0f} %) fall on the "
                       f"map ({span}): grain and boundary statistics use that part only")
    return out

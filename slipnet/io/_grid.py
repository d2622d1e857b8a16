"""Place scattered point coordinates onto a square or hexagonal grid, refusing anything irregular.

Shared by the text-table reader and the orix bridge: both receive flat ``x``/``y`` arrays in µm in
any order and must find each point's row and column, or say exactly which point does not fit.
Everything here is vectorised; only the error path looks at single points.
"""

from __future__ import annotations

import math
from collections.abc import Callable

import numpy as np

from slipnet._inputs import check_allocation
from slipnet.errors import InputFileError

__all__ = ["GridPlacement", "detect_grid", "place_points", "short_rows_note"]

# A point may sit this fraction of a step away from its grid node and still count as on the grid:
# text files print positions to 1e-6 µm and orix files carry float32 coordinates.
_REL_TOL = 1e-3


#: Bytes a reader allocates per grid point (placement, quaternions, phase, quality, flags).
_BYTES_PER_POINT = 64


class GridPlacement:
    """Where each input point goes: flat row-major index into ``(ny, nx)`` plus the grid origin.

    ``filled`` counts the grid points no input point fills because the hex rows of one parity
    (``filled_parity``: 0 even, 1 odd, counted from row 0) are one point shorter; the reader
    leaves them unindexed.
    """

    def __init__(self, flat: np.ndarray, shape: tuple[int, int], origin: tuple[float, float],
                 filled: int = 0, filled_parity: int | None = None) -> None:
        self.flat = flat
        self.shape = shape
        self.origin = origin
        self.filled = filled
        self.filled_parity = filled_parity


def _short_row_parity(missing: np.ndarray, ny: int, nx: int) -> int | None:
    """0 or 1 when the missing points are exactly the last column of every even (odd) row, else None.

    Hex scans commonly alternate row lengths: the rows shifted by step/2 hold one point fewer, so
    they end half a step inside the longer rows (e.g. 5 points on row 0, 4 on row 1 of a 5-wide
    scan). Counted from 0 those are the odd rows; the even ones are accepted too, in case a file
    starts on a short row.
    """
    if nx < 2 or ny < 2:
        return None
    for parity in (1, 0):
        rows = np.arange(parity, ny, 2)
        if missing.size == rows.size and np.array_equal(missing, rows * nx + (nx - 1)):
            return parity
    return None


def _tolerance(step: float) -> float:
    return max(_REL_TOL * step, 2e-6)


def detect_grid(x: np.ndarray, y: np.ndarray, *, step: float | None = None) -> tuple[str, float]:
    """Guess the grid kind and step (µm) from point coordinates.

    The step is the smallest spacing between points of the first row (or ``step`` if given); the
    grid is ``"hex"`` when the second row lies ``step·√3/2`` below the first and is shifted by
    ``step/2``, ``"square"`` when it lies ``step`` below and is not shifted.

    Raises
    ------
    InputFileError
        When neither fits (the caller adds the file name).
    """
    x = np.asarray(x, dtype=np.float64)
    y = np.asarray(y, dtype=np.float64)
    y_min = float(y.min())
    span = float(max(np.ptp(x), np.ptp(y), 1e-9))
    first = np.abs(y - y_min) <= 1e-6 * span + 1e-9
    xs = np.unique(x[first])
    ys = np.unique(y[~first])
    dy = float(ys.min() - y_min) if ys.size else math.nan
    if ys.size:
        second = np.abs(y - ys.min()) <= 1e-6 * span + 1e-9
        shift = float(x[second].min() - xs.min())
    if step is None:
        dx = np.diff(xs)
        if dx.size:
            # the mean spacing over the whole first row is far less sensitive to rounded (e.g. float32)
            # coordinates than one difference; keep the smallest difference if the row has gaps
            step = float(dx.min())
            mean = float(xs[-1] - xs[0]) / dx.size
            if abs(mean - step) <= 1e-3 * step:
                step = mean
            step = float(f"{step:.10g}")
        elif ys.size:
            # a single column: a hex grid betrays itself by the half-step shift of the second row
            step = 2.0 * shift if shift > 1e-6 * span else dy
        else:
            raise InputFileError("the map holds a single point; give step= to place it")
    tol = _tolerance(step)
    if ys.size == 0:
        return "square", float(step)
    if abs(dy - step) <= tol and abs(shift) <= tol:
        return "square", float(step)
    if abs(dy - step * math.sqrt(3.0) / 2.0) <= tol and abs(shift - 0.5 * step) <= tol:
        return "hex", float(step)
    raise InputFileError(
        f"cannot tell the grid kind: the first two rows are {dy:.6g} µm apart with the second shifted by "
        f"{shift:.6g} µm, and the step along a row is {step:.6g} µm; a square grid has rows one step apart, "
        "a hex grid step·√3/2 apart with odd rows shifted by step/2. Give step= and grid= explicitly"
    )


def place_points(
    x: np.ndarray,
    y: np.ndarray,
    step: float,
    grid: str,
    *,
    shape: tuple[int, int] | None = None,
    where: Callable[[int], tuple[str, int | None]],
    path: str | None = None,
) -> GridPlacement:
    """Find the row and column of every point and check that they fill the grid exactly once.

    Parameters
    ----------
    x, y : (n,) ndarray
        Point positions in µm, any order.
    step
        Grid step in µm.
    grid
        ``"square"`` or ``"hex"`` (odd rows shifted by ``+step/2``, rows ``step·√3/2`` apart).
    shape
        Declared ``(ny, nx)``; derived from the points when ``None``.
    where
        Maps a point's position in the input to ``(description, line)`` for error messages.
    path
        File name for error messages.

    Returns
    -------
    GridPlacement
        ``flat`` (n,) row-major indices into ``shape``; ``origin`` ``(x0, y0)`` µm.

    Raises
    ------
    InputFileError
        A point off the grid, outside the declared shape, given twice, or a grid point missing
        (other than the last point of every even or every odd row of a hex grid: the short rows
        of a hex scan, see :class:`GridPlacement`).
    """
    tol = _tolerance(step)
    row_spacing = step * (math.sqrt(3.0) / 2.0 if grid == "hex" else 1.0)
    y0 = float(y.min())
    fi = (y - y0) / row_spacing
    i = np.rint(fi).astype(np.int64)
    off = np.abs(fi - i) * row_spacing > tol
    if off.any():
        k = int(np.flatnonzero(off)[0])
        desc, line = where(k)
        raise InputFileError(
            f"{desc} has y = {float(y[k])!r} µm, which is not on a {grid} grid with rows {row_spacing:.9g} µm apart "
            f"starting at y = {y0!r}; every point must sit on one uniform grid (check step and grid in the header)",
            path=path,
            line=line,
            column="y_um",
        )
    shift = 0.5 * (i % 2) if grid == "hex" else np.zeros(i.shape)
    even = (i % 2 == 0) if grid == "hex" else np.ones(i.shape, dtype=bool)
    x0 = float(x[even].min())
    fj = (x - x0) / step - shift
    j = np.rint(fj).astype(np.int64)
    off = (np.abs(fj - j) * step > tol) | (j < 0)
    if off.any():
        k = int(np.flatnonzero(off)[0])
        desc, line = where(k)
        odd = " (an odd row, so shifted by step/2)" if grid == "hex" and i[k] % 2 else ""
        raise InputFileError(
            f"{desc} has x = {float(x[k])!r} µm, which is not on row {int(i[k])}{odd} of a {grid} grid with step "
            f"{step!r} µm starting at x = {x0!r}; every point must sit on one uniform grid "
            "(check step and grid in the header)",
            path=path,
            line=line,
            column="x_um",
        )
    if shape is None:
        shape = (int(i.max()) + 1, int(j.max()) + 1)
    ny, nx = shape
    outside = (i >= ny) | (j >= nx)
    if outside.any():
        k = int(np.flatnonzero(outside)[0])
        desc, line = where(k)
        raise InputFileError(
            f"{desc} at x = {float(x[k])!r}, y = {float(y[k])!r} µm falls on row {int(i[k])}, "
            f"column {int(j[k])}, outside the declared {ny} rows × {nx} columns; "
            "fix ny/nx in the header or remove the point",
            path=path,
            line=line,
        )
    # the grid a file's coordinates declare is allocated below and again for the map's arrays
    # (quaternions, phase, quality, flags: about 64 bytes a point): refuse an impossible one first
    check_allocation(float(ny) * float(nx), _BYTES_PER_POINT, f"a {ny} × {nx} point grid", path=path)
    flat = i * nx + j
    counts = np.bincount(flat, minlength=ny * nx)
    if counts.max() > 1:
        dup_nodes = np.flatnonzero(counts > 1)
        # the second occurrence of the first duplicated node is the one to point at
        cand = np.flatnonzero(np.isin(flat, dup_nodes))
        seen = flat[cand]
        order = np.argsort(seen, kind="stable")
        first_dup = cand[order][1:][seen[order][1:] == seen[order][:-1]]
        k = int(first_dup.min())
        desc, line = where(k)
        raise InputFileError(
            f"{desc} at x = {float(x[k])!r}, y = {float(y[k])!r} µm repeats a point given earlier; "
            "each grid point must appear exactly once (remove the duplicate)",
            path=path,
            line=line,
        )
    missing = np.flatnonzero(counts == 0)
    parity = _short_row_parity(missing, ny, nx) if grid == "hex" and missing.size else None
    if parity is not None:
        return GridPlacement(flat, (ny, nx), (x0, y0), filled=int(missing.size), filled_parity=parity)
    if missing.size:
        mi, mj = divmod(int(missing[0]), nx)
        mx = x0 + (mj + (0.5 * (mi % 2) if grid == "hex" else 0.0)) * step
        my = y0 + mi * row_spacing
        raise InputFileError(
            f"partial grid: {missing.size} of {ny * nx} points are missing, the first at row {mi}, column {mj} "
            f"(x = {mx:.6f}, y = {my:.6f} µm); give every grid point a row, with phase -1 where unindexed",
            path=path,
        )
    return GridPlacement(flat, (ny, nx), (x0, y0))


def short_rows_note(place) -> str:
    """The decision a hex grid with short rows makes, in words."""
    rows = "odd" if place.filled_parity == 1 else "even"
    return (f"hex grid with alternating row lengths: the {rows} rows (counted from 0) are one point shorter, so "
            f"{place.filled} points at the right end of those rows were added as unindexed points")

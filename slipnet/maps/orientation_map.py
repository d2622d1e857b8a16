"""The orientation map container: a regular grid of crystal orientations with phases and a mask.

Grid conventions (shared by every module)
-----------------------------------------
* x runs along increasing column index ``j`` (right on screen), y along increasing row index
  ``i`` (down on screen), z = x × y points into the specimen. Positions are in µm.
* ``grid="square"``: point ``(i, j)`` sits at ``(x0 + j·step, y0 + i·step)``; 4 neighbours.
* ``grid="hex"``: rows are ``step·√3/2`` apart and odd rows are shifted right by ``step/2``:
  point ``(i, j)`` sits at ``(x0 + (j + (i mod 2)/2)·step, y0 + i·step·√3/2)``; 6 neighbours.
  Row 0 is always an unshifted row (cropping keeps that true).
* Unindexed points have ``indexed == False`` and NaN quaternions, phase −1 and quality 0: they
  carry no orientation, and every kernel skips them.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field, replace

import numpy as np

from slipnet._checks import check_choice, check_positive
from slipnet.crystal.orientation import euler_from_quat, quat_conjugate, quat_from_euler, quat_multiply
from slipnet.errors import ParameterError

__all__ = ["CUBIC_STRUCTURES", "GRIDS", "STRUCTURES", "OrientationMap", "Phase", "apply_frame_rotation"]

GRIDS = ("square", "hex")
#: The structures slipnet analyses (slip systems, elastic constants, cubic symmetry 432).
CUBIC_STRUCTURES = ("bcc", "fcc")
#: Every structure a phase may have: 'other' is a phase read from a file that slipnet keeps, shows and
#: counts but leaves out of slip analysis (non-cubic, or cubic but neither bcc nor fcc).
STRUCTURES = (*CUBIC_STRUCTURES, "other")


@dataclass(frozen=True)
class Phase:
    """One crystalline phase of a map.

    Parameters
    ----------
    name
        Free text, e.g. ``"ferrite"``.
    structure
        ``"bcc"`` or ``"fcc"`` (both cubic: the orientation maths uses point group 432), or
        ``"other"`` for a phase kept as read but left out of slip analysis (its Schmid factors are
        NaN; the grain reconstruction still applies cubic symmetry to it, so its grain outlines
        are approximate).
    lattice_parameter_nm
        Cubic lattice parameter in nm (used for Burgers vector lengths); for ``"other"`` the
        first lattice parameter as read, not used.
    """

    name: str
    structure: str = "bcc"
    lattice_parameter_nm: float = 0.2866

    def __post_init__(self) -> None:
        object.__setattr__(self, "structure", check_choice(self.structure, "structure", STRUCTURES))
        check_positive(self.lattice_parameter_nm, "lattice_parameter_nm")
        if not str(self.name).strip() or "," in self.name or "\n" in self.name:
            raise ParameterError(f"phase name should be non-empty text without commas; got {self.name!r}")


FERRITE = Phase("ferrite", "bcc", 0.2866)
AUSTENITE = Phase("austenite", "fcc", 0.3591)


@dataclass(frozen=True, eq=False)
class OrientationMap:
    """An orientation map on a regular square or hexagonal grid.

    Attributes
    ----------
    quats : (ny, nx, 4) ndarray
        Unit quaternions ``(w, x, y, z)``, ``w >= 0``, sample → crystal; NaN where unindexed.
    phase : (ny, nx) int ndarray
        Index into :attr:`phases`; −1 where unindexed.
    quality : (ny, nx) float ndarray
        A per-point quality value (e.g. a confidence index or band contrast), ≥ 0.
    indexed : (ny, nx) bool ndarray
        True where the point carries an orientation.
    step : float
        Grid step in µm (distance between neighbours along a row).
    grid : str
        ``"square"`` or ``"hex"``.
    phases : tuple of Phase
        The phase table.
    origin : tuple of float
        ``(x0, y0)`` of point ``(0, 0)`` in µm.
    name : str
        A label for reports.
    """

    quats: np.ndarray
    phase: np.ndarray
    quality: np.ndarray
    indexed: np.ndarray
    step: float
    grid: str = "square"
    phases: tuple[Phase, ...] = (FERRITE,)
    origin: tuple[float, float] = (0.0, 0.0)
    name: str = ""
    meta: dict = field(default_factory=dict)

    def __post_init__(self) -> None:
        q = np.asarray(self.quats, dtype=np.float64)
        if q.ndim != 3 or q.shape[-1] != 4:
            raise ParameterError(f"quats should have shape (ny, nx, 4); got {q.shape}")
        shape = q.shape[:2]
        if 0 in shape:
            raise ParameterError(f"the map is empty (shape {shape}); give at least one point")
        ind = np.asarray(self.indexed, dtype=bool)
        ph = np.asarray(self.phase).astype(np.int32)
        qual = np.asarray(self.quality, dtype=np.float64)
        for nm, arr in (("indexed", ind), ("phase", ph), ("quality", qual)):
            if arr.shape != shape:
                raise ParameterError(f"{nm} should have shape {shape} like quats; got {arr.shape}")
        grid = check_choice(self.grid, "grid", GRIDS)
        step = check_positive(self.step, "step")
        phases = tuple(self.phases)
        if not phases or not all(isinstance(p, Phase) for p in phases):
            raise ParameterError("phases should be a non-empty tuple of Phase")
        if phases[0].structure not in CUBIC_STRUCTURES:
            # later steps take the map's structure from its first phase
            raise ParameterError(f"the first phase should be {' or '.join(CUBIC_STRUCTURES)}; got {phases[0].name!r} "
                                 f"({phases[0].structure}): list phases slipnet does not analyse after it")
        good = ind & np.all(np.isfinite(q), axis=-1)
        if np.any(ind & ~good):
            raise ParameterError("indexed points should carry finite quaternions; mark NaN points unindexed")
        if good.any():
            # whole-array passes with masks: no fancy-indexed copies of the (ny, nx, 4) array
            n = np.einsum("...i,...i->...", q, q)
            if np.abs(np.where(good, n, 1.0) - 1.0).max() > 1e-6:
                raise ParameterError("quats should be unit quaternions at indexed points")
            p_lo = int(np.where(good, ph, 0).min())
            p_hi = int(np.where(good, ph, 0).max())
            if p_lo < 0 or p_hi >= len(phases):
                raise ParameterError(
                    f"phase indices of indexed points should lie in 0..{len(phases) - 1}; got {p_lo}..{p_hi}"
                )
        with np.errstate(invalid="ignore"):
            neg = good & (q[..., 0] < 0)
        stale = ~good & ~np.isnan(q[..., 0])
        # an array we made read-only ourselves (a map rebuilt with dataclasses.replace) is reused
        # as it is when nothing needs fixing; anything else is copied so user arrays stay theirs
        if q.flags.writeable or neg.any() or stale.any():
            q = q.copy()
            q[~good] = np.nan
            q[neg] *= -1.0
        ph = np.where(good, ph, -1).astype(np.int32)
        qual = np.where(np.isfinite(qual), qual, 0.0)
        for arr in (q, ph, qual, good):
            arr.setflags(write=False)
        object.__setattr__(self, "quats", q)
        object.__setattr__(self, "phase", ph)
        object.__setattr__(self, "quality", qual)
        object.__setattr__(self, "indexed", good)
        object.__setattr__(self, "grid", grid)
        object.__setattr__(self, "step", step)
        object.__setattr__(self, "phases", phases)
        object.__setattr__(self, "origin", (float(self.origin[0]), float(self.origin[1])))

    # ------------------------------------------------------------------ construction
    @classmethod
    def from_euler(
        cls,
        euler,
        step: float,
        *,
        grid: str = "square",
        phase=None,
        quality=None,
        indexed=None,
        phases: tuple[Phase, ...] = (FERRITE,),
        origin: tuple[float, float] = (0.0, 0.0),
        name: str = "",
    ) -> OrientationMap:
        """Build a map from ``(ny, nx, 3)`` Bunge angles in degrees (NaN rows become unindexed)."""
        e = np.asarray(euler, dtype=np.float64)
        if e.ndim != 3 or e.shape[-1] != 3:
            raise ParameterError(f"euler should have shape (ny, nx, 3); got {e.shape}")
        ok = np.all(np.isfinite(e), axis=-1)
        if indexed is not None:
            ok &= np.asarray(indexed, dtype=bool)
        q = np.full((*e.shape[:2], 4), np.nan)
        q[ok] = quat_from_euler(e[ok])
        shape = e.shape[:2]
        return cls(
            quats=q,
            phase=np.zeros(shape, np.int32) if phase is None else phase,
            quality=np.ones(shape) if quality is None else quality,
            indexed=ok,
            step=step,
            grid=grid,
            phases=phases,
            origin=origin,
            name=name,
        )

    # ------------------------------------------------------------------ geometry
    @property
    def shape(self) -> tuple[int, int]:
        """``(ny, nx)``: rows and columns."""
        return self.quats.shape[:2]

    @property
    def row_spacing(self) -> float:
        """Distance between rows in µm (``step`` or ``step·√3/2``)."""
        return self.step * (math.sqrt(3.0) / 2.0 if self.grid == "hex" else 1.0)

    @property
    def point_area(self) -> float:
        """Area one point stands for, µm² (``step²`` square, ``step²·√3/2`` hex)."""
        return self.step * self.row_spacing

    @property
    def extent(self) -> tuple[float, float, float, float]:
        """``(x_min, x_max, y_min, y_max)`` of point centres in µm."""
        ny, nx = self.shape
        shift = 0.5 * self.step if (self.grid == "hex" and ny > 1) else 0.0
        x0, y0 = self.origin
        return (x0, x0 + (nx - 1) * self.step + shift, y0, y0 + (ny - 1) * self.row_spacing)

    def pixel_extent(self) -> tuple[float, float, float, float]:
        """``(left, right, bottom, top)`` in µm with the points at pixel centres (y grows downwards).

        The extent of an image of the map drawn with ``origin="upper"`` (matplotlib's ``imshow``).
        """
        x0, x1, y0, y1 = self.extent
        nx = self.shape[1]
        dx = (x1 - x0) / max(nx - 1, 1) if nx > 1 else self.step
        dy = self.row_spacing
        return (x0 - 0.5 * dx, x1 + 0.5 * dx, y1 + 0.5 * dy, y0 - 0.5 * dy)

    def coordinates(self) -> tuple[np.ndarray, np.ndarray]:
        """Point positions ``(x, y)`` in µm, each of shape ``(ny, nx)``."""
        ny, nx = self.shape
        i, j = np.indices((ny, nx), dtype=np.float64)
        x = j * self.step
        if self.grid == "hex":
            x = x + 0.5 * self.step * (i % 2)
        return x + self.origin[0], i * self.row_spacing + self.origin[1]

    def index_of(self, x, y) -> tuple[np.ndarray, np.ndarray]:
        """Row and column of the grid point nearest each ``(x, y)`` (µm); −1 outside the grid."""
        x = np.asarray(x, dtype=np.float64) - self.origin[0]
        y = np.asarray(y, dtype=np.float64) - self.origin[1]
        ny, nx = self.shape
        i = np.rint(y / self.row_spacing).astype(np.int64)
        shift = 0.5 * (i % 2) if self.grid == "hex" else 0.0
        j = np.rint(x / self.step - shift).astype(np.int64)
        if self.grid == "hex":
            # the nearest hex point may sit on the adjacent row: compare the three candidates
            best_d = np.full(np.shape(x), np.inf)
            bi, bj = np.zeros_like(i), np.zeros_like(j)
            # candidates are clipped into the grid, so a point at the ragged border of a hex map
            # still finds its nearest in-grid neighbour; points beyond half a step stay outside
            for di in (-1, 0, 1):
                ii = np.clip(i + di, 0, ny - 1)
                sh = 0.5 * (ii % 2)
                jj = np.clip(np.rint(x / self.step - sh).astype(np.int64), 0, nx - 1)
                d = (x - (jj + sh) * self.step) ** 2 + (y - ii * self.row_spacing) ** 2
                better = d < best_d
                best_d = np.where(better, d, best_d)
                bi, bj = np.where(better, ii, bi), np.where(better, jj, bj)
            x_hi = (nx - 0.5) * self.step if ny > 1 else (nx - 1) * self.step
            near = (x >= -0.5 * self.step) & (x <= x_hi + 0.5 * self.step)
            near &= (y >= -0.5 * self.row_spacing) & (y <= (ny - 0.5) * self.row_spacing)
            i, j = np.where(near, bi, -1), np.where(near, bj, -1)
        inside = (i >= 0) & (i < ny) & (j >= 0) & (j < nx)
        return np.where(inside, i, -1), np.where(inside, j, -1)

    # ------------------------------------------------------------------ views
    def euler(self, degrees: bool = True) -> np.ndarray:
        """Bunge angles ``(ny, nx, 3)``; NaN at unindexed points."""
        out = np.full((*self.shape, 3), np.nan)
        out[self.indexed] = euler_from_quat(self.quats[self.indexed], degrees=degrees)
        return out

    def crop(self, x_min: float, x_max: float, y_min: float, y_max: float) -> OrientationMap:
        """The points whose centres lie inside the µm box (inclusive), as a new map.

        On hexagonal grids the first row kept is rounded down to an even row so that row 0 of
        the result stays an unshifted row.
        """
        x, y = self.coordinates()
        inside = (x >= x_min) & (x <= x_max) & (y >= y_min) & (y <= y_max)
        rows = np.flatnonzero(inside.any(axis=1))
        cols = np.flatnonzero(inside.any(axis=0))
        if rows.size == 0 or cols.size == 0:
            ex = tuple(round(v, 3) for v in self.extent)
            raise ParameterError(
                f"crop box x {x_min}..{x_max}, y {y_min}..{y_max} µm holds no point; "
                f"the map covers x {ex[0]}..{ex[1]}, y {ex[2]}..{ex[3]} µm"
            )
        r0, r1 = rows[0], rows[-1] + 1
        if self.grid == "hex":
            r0 -= r0 % 2
        c0, c1 = cols[0], cols[-1] + 1
        sl = (slice(r0, r1), slice(c0, c1))
        ox = self.origin[0] + c0 * self.step
        oy = self.origin[1] + r0 * self.row_spacing
        return replace(
            self,
            quats=self.quats[sl],
            phase=self.phase[sl],
            quality=self.quality[sl],
            indexed=self.indexed[sl],
            origin=(ox, oy),
            meta=dict(self.meta),
        )

    def select(self, keep) -> OrientationMap:
        """A map of the same shape where points outside ``keep`` (bool ``(ny, nx)``) are unindexed."""
        keep = np.asarray(keep, dtype=bool)
        if keep.shape != self.shape:
            raise ParameterError(f"keep should be a boolean mask of shape {self.shape}; got {keep.shape}")
        return replace(self, indexed=self.indexed & keep, meta=dict(self.meta))


def apply_frame_rotation(omap: OrientationMap, rotation) -> OrientationMap:
    """Re-express orientations recorded in another sample frame in slipnet's map frame.

    Parameters
    ----------
    omap
        The map as recorded.
    rotation : (4,) array_like
        Quaternion ``R`` taking vectors of the recorded sample frame into slipnet's map frame
        (``v_map = R · v_recorded``). Build it with
        :func:`slipnet.orientation.quat_from_axis_angle`, e.g. 180° about x.

    Returns
    -------
    OrientationMap
        ``g_new = g_old · R⁻¹`` at every indexed point (so ``v_crystal = g_new · v_map``).
    """
    r = np.asarray(rotation, dtype=np.float64).reshape(-1)
    if r.size != 4 or not np.all(np.isfinite(r)) or abs(np.linalg.norm(r) - 1.0) > 1e-6:
        raise ParameterError(f"rotation should be a unit quaternion (w, x, y, z); got {rotation!r}")
    q = omap.quats.copy()
    good = omap.indexed
    q[good] = quat_multiply(q[good], quat_conjugate(r))
    meta = dict(omap.meta)
    meta["frame_rotation"] = [float(v) for v in r]
    return replace(omap, quats=q, meta=meta)

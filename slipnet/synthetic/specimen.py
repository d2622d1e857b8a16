"""Synthetic specimens: invented orientation maps with known grains, for tests, benchmarks and the demo.

A specimen is built in µm on the map grid (square or hexagonal, the conventions of
:mod:`slipnet.maps`) in these stages, each drawing from its own seeded random stream so that
changing one setting (say the noise) leaves the others (say the grains) unchanged:

1. **Grains**: a power (Laguerre) tessellation. Grain diameters are drawn from a log-normal
   distribution; a disk of proportional radius is placed for each by random sequential addition
   (largest first, in vectorised rounds), and each map point belongs to the disk of smallest power
   distance ``|p − s|² − (1.3 r)²``. Power cells of non-overlapping disks contain their disks
   (Aurenhammer 1987, SIAM J. Comput. 16:78), so the cells follow the drawn sizes (the gain 1.3
   widens their spread), with straight boundaries and three-grain junctions, closer to a
   recrystallised structure than plain Voronoi cells.
   The assignment is an exact bucketed search in a parallel numba kernel (tests check it against
   a nearest-neighbour query in the lifted 3-D space, where the power distance is Euclidean).
2. **Orientations**: uniformly random (untextured) or a fibre texture.
3. **Second phase**: optional FCC austenite islands (phase 1) sitting on ferrite grain boundaries.
4. **Intra-grain gradient**: every grain is bent about its own random axis, the bend angle growing
   linearly along a random in-plane direction, so that the orientation changes by about
   ``gradient_deg`` across the grain.
5. **Measurement noise**: each point is rotated by a random rotation vector with isotropic Gaussian
   components of standard deviation ``noise_deg``; the angle then follows a Maxwell distribution
   (mean ``2·σ·√(2/π) ≈ 1.60 σ``).
6. **Unindexed points**: isolated random points and small clusters on grain boundaries; optional
   notch cut into one edge (all its points unindexed).

The ground truth (grain of every point before noise, −1 where unindexed; grain orientations) is
kept on the :class:`Specimen`.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
from scipy.spatial import cKDTree

from slipnet._checks import check_choice, check_positive, check_range
from slipnet.crystal.orientation import quat_from_axis_angle, quat_multiply, random_quats
from slipnet.errors import ParameterError
from slipnet.maps.notch import SIDES, NotchShape, notch_mask, side_notch
from slipnet.maps.orientation_map import AUSTENITE, FERRITE, GRIDS, OrientationMap
from slipnet.synthetic import _kernels as _k

__all__ = ["Specimen", "demo_specimen", "make_specimen"]

TEXTURES = ("random", "fibre")

#: Mean cell area / (π/4 · d²) that makes the mean equivalent circle diameter of the cells d is
#: about exp(_AREA_SPREAD_COEFF · size_spread²), fitted on 600 × 600 maps (a test checks the result).
_AREA_SPREAD_COEFF = 0.3
#: Fraction of the padded domain covered by the placement disks (below jamming, ~0.55).
_DISK_COVERAGE = 0.42
#: Power weights are (gain · disk radius)²; a gain above 1 widens the spread of cell sizes.
_WEIGHT_GAIN = 1.3
#: Radius (in grid steps) of a cluster of unindexed points.
_CLUSTER_RADIUS_STEPS = 1.6


@dataclass(frozen=True, eq=False)
class Specimen:
    """A synthetic specimen: the map and the truth it was built from.

    Attributes
    ----------
    omap : OrientationMap
        The "measured" map (noise, unindexed points, notch).
    truth_labels : (ny, nx) int64 ndarray
        Grain of every point before noise, ids ``0..n_grains−1``; −1 where unindexed.
    grain_quats : (n_grains, 4) ndarray
        Orientation of each grain at its reference point (before bend and noise).
    grain_phase : (n_grains,) int ndarray
        Phase index of each grain.
    notch_root : tuple of float or None
        ``(x, y)`` of the notch root (its deepest point), µm.
    notch_direction : (2,) ndarray or None
        Unit in-plane vector along the notch axis, pointing into the material.
    load_axis : (3,) ndarray
        Unit loading direction in the map frame.
    name, description : str
        Label and a short text for reports (synthetic data says so).
    settings : dict
        The generator arguments.
    """

    omap: OrientationMap
    truth_labels: np.ndarray
    grain_quats: np.ndarray
    grain_phase: np.ndarray
    notch_root: tuple[float, float] | None
    notch_direction: np.ndarray | None
    load_axis: np.ndarray
    name: str
    description: str
    settings: dict = field(default_factory=dict)

    @property
    def n_grains(self) -> int:
        """Number of grains in the truth."""
        return int(self.grain_quats.shape[0])


# ---------------------------------------------------------------------------------------------- helpers
def _grid_xy(rows: np.ndarray, nx: int, step: float, grid: str) -> tuple[np.ndarray, np.ndarray]:
    """Positions (µm, origin 0) of the points in the given rows, each shape (len(rows), nx)."""
    rs = step * (math.sqrt(3.0) / 2.0 if grid == "hex" else 1.0)
    x = np.arange(nx, dtype=np.float64)[None, :] * step
    if grid == "hex":
        x = x + 0.5 * step * (rows[:, None] % 2)
    y = np.broadcast_to(rows[:, None] * rs, (rows.size, nx))
    return np.broadcast_to(x, (rows.size, nx)), y


def _place_disks(radii: np.ndarray, lo: np.ndarray, hi: np.ndarray, rng: np.random.Generator,
                 max_rounds: int = 60) -> np.ndarray:
    """Random sequential addition of non-overlapping disks, in vectorised rounds.

    ``radii`` should be sorted in decreasing order: within a round, a conflict between two new
    disks rejects the smaller (later) one, so large disks are placed first. Returns centres
    ``(n, 2)``, NaN for disks that found no room.
    """
    n = radii.size
    pos = np.full((n, 2), np.nan)
    placed = np.zeros(n, dtype=bool)
    for _ in range(max_rounds):
        pend = np.flatnonzero(~placed)
        if pend.size == 0:
            break
        cand = rng.uniform(lo, hi, size=(pend.size, 2))
        rc = radii[pend]
        ok = np.ones(pend.size, dtype=bool)
        tree_c = cKDTree(cand)
        if placed.any():
            acc = np.flatnonzero(placed)
            ra = radii[acc]
            pairs = tree_c.sparse_distance_matrix(cKDTree(pos[acc]), rc.max() + ra.max(), output_type="ndarray")
            hit = pairs["v"] < rc[pairs["i"]] + ra[pairs["j"]]
            ok[pairs["i"][hit]] = False
        pairs = tree_c.query_pairs(2.0 * rc.max(), output_type="ndarray")
        if pairs.size:
            a, b = pairs[:, 0], pairs[:, 1]
            d = np.hypot(*(cand[a] - cand[b]).T)
            hit = (d < rc[a] + rc[b]) & ok[a] & ok[b]
            # the later candidate of each conflicting pair is the smaller disk: it waits a round
            ok[np.maximum(a, b)[hit]] = False
        pos[pend[ok]] = cand[ok]
        placed[pend[ok]] = True
    return pos


def _power_cells(shape: tuple[int, int], step: float, grid: str, centres: np.ndarray, w: np.ndarray,
                 lo: np.ndarray, hi: np.ndarray, bucket: float) -> np.ndarray:
    """Index of the power cell (argmin |p − s|² − w) of every grid point, shape ``(ny, nx)`` int64."""
    ny, nx = shape
    nbx = max(1, int(np.ceil((hi[0] - lo[0]) / bucket)))
    nby = max(1, int(np.ceil((hi[1] - lo[1]) / bucket)))
    bx = np.clip(((centres[:, 0] - lo[0]) / bucket).astype(np.int64), 0, nbx - 1)
    by = np.clip(((centres[:, 1] - lo[1]) / bucket).astype(np.int64), 0, nby - 1)
    key = by * nbx + bx
    order = np.argsort(key, kind="stable")
    start = np.searchsorted(key[order], np.arange(nbx * nby + 1))
    labels = np.empty((ny, nx), dtype=np.int64)
    rs = step * (math.sqrt(3.0) / 2.0 if grid == "hex" else 1.0)
    _k.power_cell_labels(0, ny, nx, step, rs, grid == "hex", np.ascontiguousarray(centres[:, 0]),
                         np.ascontiguousarray(centres[:, 1]), w, float(w.max()), float(lo[0]), float(lo[1]),
                         float(bucket), nbx, nby, start.astype(np.int64), order.astype(np.int64), labels)
    return labels


def _neighbour_differs(labels: np.ndarray, grid: str) -> np.ndarray:
    """True where a grid neighbour (4 on square, 6 on hex grids) carries another label."""
    ny, _ = labels.shape
    out = np.zeros(labels.shape, dtype=bool)
    d = labels[:, 1:] != labels[:, :-1]
    out[:, 1:] |= d
    out[:, :-1] |= d
    if grid == "square":
        d = labels[1:] != labels[:-1]
        out[1:] |= d
        out[:-1] |= d
        return out
    for parity in (0, 1):
        rows = np.arange(parity, ny - 1, 2)
        if rows.size == 0:
            continue
        a, c = labels[rows], labels[rows + 1]
        d = a != c
        out[rows] |= d
        out[rows + 1] |= d
        if parity == 0:  # an even row's lower neighbours are columns j−1 and j of the next row
            d = a[:, 1:] != c[:, :-1]
            out[rows, 1:] |= d
            out[rows + 1, :-1] |= d
        else:  # an odd (shifted) row's lower neighbours are columns j and j+1
            d = a[:, :-1] != c[:, 1:]
            out[rows, :-1] |= d
            out[rows + 1, 1:] |= d
    return out


def _disk_stencil(radius_um: float, step: float, grid: str, parity: int) -> tuple[np.ndarray, np.ndarray]:
    """Row and column offsets of the grid points within ``radius_um`` of a point on a row of ``parity``."""
    rs = step * (math.sqrt(3.0) / 2.0 if grid == "hex" else 1.0)
    ri = math.ceil(radius_um / rs)
    rj = math.ceil(radius_um / step) + 1
    di, dj = np.mgrid[-ri : ri + 1, -rj : rj + 1]
    dx = dj * step
    if grid == "hex":
        dx = dx + 0.5 * step * (((parity + di) % 2) - parity)
    keep = dx**2 + (di * rs) ** 2 <= radius_um**2 + 1e-9
    return di[keep], dj[keep]


def _disk_points(ci: np.ndarray, cj: np.ndarray, radius_um: float, step: float, grid: str,
                 shape: tuple[int, int]) -> tuple[np.ndarray, np.ndarray]:
    """Flat indices of the points within ``radius_um`` of each centre point, and whose centre each is."""
    ny, nx = shape
    flats, owners = [], []
    for parity in ((0, 1) if grid == "hex" else (0,)):
        sel = np.flatnonzero((ci % 2) == parity) if grid == "hex" else np.arange(ci.size)
        if sel.size == 0:
            continue
        di, dj = _disk_stencil(radius_um, step, grid, parity)
        ii = ci[sel, None] + di[None, :]
        jj = cj[sel, None] + dj[None, :]
        inside = (ii >= 0) & (ii < ny) & (jj >= 0) & (jj < nx)
        flats.append((ii * nx + jj)[inside])
        owners.append(np.broadcast_to(sel[:, None], ii.shape)[inside])
    if not flats:
        return np.zeros(0, np.int64), np.zeros(0, np.int64)
    return np.concatenate(flats).astype(np.int64), np.concatenate(owners).astype(np.int64)


def _rotation_between(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Quaternion of the smallest rotation taking unit vector ``a`` onto unit vector ``b``."""
    axis = np.cross(a, b)
    s = np.linalg.norm(axis)
    c = float(np.dot(a, b))
    if s < 1e-12:
        if c > 0:
            return np.array([1.0, 0.0, 0.0, 0.0])
        # antiparallel: half turn about any axis perpendicular to a
        perp = np.cross(a, [1.0, 0.0, 0.0] if abs(a[0]) < 0.9 else [0.0, 1.0, 0.0])
        return quat_from_axis_angle(perp / np.linalg.norm(perp), 180.0)
    return quat_from_axis_angle(axis / s, math.degrees(math.atan2(s, c)))


def _unit(v, name: str, size: int = 3) -> np.ndarray:
    arr = np.asarray(v, dtype=np.float64).reshape(-1)
    n = np.linalg.norm(arr) if arr.size == size and np.all(np.isfinite(arr)) else 0.0
    if n == 0.0:
        raise ParameterError(f"{name} should be a non-zero finite {size}-vector; got {v!r}")
    return arr / n


def _fibre_quats(n: int, axis: np.ndarray, hkl: np.ndarray, spread_deg: float,
                 rng: np.random.Generator) -> np.ndarray:
    """Orientations with crystal direction ``hkl`` near sample direction ``axis``.

    Uniform rotation about the fibre axis; the fibre direction is then tilted by a rotation about
    an axis perpendicular to it, with 2-D Gaussian components of σ = spread/√2 each, so that the
    RMS tilt angle is ``spread_deg`` (Rayleigh-distributed tilt).
    """
    q0 = _rotation_between(axis, hkl)  # g0 · axis = hkl
    psi = rng.uniform(0.0, 360.0, n)
    spin = quat_from_axis_angle(np.broadcast_to(axis, (n, 3)), psi)
    e1 = np.cross(axis, [1.0, 0.0, 0.0] if abs(axis[0]) < 0.9 else [0.0, 1.0, 0.0])
    e1 /= np.linalg.norm(e1)
    e2 = np.cross(axis, e1)
    t = rng.normal(0.0, math.radians(spread_deg) / math.sqrt(2.0), size=(n, 2))
    rotvec = t[:, :1] * e1 + t[:, 1:] * e2
    ang = np.linalg.norm(rotvec, axis=1)
    safe = np.where(ang > 0, ang, 1.0)
    tilt = np.concatenate([np.cos(0.5 * ang)[:, None], np.sin(0.5 * ang)[:, None] * rotvec / safe[:, None]], axis=1)
    # g = g0 · spin · tilt: the tilt moves the sample direction that maps onto hkl away from the axis
    q = quat_multiply(q0, quat_multiply(spin, tilt))
    return np.where(q[:, :1] < 0, -q, q)


def _notch_mask(notch: NotchShape, side: str, position_um: float | None, shape: tuple[int, int], step: float,
                grid: str, width: float, height: float) -> tuple[np.ndarray, tuple[float, float], np.ndarray]:
    """Points inside the notch, its root ``(x, y)`` µm and its inward unit direction."""
    ny, nx = shape
    edge, normal, root = side_notch(side, position_um, notch, (0.0, width, 0.0, height))
    x, y = _grid_xy(np.arange(ny), nx, step, grid)
    return notch_mask(x, y, edge, normal, notch), (float(root[0]), float(root[1])), normal


# ---------------------------------------------------------------------------------------------- public
def make_specimen(
    shape: tuple[int, int] = (200, 200),
    step: float = 1.0,
    *,
    grid: str = "square",
    grain_size_um: float = 20.0,
    size_spread: float = 0.35,
    texture: str = "random",
    fibre_axis=(0.0, 0.0, 1.0),
    fibre_hkl=(1.0, 1.0, 1.0),
    fibre_spread_deg: float = 10.0,
    gradient_deg: float = 2.0,
    noise_deg: float = 0.5,
    unindexed_fraction: float = 0.02,
    unindexed_clusters: float = 0.5,
    second_phase_fraction: float = 0.0,
    island_size_um: float | None = None,
    notch: NotchShape | dict | None = None,
    notch_side: str = "left",
    notch_position_um: float | None = None,
    load_axis=None,
    seed: int = 0,
    name: str = "synthetic specimen",
    description: str = "",
    chunk_points: int = 1 << 18,
) -> Specimen:
    """Build a synthetic orientation map with known grains.

    Parameters
    ----------
    shape
        ``(ny, nx)`` grid points (rows, columns).
    step
        Grid step, µm.
    grid
        ``"square"`` or ``"hex"`` (conventions of :class:`~slipnet.maps.OrientationMap`).
    grain_size_um
        Mean equivalent circle diameter (ECD) of the grains, µm (number-weighted over the whole
        grains, i.e. those not cut by the map edge).
    size_spread
        Standard deviation of ln(diameter) of the drawn placement disks (log-normal), in [0, 1.5].
        The cells come out narrower: σ of ln(ECD) of the grains is about 0.09, 0.25 and 0.38 for
        0, 0.35 and 0.6.
    texture
        ``"random"`` (uniform orientations) or ``"fibre"``.
    fibre_axis : (3,) array_like
        Sample direction (map frame) that the crystal direction ``fibre_hkl`` aligns with.
    fibre_hkl : (3,) array_like
        Crystal direction of the fibre, e.g. ``(1, 1, 1)`` (γ fibre when ``fibre_axis`` is the normal).
    fibre_spread_deg
        RMS angle between ``fibre_axis`` and the grain's fibre direction, degrees.
    gradient_deg
        Orientation change across a grain (lattice bend), degrees, ≥ 0.
    noise_deg
        Standard deviation of each component of the per-point noise rotation vector, degrees;
        the mean noise angle is ``2·noise_deg·√(2/π)`` (Maxwell distribution).
    unindexed_fraction
        Fraction of the points outside the notch that are unindexed, in [0, 0.5].
    unindexed_clusters
        Share of those that come in small clusters on grain boundaries (the rest are isolated).
    second_phase_fraction
        Area fraction of FCC austenite islands (phase 1) on ferrite boundaries, in [0, 0.5].
    island_size_um
        Diameter of an island, µm (default 0.35 × ``grain_size_um``).
    notch
        A :class:`~slipnet.maps.NotchShape`, a dict of its fields, or None (no notch).
    notch_side, notch_position_um
        Side of the map the notch is cut into (``"left"``, ``"right"``, ``"top"``, ``"bottom"``) and
        the position of its axis along that side, µm from the map origin (None: mid-side).
    load_axis : (3,) array_like, optional
        Loading direction in the map frame; default: the in-plane direction across the notch axis
        (mode I opening), or x without a notch.
    seed
        Seed of every random stream.
    name, description
        Label and text for reports.
    chunk_points
        Points handled per chunk (bounds the working memory on large maps).

    Returns
    -------
    Specimen

    Raises
    ------
    ParameterError
        On out-of-range arguments.

    Notes
    -----
    Time and memory grow linearly with the number of points. Besides the result (about 52 bytes
    per point) the generator keeps per-point label and mask arrays (about 25 bytes per point) and
    work arrays of ``chunk_points`` entries; the container then validates a copy of the quaternions.
    Measured on a shared 2-core machine: 1000 × 1000 points in about 3 s; 4000 × 4000 in about a
    minute at 3.2 GiB peak.
    """
    try:
        ny, nx = (int(v) for v in shape)
    except (TypeError, ValueError) as err:
        raise ParameterError(f"shape should be (ny, nx) integers; got {shape!r}") from err
    if ny < 2 or nx < 2:
        raise ParameterError(f"shape should be at least (2, 2); got {shape!r}")
    step = check_positive(step, "step")
    grid = check_choice(grid, "grid", GRIDS)
    d_mean = check_positive(grain_size_um, "grain_size_um")
    sigma = check_range(size_spread, "size_spread", 0.0, 1.5)
    texture = check_choice(texture, "texture", TEXTURES)
    f_axis = _unit(fibre_axis, "fibre_axis")
    f_hkl = _unit(fibre_hkl, "fibre_hkl")
    f_spread = check_range(fibre_spread_deg, "fibre_spread_deg", 0.0, 90.0)
    grad = check_range(gradient_deg, "gradient_deg", 0.0, 45.0)
    noise = check_range(noise_deg, "noise_deg", 0.0, 20.0)
    f_unind = check_range(unindexed_fraction, "unindexed_fraction", 0.0, 0.5)
    f_clust = check_range(unindexed_clusters, "unindexed_clusters", 0.0, 1.0)
    f_second = check_range(second_phase_fraction, "second_phase_fraction", 0.0, 0.5)
    island_d = 0.35 * d_mean if island_size_um is None else check_positive(island_size_um, "island_size_um")
    chunk_points = int(check_positive(chunk_points, "chunk_points"))
    if isinstance(notch, dict):
        try:
            notch = NotchShape(**notch)
        except TypeError as err:
            raise ParameterError(f"notch should be a NotchShape or a dict of its fields; got {notch!r}") from err
    elif notch is not None and not isinstance(notch, NotchShape):
        raise ParameterError(f"notch should be a NotchShape, a dict of its fields or None; got {notch!r}")
    if notch is not None:
        notch_side = check_choice(notch_side, "notch_side", SIDES)

    rs = step * (math.sqrt(3.0) / 2.0 if grid == "hex" else 1.0)
    width = (nx - 1) * step + (0.5 * step if grid == "hex" and ny > 1 else 0.0)
    height = (ny - 1) * rs
    s_tess, s_ori, s_bend, s_island, s_unind, s_noise, s_quality = np.random.SeedSequence(int(seed)).spawn(7)

    # ---- 1. grains: disks by random sequential addition, power cells
    rng = np.random.default_rng(s_tess)
    pad = 1.5 * d_mean
    lo, hi = np.array([-pad, -pad]), np.array([width + pad, height + pad])
    area = float(np.prod(hi - lo))
    n_seed = max(2, round(area / (0.25 * math.pi * d_mean**2 * math.exp(_AREA_SPREAD_COEFF * sigma**2))))
    diam = np.sort(d_mean * np.exp(sigma * rng.standard_normal(n_seed) - 0.5 * sigma**2))[::-1]
    scale = math.sqrt(_DISK_COVERAGE * area / np.sum(0.25 * math.pi * diam**2))
    radii = 0.5 * scale * diam
    centres = _place_disks(radii, lo, hi, rng)
    ok = np.isfinite(centres[:, 0])
    centres, radii, diam = centres[ok], radii[ok], diam[ok]
    w = (_WEIGHT_GAIN * radii) ** 2
    labels = _power_cells((ny, nx), step, grid, centres, w, lo, hi, d_mean)
    rows_per = max(1, chunk_points // nx)
    present = np.bincount(labels.ravel(), minlength=centres.shape[0]) > 0
    remap = np.cumsum(present) - 1
    labels = remap[labels]
    centres, diam = centres[present], diam[present]
    n_ferrite = centres.shape[0]

    # ---- 2. orientations
    rng = np.random.default_rng(s_ori)

    def draw_orientations(n: int) -> np.ndarray:
        if texture == "random":
            return random_quats(n, rng)
        return _fibre_quats(n, f_axis, f_hkl, f_spread, rng)

    grain_q = draw_orientations(n_ferrite)
    grain_phase = np.zeros(n_ferrite, dtype=np.int32)

    # ---- 3. second phase islands on ferrite boundaries
    if f_second > 0:
        rng = np.random.default_rng(s_island)
        n_pts = ny * nx
        island_centre_pts: list[np.ndarray] = []
        next_label = n_ferrite
        r_isl = max(0.5 * island_d, 1.01 * step)
        n_sten = _disk_stencil(r_isl, step, grid, 0)[0].size
        for _ in range(12):
            frac = np.count_nonzero(labels >= n_ferrite) / n_pts
            need = f_second - frac
            if need <= 0.01 * f_second:
                break
            cand = np.flatnonzero((_neighbour_differs(labels, grid) & (labels < n_ferrite)).ravel())
            if cand.size == 0:
                cand = np.flatnonzero((labels < n_ferrite).ravel())
            k = max(1, math.ceil(need * n_pts / n_sten))
            pick = rng.choice(cand, size=min(k, cand.size), replace=False)
            ci, cj = np.divmod(pick, nx)
            flat, owner = _disk_points(ci, cj, r_isl, step, grid, (ny, nx))
            labels.ravel()[flat] = next_label + owner
            island_centre_pts.append(pick)
            next_label += pick.size
        if island_centre_pts:
            picks = np.concatenate(island_centre_pts)
            ci, cj = np.divmod(picks, nx)
            cx, cy = _grid_xy(ci, 1, step, grid)
            cx = cx[:, 0] + cj * step
            centres = np.vstack([centres, np.column_stack([cx, cy[:, 0]])])
            diam = np.concatenate([diam, np.full(picks.size, 2.0 * r_isl)])
            grain_q = np.vstack([grain_q, draw_orientations(picks.size)])
            grain_phase = np.concatenate([grain_phase, np.ones(picks.size, dtype=np.int32)])

    # ---- 6. notch and unindexed points (before orientations: they carry none)
    notch_root, notch_dir = None, None
    if notch is not None:
        nmask, notch_root, notch_dir = _notch_mask(notch, notch_side, notch_position_um, (ny, nx), step, grid,
                                                   width, height)
        labels[nmask] = -1
    if f_unind > 0:
        rng = np.random.default_rng(s_unind)
        usable = np.count_nonzero(labels >= 0)
        target = round(f_unind * usable)
        if f_clust > 0:
            cand = np.flatnonzero((_neighbour_differs(labels, grid) & (labels >= 0)).ravel())
            n_sten = _disk_stencil(_CLUSTER_RADIUS_STEPS * step, step, grid, 0)[0].size
            k = round(f_clust * target / n_sten)
            if cand.size and k:
                pick = rng.choice(cand, size=min(k, cand.size), replace=False)
                flat, _ = _disk_points(*np.divmod(pick, nx), _CLUSTER_RADIUS_STEPS * step, step, grid, (ny, nx))
                labels.ravel()[flat] = -1
        # isolated points: draw with replacement and top up (duplicates and notch hits cost a round)
        for _ in range(6):
            missing = target - (usable - np.count_nonzero(labels >= 0))
            if missing <= 0:
                break
            labels.ravel()[rng.integers(0, ny * nx, size=missing)] = -1

    # keep only the grains that still own a point; ids 0..n−1
    present = np.bincount(labels[labels >= 0], minlength=grain_q.shape[0]) > 0
    remap = np.append(np.cumsum(present) - 1, -1)  # index −1 maps to −1
    labels = remap[labels]
    centres, diam, grain_q, grain_phase = centres[present], diam[present], grain_q[present], grain_phase[present]
    n_grains = grain_q.shape[0]

    # ---- 4./5. per-point orientation: grain · bend · noise (chunked, one fused kernel)
    rng = np.random.default_rng(s_bend)
    bend_axis = rng.standard_normal((n_grains, 3))
    bend_axis /= np.linalg.norm(bend_axis, axis=1, keepdims=True)
    phi = rng.uniform(0.0, 2.0 * math.pi, n_grains)
    bend_dir = np.column_stack([np.cos(phi), np.sin(phi)])
    bend_rate = math.radians(grad) / diam  # radians per µm: about gradient_deg across the grain
    rng_noise = np.random.default_rng(s_noise)
    rng_q = np.random.default_rng(s_quality)
    boundary = _neighbour_differs(labels, grid)
    quats = np.empty((ny, nx, 4))
    quality = np.empty((ny, nx))
    sig = math.radians(noise)
    for r0 in range(0, ny, rows_per):
        rows = np.arange(r0, min(ny, r0 + rows_per))
        x, y = _grid_xy(rows, nx, step, grid)
        lab = np.ascontiguousarray(labels[rows].ravel())
        nz = rng_noise.standard_normal((lab.size, 3)) * sig
        out = np.empty((lab.size, 4))
        _k.compose_point_orientations(
            lab, np.ascontiguousarray(x.ravel()), np.ascontiguousarray(y.ravel()),
            grain_q, centres, bend_axis, bend_dir, bend_rate, nz, out,
        )
        quats[rows] = out.reshape(rows.size, nx, 4)
        # a pattern-quality-like value: lower on boundaries, near zero where unindexed
        # (one draw per point, so the result does not depend on the chunk size)
        z = rng_q.standard_normal((rows.size, nx))
        qv = np.where(labels[rows] >= 0, 0.9 - 0.3 * boundary[rows] + 0.04 * z, 0.06 + 0.02 * z)
        quality[rows] = np.clip(qv, 0.0, 1.0)

    phase = np.where(labels >= 0, grain_phase[np.maximum(labels, 0)], -1).astype(np.int32)
    phases = (FERRITE, AUSTENITE) if f_second > 0 else (FERRITE,)
    omap = OrientationMap(quats=quats, phase=phase, quality=quality, indexed=labels >= 0, step=step,
                          grid=grid, phases=phases, name=name, meta={"synthetic": True, "seed": int(seed)})
    if load_axis is None:
        if notch_dir is not None:
            load = np.array([-notch_dir[1], notch_dir[0], 0.0])
            load = np.abs(load)  # the sense of a uniaxial load axis is immaterial
        else:
            load = np.array([1.0, 0.0, 0.0])
    else:
        load = _unit(load_axis, "load_axis")
    settings = {
        "shape": (ny, nx), "step": step, "grid": grid, "grain_size_um": d_mean, "size_spread": sigma,
        "texture": texture, "fibre_axis": tuple(f_axis), "fibre_hkl": tuple(f_hkl),
        "fibre_spread_deg": f_spread, "gradient_deg": grad, "noise_deg": noise,
        "unindexed_fraction": f_unind, "unindexed_clusters": f_clust,
        "second_phase_fraction": f_second, "island_size_um": island_d,
        "notch": None if notch is None else {**notch.as_dict(), "side": notch_side,
                                              "position_um": notch_position_um}, "seed": int(seed),
    }
    return Specimen(
        omap=omap, truth_labels=labels, grain_quats=grain_q, grain_phase=grain_phase,
        notch_root=None if notch_root is None else (float(notch_root[0]), float(notch_root[1])),
        notch_direction=notch_dir, load_axis=load, name=name,
        description=description or f"Synthetic map, {n_grains} grains of mean ECD {d_mean:g} µm (invented data).",
        settings=settings,
    )


DEMO_NAME = "Coupon KV-7 (synthetic)"


def demo_specimen(seed: int = 7, quick: bool = False) -> Specimen:
    """The invented demo scenario: a coarse-grained ferritic steel coupon with a notch on its left edge.

    Parameters
    ----------
    seed
        Seed of the generator (7 gives the documented scenario).
    quick
        Scan the same 796 × 596 µm field at 4 µm instead of 2 µm (200 × 150 instead of 399 × 299
        points): the same grains (every other row and column), a quarter of the points.

    Returns
    -------
    Specimen
        About 110 ferrite grains of ~80 µm, random texture, 2° bends, 0.5° noise, 2 %
        unindexed points, a 60 µm deep V-notch at mid-height of the left edge; the load axis is y
        (map frame), across the notch, so the notch opens in mode I.
    """
    step = 4.0 if quick else 2.0
    shape = (150, 200) if quick else (299, 399)  # both span 796 × 596 µm: the same tessellation
    story = (
        "Invented data, not a measurement. Coupon KV-7 is a made-up specimen of a coarse-grained, "
        "normalised ferritic steel plate. Its polished face was 'mapped' over 800 × 600 µm at the left "
        f"edge at {step:g} µm step, where a 60 µm deep V-notch (45° opening, 15 µm root radius) is "
        "cut at mid-height; the coupon is loaded in tension along y, across the notch. Grains of "
        "about 80 µm with random orientations lie ahead of the notch root, so the first grains a "
        "crack meets differ in slip geometry."
    )
    return make_specimen(
        shape, step, grid="square", grain_size_um=80.0, size_spread=0.35, texture="random",
        gradient_deg=2.0, noise_deg=0.5, unindexed_fraction=0.02, unindexed_clusters=0.5,
        notch=NotchShape(depth_um=60.0, root_radius_um=15.0, opening_deg=45.0), notch_side="left",
        load_axis=(0.0, 1.0, 0.0), seed=seed, name=DEMO_NAME, description=story,
    )

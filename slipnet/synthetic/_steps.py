"""The stages of :func:`slipnet.synthetic.make_specimen`, one function each.

Every stage that draws random numbers takes its own ``SeedSequence`` (spawned once, in a fixed
order, by ``make_specimen``) or generator, and draws in the same order as it always did, so a
given seed gives the same specimen bit for bit.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from slipnet._checks import check_choice, check_positive, check_range
from slipnet.crystal.orientation import random_quats
from slipnet.errors import ParameterError
from slipnet.maps.notch import SIDES, NotchShape
from slipnet.maps.orientation_map import GRIDS
from slipnet.synthetic import _kernels as _k
from slipnet.synthetic._geometry import (
    _disk_points,
    _disk_stencil,
    _grid_xy,
    _neighbour_differs,
    _notch_mask,
    _place_disks,
    _power_cells,
)
from slipnet.synthetic._orientations import _fibre_quats, _unit

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


@dataclass(frozen=True)
class Config:
    """The checked arguments of :func:`make_specimen` (names as in its body)."""

    ny: int
    nx: int
    step: float
    grid: str
    d_mean: float
    sigma: float
    texture: str
    f_axis: np.ndarray
    f_hkl: np.ndarray
    f_spread: float
    grad: float
    noise: float
    f_unind: float
    f_clust: float
    f_second: float
    island_d: float
    chunk_points: int
    notch: NotchShape | None
    notch_side: str

    @property
    def width(self) -> float:
        """Map width, µm (point centres)."""
        return (self.nx - 1) * self.step + (0.5 * self.step if self.grid == "hex" and self.ny > 1 else 0.0)

    @property
    def height(self) -> float:
        """Map height, µm (point centres)."""
        rs = self.step * (math.sqrt(3.0) / 2.0 if self.grid == "hex" else 1.0)
        return (self.ny - 1) * rs

    @property
    def rows_per(self) -> int:
        """Rows handled per chunk."""
        return max(1, self.chunk_points // self.nx)


@dataclass(eq=False)
class Grains:
    """The grains as the stages build them up (work state, changed in place by the stages)."""

    labels: np.ndarray  #: (ny, nx) int64 grain of every point, −1 where unindexed
    centres: np.ndarray  #: (n, 2) placement centres, µm
    diam: np.ndarray  #: (n,) placement diameters, µm
    quats: np.ndarray = field(default_factory=lambda: np.zeros((0, 4)))  #: (n, 4) grain orientations
    phase: np.ndarray = field(default_factory=lambda: np.zeros(0, dtype=np.int32))  #: (n,) phase index


def check_arguments(shape, step, grid, grain_size_um, size_spread, texture, fibre_axis, fibre_hkl, fibre_spread_deg,
                    gradient_deg, noise_deg, unindexed_fraction, unindexed_clusters, second_phase_fraction,
                    island_size_um, notch, notch_side, chunk_points) -> Config:
    """Check every argument of :func:`make_specimen` and convert it (``ParameterError`` naming the first bad one)."""
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
    return Config(ny, nx, step, grid, d_mean, sigma, texture, f_axis, f_hkl, f_spread, grad, noise, f_unind, f_clust,
                  f_second, island_d, chunk_points, notch, notch_side)


def tessellate(cfg: Config, seed: np.random.SeedSequence) -> Grains:
    """Stage 1: log-normal disks placed by random sequential addition, the power cells of the map points."""
    rng = np.random.default_rng(seed)
    d_mean, sigma = cfg.d_mean, cfg.sigma
    pad = 1.5 * d_mean
    lo, hi = np.array([-pad, -pad]), np.array([cfg.width + pad, cfg.height + pad])
    area = float(np.prod(hi - lo))
    n_seed = max(2, round(area / (0.25 * math.pi * d_mean**2 * math.exp(_AREA_SPREAD_COEFF * sigma**2))))
    diam = np.sort(d_mean * np.exp(sigma * rng.standard_normal(n_seed) - 0.5 * sigma**2))[::-1]
    scale = math.sqrt(_DISK_COVERAGE * area / np.sum(0.25 * math.pi * diam**2))
    radii = 0.5 * scale * diam
    centres = _place_disks(radii, lo, hi, rng)
    ok = np.isfinite(centres[:, 0])
    centres, radii, diam = centres[ok], radii[ok], diam[ok]
    w = (_WEIGHT_GAIN * radii) ** 2
    labels = _power_cells((cfg.ny, cfg.nx), cfg.step, cfg.grid, centres, w, lo, hi, d_mean)
    present = np.bincount(labels.ravel(), minlength=centres.shape[0]) > 0
    remap = np.cumsum(present) - 1
    return Grains(remap[labels], centres[present], diam[present])


def draw_orientations(cfg: Config, n: int, rng: np.random.Generator) -> np.ndarray:
    """Stage 2: ``n`` grain orientations, uniformly random or fibre-textured, from ``rng``."""
    if cfg.texture == "random":
        return random_quats(n, rng)
    return _fibre_quats(n, cfg.f_axis, cfg.f_hkl, cfg.f_spread, rng)


def add_second_phase(cfg: Config, g: Grains, seed: np.random.SeedSequence) -> None:
    """Stage 3: austenite islands (phase 1) on ferrite boundaries, in place, until their area fraction is met.

    The islands' orientations come from this stage's stream too, after the island positions.
    """
    ny, nx, step, grid = cfg.ny, cfg.nx, cfg.step, cfg.grid
    labels = g.labels
    n_ferrite = g.quats.shape[0]
    rng = np.random.default_rng(seed)
    n_pts = ny * nx
    island_centre_pts: list[np.ndarray] = []
    next_label = n_ferrite
    r_isl = max(0.5 * cfg.island_d, 1.01 * step)
    n_sten = _disk_stencil(r_isl, step, grid, 0)[0].size
    for _ in range(12):
        frac = np.count_nonzero(labels >= n_ferrite) / n_pts
        need = cfg.f_second - frac
        if need <= 0.01 * cfg.f_second:
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
        g.centres = np.vstack([g.centres, np.column_stack([cx, cy[:, 0]])])
        g.diam = np.concatenate([g.diam, np.full(picks.size, 2.0 * r_isl)])
        g.quats = np.vstack([g.quats, draw_orientations(cfg, picks.size, rng)])
        g.phase = np.concatenate([g.phase, np.ones(picks.size, dtype=np.int32)])


def cut_notch(cfg: Config, g: Grains, position_um: float | None) -> tuple[tuple[float, float], np.ndarray]:
    """Stage 6a: unindex the points inside the notch; its root ``(x, y)`` µm and inward direction."""
    nmask, root, direction = _notch_mask(cfg.notch, cfg.notch_side, position_um, (cfg.ny, cfg.nx), cfg.step, cfg.grid,
                                         cfg.width, cfg.height)
    g.labels[nmask] = -1
    return root, direction


def unindex_points(cfg: Config, g: Grains, seed: np.random.SeedSequence) -> None:
    """Stage 6b: unindex small clusters on grain boundaries, then isolated points, up to the fraction asked."""
    ny, nx, step, grid = cfg.ny, cfg.nx, cfg.step, cfg.grid
    labels = g.labels
    rng = np.random.default_rng(seed)
    usable = np.count_nonzero(labels >= 0)
    target = round(cfg.f_unind * usable)
    if cfg.f_clust > 0:
        cand = np.flatnonzero((_neighbour_differs(labels, grid) & (labels >= 0)).ravel())
        n_sten = _disk_stencil(_CLUSTER_RADIUS_STEPS * step, step, grid, 0)[0].size
        k = round(cfg.f_clust * target / n_sten)
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


def drop_empty_grains(g: Grains) -> None:
    """Keep only the grains that still own a point, renumbered 0..n−1 (−1 stays −1)."""
    present = np.bincount(g.labels[g.labels >= 0], minlength=g.quats.shape[0]) > 0
    remap = np.append(np.cumsum(present) - 1, -1)  # index −1 maps to −1
    g.labels = remap[g.labels]
    g.centres, g.diam, g.quats, g.phase = g.centres[present], g.diam[present], g.quats[present], g.phase[present]


def point_orientations(cfg: Config, g: Grains, bend_seed: np.random.SeedSequence,
                       noise_seed: np.random.SeedSequence) -> np.ndarray:
    """Stages 4-5: per-point orientation grain · bend · noise, chunk by chunk in one fused kernel, (ny, nx, 4)."""
    ny, nx = cfg.ny, cfg.nx
    n_grains = g.quats.shape[0]
    rng = np.random.default_rng(bend_seed)
    bend_axis = rng.standard_normal((n_grains, 3))
    bend_axis /= np.linalg.norm(bend_axis, axis=1, keepdims=True)
    phi = rng.uniform(0.0, 2.0 * math.pi, n_grains)
    bend_dir = np.column_stack([np.cos(phi), np.sin(phi)])
    bend_rate = math.radians(cfg.grad) / g.diam  # radians per µm: about gradient_deg across the grain
    rng_noise = np.random.default_rng(noise_seed)
    quats = np.empty((ny, nx, 4))
    sig = math.radians(cfg.noise)
    for r0 in range(0, ny, cfg.rows_per):
        rows = np.arange(r0, min(ny, r0 + cfg.rows_per))
        x, y = _grid_xy(rows, nx, cfg.step, cfg.grid)
        lab = np.ascontiguousarray(g.labels[rows].ravel())
        nz = rng_noise.standard_normal((lab.size, 3)) * sig
        out = np.empty((lab.size, 4))
        _k.compose_point_orientations(
            lab, np.ascontiguousarray(x.ravel()), np.ascontiguousarray(y.ravel()),
            g.quats, g.centres, bend_axis, bend_dir, bend_rate, nz, out,
        )
        quats[rows] = out.reshape(rows.size, nx, 4)
    return quats


def point_quality(cfg: Config, labels: np.ndarray, seed: np.random.SeedSequence) -> np.ndarray:
    """Stage 7: a pattern-quality-like value, lower on boundaries, near zero where unindexed, (ny, nx)."""
    ny, nx = cfg.ny, cfg.nx
    rng_q = np.random.default_rng(seed)
    boundary = _neighbour_differs(labels, cfg.grid)
    quality = np.empty((ny, nx))
    for r0 in range(0, ny, cfg.rows_per):
        rows = np.arange(r0, min(ny, r0 + cfg.rows_per))
        # one draw per point, so the result does not depend on the chunk size
        z = rng_q.standard_normal((rows.size, nx))
        qv = np.where(labels[rows] >= 0, 0.9 - 0.3 * boundary[rows] + 0.04 * z, 0.06 + 0.02 * z)
        quality[rows] = np.clip(qv, 0.0, 1.0)
    return quality


def load_axis_of(load_axis, notch_dir: np.ndarray | None) -> np.ndarray:
    """The unit load axis: as given, else across the notch axis (mode I), else x."""
    if load_axis is not None:
        return _unit(load_axis, "load_axis")
    if notch_dir is not None:
        load = np.array([-notch_dir[1], notch_dir[0], 0.0])
        return np.abs(load)  # the sense of a uniaxial load axis is immaterial
    return np.array([1.0, 0.0, 0.0])


def settings_of(cfg: Config, notch_position_um: float | None, seed: int) -> dict:
    """The generator arguments as recorded on the specimen."""
    return {
        "shape": (cfg.ny, cfg.nx), "step": cfg.step, "grid": cfg.grid, "grain_size_um": cfg.d_mean,
        "size_spread": cfg.sigma, "texture": cfg.texture, "fibre_axis": tuple(cfg.f_axis),
        "fibre_hkl": tuple(cfg.f_hkl), "fibre_spread_deg": cfg.f_spread, "gradient_deg": cfg.grad,
        "noise_deg": cfg.noise, "unindexed_fraction": cfg.f_unind, "unindexed_clusters": cfg.f_clust,
        "second_phase_fraction": cfg.f_second, "island_size_um": cfg.island_d,
        "notch": None if cfg.notch is None else {**cfg.notch.as_dict(), "side": cfg.notch_side,
                                                  "position_um": notch_position_um}, "seed": int(seed),
    }

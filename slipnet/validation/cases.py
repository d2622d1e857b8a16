"""Virtual-experiment specimens: every setting drawn from stated ranges with a fixed seed.

A *case* is one notched synthetic specimen with a short crack from the notch root, a load and a
load ratio. Each case is drawn from ``numpy.random.default_rng(seed)`` in a fixed order, so a seed
names the same case on every machine. Training seeds (used to fit the forecast's weights) and
held-out seeds (used only to score it) are fixed, disjoint tuples.
"""

from __future__ import annotations

import math
from dataclasses import asdict, dataclass, field

import numpy as np

from slipnet.errors import ParameterError
from slipnet.maps.notch import NotchShape

__all__ = ["HELD_OUT_SEEDS", "TRAINING_SEEDS", "BuiltCase", "Case", "CaseRanges", "build_case", "draw_case",
           "draw_cases"]

#: Seeds of the specimens the weights are fitted on.
TRAINING_SEEDS: tuple[int, ...] = tuple(range(1000, 1016))
#: Seeds of the specimens the forecast is scored on; never used in a fit.
HELD_OUT_SEEDS: tuple[int, ...] = tuple(range(2000, 2012))


@dataclass(frozen=True)
class CaseRanges:
    """Ranges every case is drawn from (uniform unless stated).

    Attributes
    ----------
    shape, step_um
        Map size (rows, columns) and grid step, µm (fixed, not drawn).
    horizon_um
        Forecast horizon and scoring radius about the crack tip, µm (fixed).
    grain_size_um
        Mean equivalent circle diameter of the grains, µm.
    fibre_share
        Probability that a case has a fibre texture (⟨111⟩ ∥ surface normal, 15° spread) instead of
        a random one.
    notch_sides
        Sides the notch may be cut into (drawn with equal probability; both are along the load).
    notch_position
        Position of the notch axis along its side, as a fraction of the side length.
    notch_depth_um, notch_radius_um, notch_opening_deg
        Notch depth, root radius and flank opening.
    crack_length_um
        Length of the straight crack cut from the notch root.
    crack_angle_deg
        Angle between the crack and the notch axis, degrees.
    load_tilt_deg
        In-plane tilt of the load axis away from y, degrees.
    ratio
        Load ratio R = σ_min/σ_max.
    max_stress_mpa
        Peak applied stress σ_max, MPa; the amplitude is σ_max (1 − R) / 2.
    """

    shape: tuple[int, int] = (100, 100)
    step_um: float = 3.0
    horizon_um: float = 150.0
    grain_size_um: tuple[float, float] = (20.0, 40.0)
    fibre_share: float = 0.25
    notch_sides: tuple[str, ...] = ("left", "right")
    notch_position: tuple[float, float] = (0.35, 0.65)
    notch_depth_um: tuple[float, float] = (30.0, 60.0)
    notch_radius_um: tuple[float, float] = (5.0, 15.0)
    notch_opening_deg: tuple[float, float] = (0.0, 60.0)
    crack_length_um: tuple[float, float] = (6.0, 24.0)
    crack_angle_deg: tuple[float, float] = (-20.0, 20.0)
    load_tilt_deg: tuple[float, float] = (-10.0, 10.0)
    ratio: tuple[float, float] = (-1.0, 0.0)
    max_stress_mpa: tuple[float, float] = (200.0, 260.0)

    def as_dict(self) -> dict:
        """The ranges, JSON-safe."""
        return {k: (list(v) if isinstance(v, tuple) else v) for k, v in asdict(self).items()}


@dataclass(frozen=True)
class Case:
    """One drawn virtual experiment (JSON-safe numbers only).

    ``crack_um`` runs from the notch root (mouth) to the tip; ``load_axis`` is a unit 3-vector in the
    map frame; ``stress_amplitude_mpa`` = σ_max (1 − R) / 2.
    """

    seed: int
    shape: tuple[int, int]
    step_um: float
    horizon_um: float
    grain_size_um: float
    texture: str
    notch_side: str
    notch_position_um: float
    notch: dict
    crack_length_um: float
    crack_angle_deg: float
    load_axis: tuple[float, float, float]
    ratio: float
    max_stress_mpa: float
    stress_amplitude_mpa: float
    crack_um: tuple = field(default=())

    def as_dict(self) -> dict:
        """The case, JSON-safe."""
        d = asdict(self)
        d["shape"] = list(self.shape)
        d["load_axis"] = list(self.load_axis)
        d["crack_um"] = [list(p) for p in self.crack_um]
        return d


def _u(rng: np.random.Generator, lo_hi) -> float:
    lo, hi = (float(v) for v in lo_hi)
    return float(rng.uniform(lo, hi)) if hi > lo else lo


def draw_case(seed: int, ranges: CaseRanges | None = None) -> Case:
    """Draw one case from ``ranges`` with ``numpy.random.default_rng(seed)``.

    The crack polyline is computed when the specimen is built (it needs the notch root), so
    ``crack_um`` is empty here; :func:`build_case` returns it.
    """
    if isinstance(seed, bool) or not isinstance(seed, int | np.integer):
        raise ParameterError(f"seed should be an integer; got {seed!r}")
    r = ranges or CaseRanges()
    rng = np.random.default_rng(int(seed))
    # a fixed order of draws: adding a range later appends, never reorders
    size = _u(rng, r.grain_size_um)
    texture = "fibre" if rng.uniform() < r.fibre_share else "random"
    side = str(r.notch_sides[int(rng.integers(len(r.notch_sides)))])
    ny, nx = r.shape
    side_len = (ny - 1) * r.step_um if side in ("left", "right") else (nx - 1) * r.step_um
    pos = _u(rng, r.notch_position) * side_len
    depth = _u(rng, r.notch_depth_um)
    radius = min(_u(rng, r.notch_radius_um), depth)
    opening = _u(rng, r.notch_opening_deg)
    c_len = _u(rng, r.crack_length_um)
    c_ang = _u(rng, r.crack_angle_deg)
    tilt = math.radians(_u(rng, r.load_tilt_deg))
    ratio = _u(rng, r.ratio)
    smax = _u(rng, r.max_stress_mpa)
    return Case(seed=int(seed), shape=(int(ny), int(nx)), step_um=float(r.step_um), horizon_um=float(r.horizon_um),
                grain_size_um=size, texture=texture, notch_side=side, notch_position_um=pos,
                notch={"depth_um": depth, "root_radius_um": radius, "opening_deg": opening},
                crack_length_um=c_len, crack_angle_deg=c_ang,
                load_axis=(math.sin(tilt), math.cos(tilt), 0.0), ratio=ratio, max_stress_mpa=smax,
                stress_amplitude_mpa=0.5 * smax * (1.0 - ratio))


def draw_cases(seeds, ranges: CaseRanges | None = None) -> list[Case]:
    """:func:`draw_case` for every seed, in order."""
    seeds = list(seeds)
    if not seeds:
        raise ParameterError("seeds should name at least one case")
    return [draw_case(s, ranges) for s in seeds]


@dataclass(frozen=True, eq=False)
class BuiltCase:
    """A case made concrete: the specimen, its grain graph and the crack polyline (mouth → tip)."""

    case: Case
    specimen: object
    gg: object
    crack_um: np.ndarray

    @property
    def tip(self) -> np.ndarray:
        """Crack tip ``(x, y)``, µm."""
        return self.crack_um[-1]

    @property
    def direction(self) -> np.ndarray:
        """Unit growth direction at the tip (the crack's last segment)."""
        d = self.crack_um[-1] - self.crack_um[-2]
        return d / np.linalg.norm(d)


def build_case(case: Case) -> BuiltCase:
    """Make the specimen (:func:`slipnet.synthetic.make_specimen`), its grain graph and the crack of a case."""
    from slipnet.grains import build_grain_graph
    from slipnet.synthetic import make_specimen

    kw = {"fibre_axis": (0.0, 0.0, 1.0), "fibre_hkl": (1.0, 1.0, 1.0), "fibre_spread_deg": 15.0} \
        if case.texture == "fibre" else {}
    spec = make_specimen(tuple(case.shape), case.step_um, grain_size_um=case.grain_size_um, texture=case.texture,
                         notch=NotchShape(**case.notch), notch_side=case.notch_side,
                         notch_position_um=case.notch_position_um, load_axis=case.load_axis, seed=case.seed,
                         name=f"virtual experiment {case.seed}", **kw)
    gg = build_grain_graph(spec.omap)
    root = np.asarray(spec.notch_root, dtype=float)
    a = math.radians(case.crack_angle_deg)
    n = np.asarray(spec.notch_direction, dtype=float)
    d = np.array([math.cos(a) * n[0] - math.sin(a) * n[1], math.sin(a) * n[0] + math.cos(a) * n[1]])
    crack = np.stack([root, root + case.crack_length_um * d])
    return BuiltCase(case=case, specimen=spec, gg=gg, crack_um=crack)

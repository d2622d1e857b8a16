"""Notch placement planner: rank candidate notch positions along a specimen edge.

For each candidate position along an edge, a notch of the given shape is (virtually) cut normal
to the edge; at its root slipnet estimates the stress concentration, finds the grains there,
forecasts the crack path (:func:`slipnet.forecast.forecast_crack`) and its growth
(:func:`slipnet.growth.simulate_growth`), and measures the objectives the user cares about. A
Monte Carlo over orientation noise, load misalignment and machining position error turns every
objective into a band and a probability. Candidates are ranked by a weighted score or as a
Pareto set. The sweep runs on Dask (:mod:`slipnet.notch_sweep`).

Objectives (column names; the sign of a weight says whether larger is better)
------------------------------------------------------------------------------
``initiation_drive``
    Largest critical-stress-weighted (effective) Schmid factor among the grains within one root
    radius of the notch root, times the notch stress concentration factor K_t.
``first_barrier_um``
    Path distance from the root to the first strong barrier (intrinsic barrier strength — the
    forecast's barrier score without its distance relevance — at least ``strong_barrier``);
    ``inf`` when none lies within the observation window.
``barriers_in_window``
    Number of boundaries the forecast path crosses within the observation window.
``barrier_strength_in_window``
    Sum of the intrinsic strengths of those boundaries.
``log10_cycles_to_window``
    log₁₀ of the predicted cycles for the crack to grow from the initial crack size to the end
    of the window (``inf`` when it arrests first).
``arrest_probability``
    Share of the Monte Carlo samples in which the crack arrests inside the window (the nominal
    run gives 0 or 1 without samples).
``target_offset_um``
    |path distance to a chosen boundary (or to the entry into a chosen grain) − the wanted
    distance|; ``inf`` when the path does not reach it within the window.

Notes
-----
With ``concentration="full_field"`` K_t comes instead from an anisotropic elastic solve of the
map with the notch cut in (:func:`full_field_kt`). By default, the stress concentration of a U- or
V-shaped edge notch uses the semi-infinite-plate fit of
Peterson's charts (Pilkey & Pilkey 2008, *Peterson's Stress Concentration Factors*, 3rd ed.,
Wiley, chart 2.2: K_t = 0.855 + 2.21 √(t/r) for 1 ≤ t/r ≤ 361 — from memory), with V notches
of opening angle ≤ 90° taken equal to the U notch (same charts, the angle matters little below
90°) and a linear fall to K_t = 1 at 180° above that (our assumption). A crack growing from the
root sees the notch field only within the notch-affected zone: the growth model is run with the
constant amplitude σ·k with k = min(K_t, √((t + a)/a)) at a = half the window (the smaller of
the short-crack and long-crack driving forces, Dowling 1979, Fatigue Eng. Mater. Struct.
2:129; Smith & Miller 1978, Int. J. Mech. Sci. 20:201), capped below the friction stress.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field, replace

import numpy as np
import pandas as pd

from ._checks import check_positive, check_range, check_vector
from .errors import ParameterError, SlipnetError

__all__ = [
    "OBJECTIVES",
    "Candidate",
    "NotchShape",
    "PlanSettings",
    "candidate_positions",
    "edge_of_map",
    "evaluate_candidate",
    "full_field_kt",
    "notch_mask",
    "notch_stress_factor",
    "pareto_ranks",
    "peterson_kt",
    "plan_notch",
    "rank_candidates",
]

#: Objective names and whether a larger value is better by default.
OBJECTIVES: dict[str, bool] = {
    "initiation_drive": True,
    "first_barrier_um": False,
    "barriers_in_window": True,
    "barrier_strength_in_window": True,
    "log10_cycles_to_window": False,
    "arrest_probability": True,
    "target_offset_um": False,
}

DEFAULT_WEIGHTS: dict[str, float] = {"initiation_drive": 1.0, "barrier_strength_in_window": 1.0}

SIDES = ("left", "right", "top", "bottom")

#: How K_t at each candidate's root is found: the Peterson-type chart fit, or a full-field
#: anisotropic elastic solve of the map with that notch cut into it (slow: one solve each).
CONCENTRATION_METHODS = ("peterson", "full_field")


@dataclass(frozen=True)
class NotchShape:
    """Geometry of the notch to be cut.

    Attributes
    ----------
    depth_um
        Notch depth t from the edge to the root, µm.
    root_radius_um
        Root radius r, µm.
    opening_deg
        Opening angle of a V notch, degrees (0 for a U notch).
    """

    depth_um: float = 50.0
    root_radius_um: float = 10.0
    opening_deg: float = 0.0

    def __post_init__(self) -> None:
        object.__setattr__(self, "depth_um", check_positive(self.depth_um, "depth_um"))
        object.__setattr__(self, "root_radius_um", check_positive(self.root_radius_um, "root_radius_um"))
        object.__setattr__(self, "opening_deg", check_range(self.opening_deg, "opening_deg", 0.0, 180.0,
                                                            inclusive=True))


@dataclass(frozen=True)
class PlanSettings:
    """Everything a plan needs besides the graph and the edge (JSON-safe through :meth:`as_dict`).

    Attributes
    ----------
    load_axis
        Uniaxial load axis in the map frame.
    stress_amplitude
        Nominal (far-field) stress amplitude, MPa.
    stress_ratio
        R = σ_min/σ_max.
    notch
        :class:`NotchShape`.
    window_um
        Observation window: crack path length ahead of the root that the test will watch, µm.
    crack_sizes_um
        Initial crack sizes from which growth is run, µm; objectives use the smallest, and the
        table also lists cycles to the window from each.
    strong_barrier
        Intrinsic barrier strength (0–1) from which a barrier counts as strong.
    weights
        Objective name → weight (sign: + larger is better, − smaller is better).
    target
        Optional ``{"boundary": (a, b)}`` or ``{"grain": g}`` plus ``"distance_um"``.
    samples
        Monte Carlo samples per candidate (0: nominal only).
    orientation_noise_deg, load_misalignment_deg, position_error_um
        Monte Carlo standard deviations (grain orientations, load axis, notch root position).
    seed
        Seed of every random draw.
    growth
        Keyword arguments for :func:`slipnet.growth.simulate_growth` (e.g. friction stress).
    """

    load_axis: tuple[float, float, float] = (1.0, 0.0, 0.0)
    stress_amplitude: float = 200.0
    stress_ratio: float = -1.0
    notch: NotchShape = field(default_factory=NotchShape)
    window_um: float = 200.0
    crack_sizes_um: tuple[float, ...] = (5.0, 20.0)
    strong_barrier: float = 0.5
    weights: Mapping[str, float] = field(default_factory=lambda: dict(DEFAULT_WEIGHTS))
    target: Mapping | None = None
    samples: int = 0
    orientation_noise_deg: float = 1.5
    load_misalignment_deg: float = 2.0
    position_error_um: float = 5.0
    seed: int = 0
    growth: Mapping = field(default_factory=dict)
    concentration: str = "peterson"

    def __post_init__(self) -> None:
        if self.concentration not in CONCENTRATION_METHODS:
            raise ParameterError(f"concentration should be one of {', '.join(map(repr, CONCENTRATION_METHODS))}; "
                                 f"got {self.concentration!r}")
        object.__setattr__(self, "load_axis", tuple(float(v) for v in check_vector(self.load_axis, "load_axis")))
        object.__setattr__(self, "stress_amplitude", check_positive(self.stress_amplitude, "stress_amplitude"))
        object.__setattr__(self, "window_um", check_positive(self.window_um, "window_um"))
        sizes = tuple(sorted(check_positive(v, "crack_sizes_um") for v in np.atleast_1d(self.crack_sizes_um)))
        if not sizes:
            raise ParameterError("crack_sizes_um should hold at least one initial crack size (µm)")
        if sizes[-1] >= self.window_um:
            raise ParameterError(f"crack_sizes_um should be below window_um={self.window_um:g}; got {sizes[-1]:g}")
        object.__setattr__(self, "crack_sizes_um", sizes)
        object.__setattr__(self, "strong_barrier", check_range(self.strong_barrier, "strong_barrier", 0.0, 1.0))
        check_range(self.stress_ratio, "stress_ratio", -math.inf, 1.0, inclusive=False) if math.isfinite(
            float(self.stress_ratio)) else None
        w = {str(k): float(v) for k, v in dict(self.weights).items()}
        unknown = sorted(set(w) - set(OBJECTIVES))
        if unknown:
            raise ParameterError(
                f"unknown objective(s) {', '.join(map(repr, unknown))}; accepted: {', '.join(OBJECTIVES)}"
            )
        if not w or all(v == 0 for v in w.values()):
            raise ParameterError("weights should give at least one objective a non-zero weight")
        if "target_offset_um" in w and not self.target:
            raise ParameterError("the target_offset_um objective needs target={'boundary': (a, b) or "
                                 "'grain': g, 'distance_um': d}")
        object.__setattr__(self, "weights", w)
        if self.target:
            t = dict(self.target)
            if ("boundary" in t) == ("grain" in t) or "distance_um" not in t:
                raise ParameterError("target should give exactly one of 'boundary' (a pair of grain ids) or "
                                     f"'grain' (an id), and 'distance_um'; got {self.target!r}")
            check_positive(t["distance_um"], "target distance_um", allow_zero=True)
            object.__setattr__(self, "target", t)
        s = int(self.samples)
        if s < 0:
            raise ParameterError(f"samples should be >= 0; got {self.samples!r}")
        object.__setattr__(self, "samples", s)
        for nm in ("orientation_noise_deg", "load_misalignment_deg", "position_error_um"):
            object.__setattr__(self, nm, check_positive(getattr(self, nm), nm, allow_zero=True))
        object.__setattr__(self, "growth", dict(self.growth))

    def as_dict(self) -> dict:
        """JSON-safe copy of the settings."""
        d = {k: getattr(self, k) for k in self.__dataclass_fields__}
        d["notch"] = {k: getattr(self.notch, k) for k in self.notch.__dataclass_fields__}
        d["load_axis"] = list(self.load_axis)
        d["crack_sizes_um"] = list(self.crack_sizes_um)
        if self.target and "boundary" in self.target:
            d["target"] = {**self.target, "boundary": [int(v) for v in self.target["boundary"]]}
        return d


@dataclass(frozen=True)
class Candidate:
    """One candidate notch: where it meets the edge, the inward normal and the root position (µm)."""

    index: int
    edge_x: float
    edge_y: float
    normal_x: float
    normal_y: float
    root_x: float
    root_y: float


# ---------------------------------------------------------------------------------------------
# geometry


def peterson_kt(depth_um, root_radius_um, opening_deg=0.0) -> np.ndarray | float:
    """Elastic stress concentration factor of an edge notch in a semi-infinite plate.

    Parameters
    ----------
    depth_um, root_radius_um
        Notch depth t and root radius r, µm (any common length unit: only t/r enters).
    opening_deg
        V-notch opening angle, degrees (0: U notch).

    Returns
    -------
    float or ndarray
        K_t = 0.855 + 2.21 √(t/r) (Peterson's chart fit, Pilkey & Pilkey 2008, from memory;
        fitted for 1 ≤ t/r ≤ 361, used outside that range with a warning in the notes of a plan),
        unchanged for opening angles ≤ 90° and falling linearly to 1 at 180°.

    Examples
    --------
    >>> round(float(peterson_kt(50.0, 10.0)), 3)
    5.797
    """
    t = np.asarray(depth_um, dtype=float)
    r = np.asarray(root_radius_um, dtype=float)
    a = np.asarray(opening_deg, dtype=float)
    if np.any(~np.isfinite(t)) or np.any(t <= 0):
        raise ParameterError(f"depth_um should be > 0; got {depth_um!r}")
    if np.any(~np.isfinite(r)) or np.any(r <= 0):
        raise ParameterError(f"root_radius_um should be > 0; got {root_radius_um!r}")
    if np.any(~np.isfinite(a)) or np.any((a < 0) | (a > 180)):
        raise ParameterError(f"opening_deg should lie in [0, 180]; got {opening_deg!r}")
    ku = 0.855 + 2.21 * np.sqrt(t / r)
    frac = np.clip((180.0 - a) / 90.0, 0.0, 1.0)
    k = 1.0 + (ku - 1.0) * frac
    return float(k) if k.ndim == 0 else k


def notch_stress_factor(kt: float, depth_um: float, crack_um) -> np.ndarray | float:
    """Stress magnification felt by a crack of length ``a`` grown from a notch root.

    k(a) = min(K_t, √((t + a)/a)): the short-crack limit (the crack inside the notch field sees
    K_t σ) and the long-crack limit (a crack of length t + a under σ), the smaller of the two
    (Dowling 1979; Smith & Miller 1978).
    """
    a = np.asarray(crack_um, dtype=float)
    if np.any(a <= 0):
        raise ParameterError(f"crack_um should be > 0; got {crack_um!r}")
    k = np.minimum(float(kt), np.sqrt((float(depth_um) + a) / a))
    return float(k) if k.ndim == 0 else k


def edge_of_map(omap, side: str) -> np.ndarray:
    """The edge of the map's point grid on one side, as a two-point polyline in µm."""
    side = str(side).lower()
    if side not in SIDES:
        raise ParameterError(f"side should be one of {', '.join(SIDES)}; got {side!r}")
    x0, x1, y0, y1 = omap.extent
    return {
        "left": np.array([[x0, y0], [x0, y1]]),
        "right": np.array([[x1, y0], [x1, y1]]),
        "top": np.array([[x0, y0], [x1, y0]]),
        "bottom": np.array([[x0, y1], [x1, y1]]),
    }[side]


def _as_edge(gg, edge) -> np.ndarray:
    if isinstance(edge, str):
        return edge_of_map(gg.omap, edge)
    e = np.asarray(edge, dtype=float)
    if e.ndim != 2 or e.shape[1] != 2 or e.shape[0] < 2 or not np.all(np.isfinite(e)):
        raise ParameterError(f"edge should be two or more (x, y) points in µm or a side name; got {edge!r}")
    seg = np.linalg.norm(np.diff(e, axis=0), axis=1)
    if np.any(seg <= 0):
        raise ParameterError("edge should not repeat a point (zero-length segment)")
    return e


def candidate_positions(gg, edge, spacing_um: float, notch: NotchShape) -> list[Candidate]:
    """Candidate notch positions every ``spacing_um`` along ``edge``, with their roots.

    The notch runs along the edge normal that points into the map (towards more indexed points
    within one notch depth); its root is ``depth_um`` along it.

    Raises
    ------
    ParameterError
        For a spacing ≤ 0, an edge that lies outside the map, or a notch deeper than the map.
    """
    spacing = check_positive(spacing_um, "spacing_um")
    e = _as_edge(gg, edge)
    om = gg.omap
    x0, x1, y0, y1 = om.extent
    tol = 0.5 * om.step + 1e-9
    outside = (e[:, 0] < x0 - tol) | (e[:, 0] > x1 + tol) | (e[:, 1] < y0 - tol) | (e[:, 1] > y1 + tol)
    if np.any(outside):
        raise ParameterError(
            f"edge point(s) {e[outside].round(2).tolist()} µm lie outside the map "
            f"(x {x0:g}..{x1:g}, y {y0:g}..{y1:g} µm); give an edge on or inside the map"
        )
    seg = np.diff(e, axis=0)
    seg_len = np.linalg.norm(seg, axis=1)
    cum = np.concatenate([[0.0], np.cumsum(seg_len)])
    total = cum[-1]
    if spacing > total:
        s = np.array([0.5 * total])
    else:
        n = math.floor(total / spacing + 1e-9)
        s = (np.arange(n + 1) * spacing) + 0.5 * (total - n * spacing)
    k = np.clip(np.searchsorted(cum, s, side="right") - 1, 0, len(seg) - 1)
    t = (s - cum[k]) / seg_len[k]
    pts = e[k] + t[:, None] * seg[k]
    tangent = seg[k] / seg_len[k][:, None]
    normal = np.stack([-tangent[:, 1], tangent[:, 0]], axis=1)
    depth = notch.depth_um
    # The inward sense: the side with more indexed points half a depth in.
    probe = np.array([0.5, 1.0]) * depth
    score = np.zeros(len(pts))
    for p in probe:
        for sgn in (1.0, -1.0):
            q = pts + sgn * p * normal
            score += sgn * (gg.grain_at(q[:, 0], q[:, 1]) >= 0)
    normal = np.where((score >= 0)[:, None], normal, -normal)
    roots = pts + depth * normal
    i, _ = om.index_of(roots[:, 0], roots[:, 1])
    if np.all(i < 0):
        raise ParameterError(
            f"notch depth {depth:g} µm puts every root outside the map; the notch is deeper than the map "
            "across this edge — use a shallower notch or another edge"
        )
    keep = i >= 0
    return [
        Candidate(int(c), float(p[0]), float(p[1]), float(nn[0]), float(nn[1]), float(r[0]), float(r[1]))
        for c, (p, nn, r) in enumerate(zip(pts[keep], normal[keep], roots[keep], strict=True))
    ]


def notch_mask(omap, edge_xy, normal, notch: NotchShape) -> np.ndarray:
    """Map points inside a notch cut from ``edge_xy`` along the inward unit ``normal``.

    The notch is a slot of half-width ``r + (t − r − s)·tan(α/2)`` at depth ``s`` (a U notch for
    α = 0) ending in a semicircle of radius ``r`` whose far point is the root, ``t`` deep.

    Returns
    -------
    (ny, nx) bool ndarray
    """
    x, y = omap.coordinates()
    n = np.asarray(normal, dtype=float)
    tvec = np.array([-n[1], n[0]])
    dx, dy = x - edge_xy[0], y - edge_xy[1]
    s = dx * n[0] + dy * n[1]
    w = dx * tvec[0] + dy * tvec[1]
    t, r = notch.depth_um, notch.root_radius_um
    half = r + np.clip(t - r - s, 0.0, None) * math.tan(math.radians(0.5 * notch.opening_deg))
    slot = (s >= -omap.step) & (s <= t - r) & (np.abs(w) <= half)
    cx, cy = edge_xy[0] + (t - r) * n[0], edge_xy[1] + (t - r) * n[1]
    return slot | ((x - cx) ** 2 + (y - cy) ** 2 <= r * r)


def _padded_for_edge(omap, normal):
    """The map with a compliant margin (a fifth of its size) outside the notched side.

    In the periodic cell of the spectral solver the map edge is not a free surface; an unindexed
    (compliant) margin beyond the notched edge makes it one, so the slot is an edge notch.
    """
    from dataclasses import replace as dc_replace

    ny, nx = omap.shape
    n = np.asarray(normal, dtype=float)
    if abs(n[1]) >= abs(n[0]):
        pad = max(2, ny // 5)
        pad += pad % 2  # keep row 0 an unshifted row on hex grids
        widths = ((pad, 0), (0, 0)) if n[1] > 0 else ((0, pad), (0, 0))
        shift = (0.0, -pad * omap.row_spacing if n[1] > 0 else 0.0)
    else:
        pad = max(2, nx // 5)
        widths = ((0, 0), (pad, 0)) if n[0] > 0 else ((0, 0), (0, pad))
        shift = (-pad * omap.step if n[0] > 0 else 0.0, 0.0)
    q = np.pad(omap.quats, (*widths, (0, 0)), constant_values=np.nan)
    return dc_replace(
        omap, quats=q, phase=np.pad(omap.phase, widths, constant_values=-1),
        quality=np.pad(omap.quality, widths), indexed=np.pad(omap.indexed, widths),
        origin=(omap.origin[0] + shift[0], omap.origin[1] + shift[1]), meta=dict(omap.meta))


def full_field_kt(gg, cand: Candidate, s: PlanSettings) -> float:
    """K_t at a candidate root from a full-field elastic solve with the notch cut into the map.

    The map gets a compliant margin beyond the notched edge (a free surface, see
    :func:`_padded_for_edge`) and the notch points become compliant; the solve
    (:func:`slipnet.stress.solve_elastic`, generalized plane strain, periodic cell, columnar grains)
    runs at the nominal stress along the load axis, and K_t is the largest load-axis normal stress
    over the applied one within one root radius (plus a step) of the root. Only valid for a
    notch from a map side (normal along x or y); any other edge is refused.
    """
    from .stress import solve_elastic, stress_concentration

    n = np.array([cand.normal_x, cand.normal_y])
    if min(abs(n[0]), abs(n[1])) > 1e-6:
        raise ParameterError("concentration='full_field' needs a notch from a map side (normal along x or y); "
                             "use concentration='peterson' for an oblique edge")
    om = _padded_for_edge(gg.omap, n)
    om = om.select(~notch_mask(om, (cand.edge_x, cand.edge_y), n, s.notch))
    field = solve_elastic(om, s.load_axis, stress=s.stress_amplitude, tol=1e-5, unindexed="compliant")
    res = stress_concentration(field, cand.root_x, cand.root_y, s.notch.root_radius_um + om.step)
    return float(res["concentration"])


# ---------------------------------------------------------------------------------------------
# one candidate


def _perturb_axis(axis: np.ndarray, sigma_deg: float, rng: np.random.Generator) -> np.ndarray:
    a = rng.normal(size=3)
    ang = math.radians(rng.normal(0.0, sigma_deg)) if sigma_deg > 0 else 0.0
    a -= (a @ axis) * axis
    na = np.linalg.norm(a)
    if ang == 0.0 or na < 1e-12:
        return axis.copy()
    a /= na
    out = axis * math.cos(ang) + np.cross(a, axis) * math.sin(ang)
    return out / np.linalg.norm(out)


def _start_point(gg, root: np.ndarray, normal: np.ndarray) -> np.ndarray | None:
    """The first point on a grain (not on unindexed ground) going inwards from the root."""
    step = 0.5 * gg.omap.step
    d = np.arange(0, 40) * step
    pts = root[None, :] + d[:, None] * normal[None, :]
    lab = gg.grain_at(pts[:, 0], pts[:, 1])
    hit = np.flatnonzero(lab >= 0)
    return None if hit.size == 0 else pts[hit[0]]


def _objectives(gg, root, normal, load, s: PlanSettings, systems, kt: float, quats=None,
                all_sizes: bool = True) -> dict:
    """Nominal objectives of one notch root (one forecast, one growth run per crack size)."""
    from .forecast import forecast_crack
    from .growth import simulate_growth
    from .slip import effective_schmid, schmid_factors

    out: dict = {"valid": False, "reason": ""}
    tip = _start_point(gg, root, normal)
    if tip is None:
        out["reason"] = "no grain at the notch root"
        return out
    g = gg if quats is None else replace(gg, mean_quats=quats)
    near = gg.grains_within(tip[0], tip[1], s.notch.root_radius_um) or [gg.grain_at(tip[0], tip[1])]
    mq = np.asarray(g.mean_quats)[np.asarray(near)]
    m_eff = effective_schmid(schmid_factors(mq, load, systems), systems)
    best = int(np.argmax(m_eff.max(axis=1)))
    out["root_grain"] = int(near[best])
    out["root_grains"] = " ".join(str(v) for v in near)
    out["root_schmid"] = float(m_eff.max())
    out["initiation_drive"] = float(m_eff.max()) * kt
    try:
        fc = forecast_crack(g, tip, normal, load, horizon=s.window_um, stress_amplitude=s.stress_amplitude,
                            stress_ratio=s.stress_ratio, systems=systems, samples=0)
    except SlipnetError as err:
        out["reason"] = f"forecast failed: {err}"
        return out
    bar = fc.barriers
    on = bar[bar["on_path"].astype(bool) & (bar["distance_um"] <= s.window_um)] if len(bar) else bar
    strength = (on["score"] / on["relevance"].clip(lower=1e-12)).clip(upper=1.0) if len(on) else pd.Series([])
    out["barriers_in_window"] = len(on)
    out["barrier_strength_in_window"] = float(strength.sum()) if len(on) else 0.0
    strong = on["distance_um"][strength.to_numpy() >= s.strong_barrier] if len(on) else pd.Series([])
    out["first_barrier_um"] = float(strong.min()) if len(strong) else math.inf
    out["path_length_um"] = fc.length_um
    out["stop_reason"] = fc.stop_reason
    if s.target:
        out["target_offset_um"] = _target_offset(fc, s.target)
    # growth from each initial crack size, at the notch-magnified amplitude
    kw = dict(s.growth)
    from .growth import GrowthParameters

    sigma_f = float(kw.get("friction_stress", GrowthParameters().friction_stress))
    k = notch_stress_factor(kt, s.notch.depth_um, 0.5 * s.window_um)
    amp = min(s.stress_amplitude * k, 0.95 * sigma_f)
    out["effective_amplitude_mpa"] = amp
    length = fc.length_um
    arrested = False
    sizes = s.crack_sizes_um if all_sizes else s.crack_sizes_um[:1]
    for j, a0 in enumerate(sizes):
        key = f"log10_cycles_a{a0:g}"
        if length <= a0:
            out[key] = math.nan
            continue
        try:
            res = simulate_growth(fc, amp, initial_length=a0, final_length=min(s.window_um, length), n_points=300,
                                  samples=0, **kw)
        except SlipnetError as err:
            out["reason"] = f"growth failed: {err}"
            out[key] = math.nan
            continue
        cyc = float(res.profile["cycles"].iloc[-1])
        out[key] = math.log10(cyc) if math.isfinite(cyc) and cyc > 0 else math.inf
        if j == 0:
            arrested = math.isfinite(res.arrest_length_um)
            out["arrest_length_um"] = res.arrest_length_um
    out["log10_cycles_to_window"] = out.get(f"log10_cycles_a{s.crack_sizes_um[0]:g}", math.nan)
    out["arrest_probability"] = float(arrested)
    out["valid"] = True
    return out


def _target_offset(fc, target: Mapping) -> float:
    d = target["distance_um"]
    cr = fc.crossings
    if len(cr) == 0:
        return math.inf
    main = cr[cr["branch"] == 0] if "branch" in cr else cr
    if "boundary" in target:
        a, b = (int(v) for v in target["boundary"])
        ga, gb = main["grain_a"], main["grain_b"]
        hit = main[((ga == a) & (gb == b)) | ((ga == b) & (gb == a))]
    else:
        hit = main[main["grain_b"] == int(target["grain"])]
    if len(hit) == 0:
        path = fc.path
        if "grain" in target and len(path) and int(path["grain"].iloc[0]) == int(target["grain"]):
            return abs(0.0 - d)
        return math.inf
    return float(abs(hit["distance_um"].min() - d))


def evaluate_candidate(gg, cand: Candidate, s: PlanSettings, systems=None, *, sample_seed=None) -> dict:
    """Objectives of one candidate: nominal values, and Monte Carlo bands when ``s.samples > 0``.

    Parameters
    ----------
    gg
        The grain graph.
    cand
        The candidate.
    s
        The plan settings.
    systems
        Slip systems (default: those of the map's first phase).
    sample_seed
        Entropy for this candidate's samples (default derived from ``s.seed`` and the index), so
        results do not depend on the order or place in which candidates are evaluated.

    Returns
    -------
    dict
        One table row: candidate geometry, ``kt``, each objective, and with samples
        ``<objective>_p05`` / ``_p50`` / ``_p95`` plus ``arrest_probability`` from the samples;
        ``sample_scores`` (a list, used to rank per sample) is removed by :func:`plan_notch`.
    """
    from .slip import slip_systems

    if systems is None:
        systems = slip_systems(gg.omap.phases[0].structure)
    kt_chart = float(peterson_kt(s.notch.depth_um, s.notch.root_radius_um, s.notch.opening_deg))
    kt = full_field_kt(gg, cand, s) if s.concentration == "full_field" else kt_chart
    root = np.array([cand.root_x, cand.root_y])
    normal = np.array([cand.normal_x, cand.normal_y])
    load = np.asarray(s.load_axis, dtype=float)
    row = {"candidate": cand.index, "x": cand.root_x, "y": cand.root_y, "edge_x": cand.edge_x,
           "edge_y": cand.edge_y, "normal_x": cand.normal_x, "normal_y": cand.normal_y, "kt": kt,
           "kt_chart": kt_chart}
    row.update(_objectives(gg, root, normal, load, s, systems, kt))
    row["samples"] = []
    if s.samples and row["valid"]:
        from .forecast_mc import perturb_quats

        ss = np.random.SeedSequence([int(s.seed), int(cand.index)] if sample_seed is None else sample_seed)
        rng = np.random.default_rng(ss)
        tangent = np.array([-normal[1], normal[0]])
        base_q = np.asarray(gg.mean_quats)
        for _ in range(s.samples):
            q = perturb_quats(base_q, s.orientation_noise_deg, rng)
            ld = _perturb_axis(load, s.load_misalignment_deg, rng)
            dr = rng.normal(0.0, s.position_error_um, size=2) if s.position_error_um > 0 else np.zeros(2)
            r = root + dr[0] * tangent + dr[1] * normal
            row["samples"].append(_objectives(gg, r, normal, ld, s, systems, kt, quats=q, all_sizes=False))
        samp = pd.DataFrame(row["samples"])
        ok = samp[samp["valid"]] if len(samp) else samp
        for name in OBJECTIVES:
            if name in ok and name != "arrest_probability":
                v = ok[name].to_numpy(dtype=float)
                v = v[~np.isnan(v)]
                if v.size:
                    # order statistics, not interpolation: a sample may be inf ("never reached")
                    q = np.quantile(v, [0.05, 0.5, 0.95], method="inverted_cdf")
                    row[f"{name}_p05"], row[f"{name}_p50"], row[f"{name}_p95"] = (float(x) for x in q)
        if len(ok):
            row["arrest_probability"] = float(ok["arrest_probability"].mean())
        row["valid_samples"] = len(ok)
    return row


# ---------------------------------------------------------------------------------------------
# ranking


def _normalised(table: pd.DataFrame, weights: Mapping[str, float]) -> pd.DataFrame:
    """Each weighted objective mapped to [0, 1], 1 = best in the direction its weight's sign asks for."""
    out = pd.DataFrame(index=table.index)
    for name, w in weights.items():
        if w == 0 or name not in table:
            continue
        v = table[name].to_numpy(dtype=float).copy()
        finite = np.isfinite(v)
        if finite.any():
            lo, hi = v[finite].min(), v[finite].max()
            # inf means "never reached": the worst value in the larger-is-better sense of a distance
            v = np.where(np.isposinf(v), hi + (hi - lo if hi > lo else 1.0), v)
            v = np.where(np.isneginf(v) | np.isnan(v), lo - (hi - lo if hi > lo else 1.0), v)
            lo, hi = v.min(), v.max()
            z = (v - lo) / (hi - lo) if hi > lo else np.full(v.shape, 0.5)
        else:
            z = np.full(v.shape, 0.5)
        out[name] = z if w > 0 else 1.0 - z
    return out


def pareto_ranks(values: np.ndarray, larger_better: Sequence[bool]) -> np.ndarray:
    """Non-dominated sorting: rank 1 for the Pareto set, 2 for the next front, and so on.

    Parameters
    ----------
    values : (n, k) ndarray
        Objective values (NaN counts as worst).
    larger_better : k booleans
        Direction of each objective.

    Returns
    -------
    (n,) int ndarray

    Notes
    -----
    O(k·n²) comparisons, vectorised; fine for the hundreds of candidates of a plan.
    """
    v = np.asarray(values, dtype=float).copy()
    if v.ndim != 2:
        raise ParameterError(f"values should be a (n, k) array; got shape {v.shape}")
    sign = np.where(np.asarray(larger_better, dtype=bool), 1.0, -1.0)
    v = v * sign
    v = np.where(np.isnan(v), -np.inf, v)
    ge = np.all(v[:, None, :] >= v[None, :, :], axis=2)
    gt = np.any(v[:, None, :] > v[None, :, :], axis=2)
    dominates = ge & gt  # [i, j]: i dominates j
    ranks = np.zeros(len(v), dtype=int)
    left = np.ones(len(v), dtype=bool)
    r = 0
    while left.any():
        r += 1
        dominated = (dominates[left][:, left]).any(axis=0)
        front = np.flatnonzero(left)[~dominated]
        ranks[front] = r
        left[front] = False
    return ranks


def rank_candidates(table: pd.DataFrame, weights: Mapping[str, float], *, method: str = "weighted") -> pd.DataFrame:
    """Add ``score``, the ``term_<objective>`` columns and ``rank`` (1 = best) to a candidate table.

    ``method="weighted"``: score = Σ |w| · normalised objective / Σ |w| (each objective mapped to
    [0, 1] over the candidates, 1 = best). ``method="pareto"``: ``rank`` is the Pareto front number
    (ties share a rank) and ``score`` the weighted score, used to order within a front.
    """
    if method not in ("weighted", "pareto"):
        raise ParameterError(f"method should be 'weighted' or 'pareto'; got {method!r}")
    t = table.copy()
    valid = t["valid"].to_numpy(dtype=bool) if "valid" in t else np.ones(len(t), bool)
    z = _normalised(t[valid], weights)
    wsum = sum(abs(w) for n, w in weights.items() if n in z)
    t["score"] = np.nan
    for name in z:
        t[f"term_{name}"] = np.nan
        t.loc[valid, f"term_{name}"] = z[name].to_numpy()
        t.loc[valid, "score"] = t.loc[valid, "score"].fillna(0.0) + abs(weights[name]) * z[name].to_numpy() / wsum
        t[f"weight_{name}"] = weights[name]
    if method == "weighted":
        order = t["score"].rank(ascending=False, method="min", na_option="bottom")
        t["rank"] = order.astype(int)
    else:
        names = [n for n in weights if n in t and weights[n] != 0]
        ranks = np.full(len(t), len(t) + 1)
        if valid.any():
            ranks[valid] = pareto_ranks(t.loc[valid, names].to_numpy(dtype=float), [weights[n] > 0 for n in names])
        t["pareto_front"] = ranks
        t["rank"] = ranks
    return t.sort_values(["rank", "score"], ascending=[True, False], kind="stable").reset_index(drop=True)


def _sample_top_probability(rows: list[dict], weights: Mapping[str, float], top_k: int) -> np.ndarray:
    """Share of Monte Carlo samples in which each candidate ranks within the top k."""
    n_s = min((len(r["samples"]) for r in rows), default=0)
    hits = np.zeros(len(rows))
    if n_s == 0:
        return np.full(len(rows), np.nan)
    for k in range(n_s):
        t = pd.DataFrame([r["samples"][k] for r in rows])
        if "valid" not in t or not t["valid"].any():
            continue
        ranked = rank_candidates(t.assign(_i=np.arange(len(rows))), weights)
        best = ranked.loc[ranked["rank"] <= top_k, "_i"].to_numpy(dtype=int)
        hits[best] += 1
    return hits / n_s


# ---------------------------------------------------------------------------------------------
# public entry


def plan_notch(
    grain_graph,
    edge,
    load_axis=(1.0, 0.0, 0.0),
    *,
    spacing_um: float = 20.0,
    stress_amplitude: float = 200.0,
    stress_ratio: float = -1.0,
    depth_um: float = 50.0,
    root_radius_um: float = 10.0,
    opening_deg: float = 0.0,
    window_um: float = 200.0,
    crack_sizes_um: Sequence[float] = (5.0, 20.0),
    objectives: Mapping[str, float] | None = None,
    method: str = "weighted",
    target: Mapping | None = None,
    strong_barrier: float = 0.5,
    samples: int = 0,
    orientation_noise_deg: float = 1.5,
    load_misalignment_deg: float = 2.0,
    position_error_um: float = 5.0,
    top_k: int = 3,
    seed: int = 0,
    systems=None,
    growth: Mapping | None = None,
    concentration: str = "peterson",
    scheduler: str = "synchronous",
    workers: int | None = None,
    progress: bool = False,
) -> pd.DataFrame:
    """Rank candidate notch positions along a specimen edge.

    Parameters
    ----------
    grain_graph : GrainGraph
        From :func:`slipnet.grains.build_grain_graph`.
    edge : (k, 2) array_like or str
        The specimen edge as two or more (x, y) points in µm, or a map side
        (``"left"``, ``"right"``, ``"top"``, ``"bottom"``).
    load_axis : (3,) array_like
        Uniaxial load axis in the map frame.
    spacing_um
        Distance between candidates along the edge, µm.
    stress_amplitude, stress_ratio
        Nominal stress amplitude (MPa) and R.
    depth_um, root_radius_um, opening_deg
        Notch shape (:class:`NotchShape`).
    window_um
        Observation window along the crack path, µm.
    crack_sizes_um
        Initial crack sizes, µm.
    objectives
        Objective → weight (see the module docstring); default
        ``{"initiation_drive": 1, "barrier_strength_in_window": 1}``.
    method
        ``"weighted"`` or ``"pareto"``.
    target
        For ``target_offset_um``: ``{"boundary": (a, b), "distance_um": d}`` or
        ``{"grain": g, "distance_um": d}``.
    strong_barrier
        Intrinsic barrier strength that counts as strong.
    samples, orientation_noise_deg, load_misalignment_deg, position_error_um, top_k, seed
        Monte Carlo per candidate; with samples the table gains ``*_p05/_p50/_p95`` bands,
        ``arrest_probability`` from the samples and ``p_top_k`` (share of samples in which the
        candidate ranks in the top ``top_k``).
    systems
        Slip systems (default: those of the map's first phase).
    growth
        Extra keyword arguments of :func:`slipnet.growth.simulate_growth`.
    concentration
        ``"peterson"`` (chart fit, default) or ``"full_field"``: K_t from an anisotropic elastic
        solve of the map with each candidate's notch cut in (:func:`full_field_kt`; one solve per
        candidate, seconds each). ``kt_chart`` always holds the chart value for comparison.
    scheduler, workers, progress
        Dask scheduler for the sweep: ``"synchronous"`` (default), ``"threads"``,
        ``"processes"`` or the address of a running ``dask.distributed`` scheduler
        (``"tcp://host:port"``); number of local workers; show a progress bar.
        The same seed gives the same table on every scheduler.

    Returns
    -------
    DataFrame
        One row per candidate, best first: ``x``, ``y`` (notch root, µm), ``rank``, ``score``,
        each objective's column, ``term_*`` / ``weight_*`` columns, ``kt``, the edge point and
        normal, the root grains, ``valid`` and ``reason``. ``attrs["settings"]`` holds the inputs.

    Examples
    --------
    >>> from slipnet.synthetic import make_specimen
    >>> from slipnet.grains import build_grain_graph
    >>> spec = make_specimen((60, 80), 2.0, grain_size_um=30.0, seed=1)
    >>> gg = build_grain_graph(spec.omap)
    >>> plan = plan_notch(gg, "left", (1, 0, 0), spacing_um=30.0, depth_um=10.0, root_radius_um=5.0,
    ...                   window_um=60.0, crack_sizes_um=(5.0,))
    >>> list(plan.columns[:4])
    ['x', 'y', 'rank', 'score']
    """
    from .notch_sweep import run_sweep

    s = PlanSettings(
        load_axis=tuple(np.asarray(load_axis, dtype=float).ravel()),
        stress_amplitude=stress_amplitude,
        stress_ratio=stress_ratio,
        notch=NotchShape(depth_um, root_radius_um, opening_deg),
        window_um=window_um,
        crack_sizes_um=tuple(np.atleast_1d(crack_sizes_um)),
        strong_barrier=strong_barrier,
        weights=dict(DEFAULT_WEIGHTS if objectives is None else objectives),
        target=target,
        samples=samples,
        orientation_noise_deg=orientation_noise_deg,
        load_misalignment_deg=load_misalignment_deg,
        position_error_um=position_error_um,
        seed=seed,
        growth=dict(growth or {}),
        concentration=concentration,
    )
    if int(top_k) < 1:
        raise ParameterError(f"top_k should be >= 1; got {top_k!r}")
    if method not in ("weighted", "pareto"):
        raise ParameterError(f"method should be 'weighted' or 'pareto'; got {method!r}")
    cands = candidate_positions(grain_graph, edge, spacing_um, s.notch)
    rows = run_sweep(grain_graph, cands, s, systems=systems, scheduler=scheduler, workers=workers,
                     progress=progress)
    return finish_plan(rows, s, method=method, top_k=top_k)


def finish_plan(rows: list[dict], s: PlanSettings, *, method: str = "weighted", top_k: int = 3) -> pd.DataFrame:
    """Rank evaluated candidate rows (from :func:`evaluate_candidate`) into the plan table."""
    p_top = _sample_top_probability(rows, s.weights, int(top_k)) if s.samples else None
    table = pd.DataFrame([{k: v for k, v in r.items() if k != "samples"} for r in rows])
    if p_top is not None:
        table["p_top_k"] = p_top
    ranked = rank_candidates(table, s.weights, method=method)
    front = ["x", "y", "rank", "score"]
    ranked = ranked[front + [c for c in ranked.columns if c not in front]]
    notes = []
    ratio = s.notch.depth_um / s.notch.root_radius_um
    if not 1.0 <= ratio <= 361.0:
        notes.append(f"depth/root radius = {ratio:g} lies outside the 1–361 range of the K_t chart fit")
    if s.concentration == "full_field":
        notes.append("K_t from full-field solves: linear anisotropic elasticity, grains as columns through the "
                     "thickness, periodic cell with a compliant margin beyond the notched edge (a free surface)")
    load = np.asarray(s.load_axis)
    inplane = math.hypot(load[0], load[1])
    if len(table) and inplane > 1e-9:
        cos = np.abs(table["normal_x"] * load[0] + table["normal_y"] * load[1]) / inplane
        if np.any(cos > math.cos(math.radians(45.0))):
            notes.append("some notches run within 45° of the in-plane load axis: they would not open in mode I; "
                         "notch an edge across the load")
    ranked.attrs["settings"] = {**s.as_dict(), "method": method, "top_k": int(top_k), "notes": notes}
    return ranked

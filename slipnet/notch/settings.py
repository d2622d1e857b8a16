"""What a notch plan needs and what it gives: objectives, settings, candidates, the plan."""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from slipnet._checks import check_positive, check_range, check_vector
from slipnet.errors import ParameterError
from slipnet.maps.notch import NotchShape

__all__ = ["CONCENTRATION_METHODS", "DEFAULT_WEIGHTS", "OBJECTIVES", "Candidate", "NotchPlan", "PlanSettings"]


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


#: How K_t at each candidate's root is found: the Peterson-type chart fit, or a full-field
#: anisotropic elastic solve of the map with that notch cut into it (slow: one solve each).
CONCENTRATION_METHODS = ("peterson", "full_field")


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


@dataclass(frozen=True, eq=False)
class NotchPlan:
    """A ranked notch plan.

    Attributes
    ----------
    table : DataFrame
        One row per candidate, best first: ``root_x_um``, ``root_y_um`` (notch root), ``rank``, ``plan_score``, each
        objective's column, ``term_*`` / ``weight_*`` columns, ``kt``, the edge point and normal,
        the root grains, ``valid`` and ``reason``.
    settings : PlanSettings
        The inputs of the plan.
    method : str
        ``"weighted"`` or ``"pareto"``.
    top_k : int
        The k of ``p_top_k``.
    notes : tuple of str
        Warnings about the plan (chart range, notches that would not open in mode I...).
    source : dict
        Where the plan came from (study file, map), when known.
    """

    table: pd.DataFrame
    settings: PlanSettings
    method: str = "weighted"
    top_k: int = 3
    notes: tuple[str, ...] = ()
    source: dict = field(default_factory=dict)

    def best(self, k: int = 1) -> pd.DataFrame:
        """The ``k`` best valid candidates."""
        t = self.table
        ok = t[t["valid"].astype(bool)] if "valid" in t else t
        return ok.head(int(k))

    def as_dict(self) -> dict:
        """Every input and note, JSON-safe."""
        return {**self.settings.as_dict(), "method": self.method, "top_k": int(self.top_k),
                "notes": list(self.notes), **self.source}

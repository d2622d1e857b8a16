"""The containers of a crack forecast: score weights, Monte Carlo noise and the result."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

__all__ = ["CLASS_FACTORS", "BarrierWeights", "CrackForecast", "MonteCarloNoise", "PathWeights"]


#: Barrier factor of each boundary class (0 no barrier … 1 full high-angle barrier).
#: Sub-grain and low-angle boundaries let slip and cracks through almost unchanged (common
#: practice; Zhai et al. 2000 saw cracks cross low-misorientation boundaries without arrest);
#: coherent Σ3 twins transmit slip on the shared {111}/{112} plane family more easily than a
#: general boundary (common practice), other CSL boundaries sit in between (common practice).
CLASS_FACTORS: dict[str, float] = {
    "subgrain": 0.1,
    "low_angle": 0.3,
    "sigma3": 0.6,
    "csl": 0.8,
    "high_angle": 1.0,
}


@dataclass(frozen=True)
class PathWeights:
    """Weights of the outgoing-plane choice score at a boundary.

    ``score = (w_s·min(m_eff/0.5, 1) + w_m·|m′| + w_α·(1 − α/90°) + w_β·(1 − β/90°)) / Σw``,
    in [0, 1]; m_eff is the outgoing plane's best effective Schmid factor, |m′| is between the
    incoming system and that best system, α and β the crack-plane twist and tilt.

    Notes
    -----
    Defaults: the driving force (Schmid) and the twist carry equal weight, because Zhai et al.
    (2000) found the twist angle to govern whether and where a stage-I crack crosses; the tilt
    is "a minor factor" in the same work (weight 0.25); |m′| (Luster & Morris 1995) adds slip
    continuity at half weight, since the crack plane need not be the transmitted slip plane.
    """

    schmid: float = 1.0
    m_prime: float = 0.5
    twist: float = 1.0
    tilt: float = 0.25


@dataclass(frozen=True)
class BarrierWeights:
    """Weights of the barrier resistance score.

    ``score = relevance · (w_α·α/90° + w_T·(1 − |m′|) + w_c·class_factor + w_Δ·Δm_eff/0.5) / Σw``
    with ``relevance = exp(−distance / decay_length)``.

    Notes
    -----
    Defaults: twist and 1 − transmission weigh 1 each (twist: Zhai et al. 2000, the main
    resistance to crack crossing; transmission: slip blocked at a boundary holds the plastic
    zone back, Navarro & de los Rios 1988), the boundary class 0.5 (it repeats part of the
    twist/m′ information: a low-angle boundary has small twist and high m′ anyway) and the drop
    of effective Schmid factor 0.5 (a less favourably oriented next grain slows the crack,
    Tanaka et al. 1986; common practice).
    """

    twist: float = 1.0
    transmission: float = 1.0
    boundary_class: float = 0.5
    schmid_drop: float = 0.5


@dataclass(frozen=True)
class MonteCarloNoise:
    """Standard deviations of the Monte Carlo perturbations.

    Attributes
    ----------
    orientation_deg
        Rotation angle (normal, random axis) applied to every grain mean orientation; 1–2° is
        the usual angular precision of an orientation map (common practice).
    load_deg
        Misalignment of the load axis (normal angle about a random perpendicular axis).
    tip_um
        Gaussian jitter of each tip coordinate, µm.
    weights
        Log-normal relative jitter of every path-choice and resistance weight.
    fitted_weights
        Draw one bootstrap replicate of the fitted weights per sample (the fit's own uncertainty);
        False keeps the fitted weights.
    resolve_stress
        Solve the elastic field again for every sample's orientations and load (elastic and cyclic
        modes; one solve per sample). False (default) keeps the nominal solve and resolves its stress on
        the perturbed orientations: a rotation of 1–2° changes the resolved shear far more than the
        stress, and the load misalignment then moves the path passes only.
    """

    orientation_deg: float = 1.5
    load_deg: float = 2.0
    tip_um: float = 1.0
    weights: float = 0.2
    fitted_weights: bool = True
    resolve_stress: bool = False


@dataclass(frozen=True, eq=False)
class CrackForecast:
    """Result of :func:`forecast_crack`.

    Columns of every table: :mod:`slipnet.columns`.

    Attributes
    ----------
    path : DataFrame
        Main path, one row per straight segment: ``grain``, ``x0_um``, ``y0_um``, ``x1_um``,
        ``y1_um``,
        ``length_um``, ``s_start_um`` (distance along the path from the tip), ``system`` (index
        into the catalogue, −1 in stage II), ``plane`` (Miller label), ``effective_schmid``
        (of that system in that grain), ``stage`` ("I"/"II"), ``direction_deg`` (from +x
        towards +y), ``leg`` ("trace"/"zigzag"/"stage2"), ``end`` (what stopped the segment).
    crossings : DataFrame
        One row per boundary crossing of the main path and of the alternatives (``branch``):
        ``boundary_id``, ``grain_a`` (from), ``grain_b`` (into), ``x_um``, ``y_um``,
        ``distance_um``, ``twist_deg``, ``tilt_deg``, ``m_prime``, ``schmid_in``, ``schmid_out``,
        the choice-score terms ``choice_*`` and ``choice_score``, ``n_close`` (other planes within
        the branch tolerance).
    barriers : DataFrame
        Ranked boundaries (``rank`` 1 = strongest): ``boundary_id``, ``grain_a``, ``grain_b``,
        ``barrier_score``, ``twist_deg``, ``tilt_deg``, ``m_prime``, ``distance_um``, ``on_path``, the
        terms ``term_*``, the weights ``weight_*``, ``relevance``, ``boundary_class``, ``branches``,
        and with Monte Carlo ``p_on_path``, ``p_top_k``.
    sites : DataFrame
        Ranked localisation sites: ``rank``, ``x_um``, ``y_um``, ``site_score_mpa_um``,
        ``grain``,
        ``blocking_grain``, ``boundary_id``, ``system``, ``plane``, ``resolved_shear_mpa``,
        ``band_length_um``, ``transmission_score``; with Monte Carlo ``p_present``, ``p_top_k``.
    alternatives : DataFrame
        Segments of the alternative paths (same columns as ``path`` plus ``branch`` ≥ 1).
    field : (ny, nx) ndarray or None
        Predicted localisation probability on the map grid. It is computed on the window of points
        within the horizon (plus the barrier drop radius) of the tip, where the forecast's sites and
        barriers are read, and is 0 outside that window.
    samples : DataFrame or None
        One row per Monte Carlo sample, or None without sampling.
    settings : dict
        Every input that shaped the result (JSON-safe).
    stop_reason : str
        Why the main path ended: "horizon", "map_edge", "unindexed", "blocked".
    """

    path: pd.DataFrame
    crossings: pd.DataFrame
    barriers: pd.DataFrame
    sites: pd.DataFrame
    alternatives: pd.DataFrame
    field: np.ndarray | None
    samples: pd.DataFrame | None
    settings: dict
    stop_reason: str

    @property
    def length_um(self) -> float:
        """Length of the main path, µm."""
        return float(self.path["length_um"].sum()) if len(self.path) else 0.0

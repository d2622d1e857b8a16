"""Crack forecast: the stage-I path ahead of a tip, ranked arrest barriers and localisation sites.
"""

from __future__ import annotations

from slipnet.forecast.barriers import (
    rank_barriers,
)
from slipnet.forecast.crack import (
    BARRIER_MODELS,
    crack_plane_angles,
    forecast_crack,
)
from slipnet.forecast.features import (
    FEATURES,
    MODES,
    FieldInputs,
    crack_aware_stress,
    localisation_features,
)
from slipnet.forecast.monte_carlo import (
    monte_carlo,
)
from slipnet.forecast.predictor import (
    Weights,
    default_weights_path,
    load_weights,
)
from slipnet.forecast.types import (
    CLASS_FACTORS,
    BarrierWeights,
    CrackForecast,
    MonteCarloNoise,
    PathWeights,
)

__all__ = [
    "BARRIER_MODELS",
    "CLASS_FACTORS",
    "FEATURES",
    "MODES",
    "BarrierWeights",
    "CrackForecast",
    "FieldInputs",
    "MonteCarloNoise",
    "PathWeights",
    "Weights",
    "crack_aware_stress",
    "crack_plane_angles",
    "default_weights_path",
    "forecast_crack",
    "load_weights",
    "localisation_features",
    "monte_carlo",
    "rank_barriers",
]

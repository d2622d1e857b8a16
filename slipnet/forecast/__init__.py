"""Crack forecast: the stage-I path ahead of a tip, ranked arrest barriers and localisation sites.
"""

from __future__ import annotations

from slipnet.forecast.barriers import (
    rank_barriers,
)
from slipnet.forecast.crack import (
    crack_plane_angles,
    forecast_crack,
)
from slipnet.forecast.monte_carlo import (
    monte_carlo,
)
from slipnet.forecast.types import (
    CLASS_FACTORS,
    BarrierWeights,
    CrackForecast,
    MonteCarloNoise,
    PathWeights,
)

__all__ = [
    "CLASS_FACTORS",
    "BarrierWeights",
    "CrackForecast",
    "MonteCarloNoise",
    "PathWeights",
    "crack_plane_angles",
    "forecast_crack",
    "monte_carlo",
    "rank_barriers",
]

"""Short-crack growth along a forecast path: where the rate dips, stalls or arrests.
"""

from __future__ import annotations

from slipnet.growth.calibration import (
    CalibrationResult,
    calibrate,
    life_amplitude,
)
from slipnet.growth.model import (
    GrowthParameters,
    GrowthResult,
    barrier_strengths,
    crossing_lengths,
    growth_profile,
    plastic_zone_ratio,
    predicted_dips,
    simulate_growth,
    sliding_displacement,
    threshold_amplitudes,
    zone_state,
)
from slipnet.growth.path import (
    GrowthPath,
    path_from_forecast,
    path_from_tables,
)

__all__ = [
    "CalibrationResult",
    "GrowthParameters",
    "GrowthPath",
    "GrowthResult",
    "barrier_strengths",
    "calibrate",
    "crossing_lengths",
    "growth_profile",
    "life_amplitude",
    "path_from_forecast",
    "path_from_tables",
    "plastic_zone_ratio",
    "predicted_dips",
    "simulate_growth",
    "sliding_displacement",
    "threshold_amplitudes",
    "zone_state",
]

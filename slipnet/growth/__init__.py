"""Short-crack growth along a forecast path: where the rate dips, stalls or arrests.
"""

from __future__ import annotations

from slipnet.growth.calibration import (
    CalibrationResult,
    calibrate,
    life_amplitude,
)
from slipnet.growth.model import (
    GrowthResult,
    growth_profile,
    predicted_dips,
    simulate_growth,
)
from slipnet.growth.path import (
    GrowthPath,
    path_from_forecast,
    path_from_tables,
    zones_along_path,
)
from slipnet.growth.strip_yield import (
    GrowthParameters,
    plastic_zone_ratio,
    sliding_displacement,
)
from slipnet.growth.zones import (
    ARRESTED,
    BLOCKED,
    SPREADING,
    barrier_strengths,
    crossing_lengths,
    localisation_factor,
    threshold_amplitudes,
    zone_state,
)

__all__ = [
    "ARRESTED",
    "BLOCKED",
    "SPREADING",
    "CalibrationResult",
    "GrowthParameters",
    "GrowthPath",
    "GrowthResult",
    "barrier_strengths",
    "calibrate",
    "crossing_lengths",
    "growth_profile",
    "life_amplitude",
    "localisation_factor",
    "path_from_forecast",
    "path_from_tables",
    "plastic_zone_ratio",
    "predicted_dips",
    "simulate_growth",
    "sliding_displacement",
    "threshold_amplitudes",
    "zone_state",
    "zones_along_path",
]

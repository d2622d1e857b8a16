"""Scores of forecasts against measured strain maps and crack-growth records.
"""

from __future__ import annotations

from slipnet.compare.comparison import (
    Comparison,
    compare_files,
    compare_forecast,
    grain_traces,
    growth_profile_from,
    path_from_forecast,
    predicted_dips_from_growth,
    sites_from_forecast,
)
from slipnet.compare.demo_measurements import (
    DemoMeasurement,
    SyntheticMeasurement,
    band_displacement,
    demo_measurement,
    synthetic_crack_path,
    synthetic_growth_record,
    synthetic_strain_series,
)
from slipnet.compare.growth_records import (
    dadn_incremental_polynomial,
    dadn_secant,
    find_rate_dips,
)
from slipnet.compare.localisation import (
    band_orientation,
    boundary_band_statistics,
    densify_polylines,
    find_strain_peaks,
    grain_band_directions,
    grain_statistics,
)
from slipnet.compare.registration import (
    Transform,
    as_points,
    fit_transform,
    grid_geometry,
    labels_on_strain_grid,
    resample_to_map,
)
from slipnet.compare.scores import (
    angle_difference,
    auc_mann_whitney,
    densify_segments,
    match_dips,
    match_points,
    path_segments,
    point_segment_distance,
    rank_agreement,
    score_band_directions,
    score_path,
    score_sites,
)

__all__ = [
    "Comparison",
    "DemoMeasurement",
    "SyntheticMeasurement",
    "Transform",
    "angle_difference",
    "as_points",
    "auc_mann_whitney",
    "band_displacement",
    "band_orientation",
    "boundary_band_statistics",
    "compare_files",
    "compare_forecast",
    "dadn_incremental_polynomial",
    "dadn_secant",
    "demo_measurement",
    "densify_polylines",
    "densify_segments",
    "find_rate_dips",
    "find_strain_peaks",
    "fit_transform",
    "grain_band_directions",
    "grain_statistics",
    "grain_traces",
    "grid_geometry",
    "growth_profile_from",
    "labels_on_strain_grid",
    "match_dips",
    "match_points",
    "path_from_forecast",
    "path_segments",
    "point_segment_distance",
    "predicted_dips_from_growth",
    "rank_agreement",
    "resample_to_map",
    "score_band_directions",
    "score_path",
    "score_sites",
    "sites_from_forecast",
    "synthetic_crack_path",
    "synthetic_growth_record",
    "synthetic_strain_series",
]

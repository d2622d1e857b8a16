"""Column names of the tables the steps pass along and write, defined once.

Every name is snake_case; a quantity with a unit carries it as a suffix (``_um``, ``_deg``,
``_mpa``, ``_um_per_cycle``); names without a suffix are counts, ids, labels or dimensionless
(Schmid factors, |m′|, ratios, probabilities, strains as fractions). The producers build their
tables from these tuples and ``tests/test_columns.py`` checks every table against them, so a
consumer can rely on the spelling. Graph node and edge keys are in
:data:`slipnet.maps.grain_graph.NODE_KEYS` / ``EDGE_KEYS`` and :data:`slipnet.slip.SLIP_EDGE_KEYS`;
the grain, boundary and slip tables already follow the same rule.
"""

from __future__ import annotations

__all__ = [
    "FORECAST_ALTERNATIVES",
    "FORECAST_BARRIERS",
    "FORECAST_BARRIER_FIT",
    "FORECAST_CROSSINGS",
    "FORECAST_PATH",
    "FORECAST_SAMPLES",
    "FORECAST_SITES",
    "GROWTH_BANDS",
    "GROWTH_BARRIERS",
    "GROWTH_DIPS",
    "GROWTH_PROFILE",
    "NOTCH_PLAN_LEADING",
    "SEGMENT_XY",
]

#: Straight segment ends of a crack path, µm (map frame).
SEGMENT_XY: tuple[str, ...] = ("x0_um", "y0_um", "x1_um", "y1_um")

#: One row per straight segment of the forecast main path.
FORECAST_PATH: tuple[str, ...] = (
    "grain", *SEGMENT_XY, "length_um", "s_start_um", "system", "plane", "effective_schmid", "stage",
    "direction_deg", "leg", "end",
)
#: Segments of the alternative paths (``branch`` ≥ 1).
FORECAST_ALTERNATIVES: tuple[str, ...] = (*FORECAST_PATH, "branch")

#: One row per boundary crossing (main path, ``branch`` 0, and alternatives).
FORECAST_CROSSINGS: tuple[str, ...] = (
    "boundary_id", "grain_a", "grain_b", "x_um", "y_um", "distance_um", "twist_deg", "tilt_deg", "m_prime",
    "schmid_in", "schmid_out", "system_in", "system_out", "plane_out", "choice_schmid", "choice_m_prime",
    "choice_twist", "choice_tilt", "choice_score", "n_close", "misorientation_deg", "boundary_class",
    "trace_angle_deg", "branch",
)

#: Ranked arrest barriers. ``barrier_score`` ranks them: the fitted probability that slip drops across the
#: boundary (``drop_probability``, the forecast's default) or the hand-set ``resistance_score`` (the
#: relevance-weighted resistance in [0, 1] of ``rank_barriers``, which alone fills ``barrier_score``).
FORECAST_BARRIERS: tuple[str, ...] = (
    "rank", "boundary_id", "grain_a", "grain_b", "barrier_score", "twist_deg", "tilt_deg", "m_prime",
    "distance_um", "on_path", "term_twist", "term_transmission", "term_class", "term_schmid_drop", "relevance",
    "weight_twist", "weight_transmission", "weight_class", "weight_schmid_drop", "boundary_class",
    "misorientation_deg", "schmid_in", "schmid_out", "x_um", "y_um", "branches",
)
#: Columns the forecast adds after :data:`FORECAST_BARRIERS` (``rank_barriers`` alone does not): the hand-set
#: score, the fitted probability and the features of the fitted barrier model (``fit_*``, see
#: :data:`slipnet.forecast.predictor.BARRIER_FEATURES`).
FORECAST_BARRIER_FIT: tuple[str, ...] = (
    "resistance_score", "drop_probability", "fit_field_drop", "fit_tau_drop", "fit_untransmitted", "fit_twist",
    "fit_schmid_drop", "fit_boundary_class", "fit_residual_burgers", "fit_log_distance",
)

#: Ranked localisation sites: peaks of the localisation field, ranked by ``site_probability`` (the fitted
#: probability that a hot point lies within the hit radius); ``field_value`` is the field at the site;
#: ``site_score_mpa_um`` = effective resolved shear × band length × (1 − transmission) describes the
#: pile-up of the site's band on the boundary it runs into.
FORECAST_SITES: tuple[str, ...] = (
    "rank", "x_um", "y_um", "site_score_mpa_um", "grain", "blocking_grain", "boundary_id", "system", "plane",
    "resolved_shear_mpa", "band_length_um", "transmission_score", "field_value", "site_probability",
)

#: One row per Monte Carlo sample of a forecast.
FORECAST_SAMPLES: tuple[str, ...] = (
    "sample", "tip_x_um", "tip_y_um", "tip_reset", "load_x", "load_y", "load_z", "path_length_um", "n_crossings",
    "stop_reason", "top_barrier_id", "end_x_um", "end_y_um",
)

#: Growth-rate profile along the path.
GROWTH_PROFILE: tuple[str, ...] = (
    "crack_length_um", "cycles", "dadn_um_per_cycle", "ctsd_um", "zone_end_um", "n_ratio", "zone_state", "barrier",
    "grain", "arrested", "zone_factor", "zone",
)
#: One row per barrier on the growth path.
GROWTH_BARRIERS: tuple[str, ...] = (
    "barrier", "position_um", "boundary_id", "grain_before", "grain_after", "grain_factor_before",
    "grain_factor_after", "m_prime", "twist_deg", "critical_stress_mpa", "threshold_amplitude_mpa",
    "pass_amplitude_mpa", "crossing_length_um", "arrest", "dip_length_um", "dip_depth_ratio",
)
#: Predicted growth-rate dips; ``depth_ratio`` = minimum rate / rate just after crossing; ``kind`` says what
#: slowed the crack: "boundary" (the plastic zone blocked at grain boundary ``barrier``) or "zone" (a strain
#: localisation zone on the path, index ``zone``).
GROWTH_DIPS: tuple[str, ...] = (
    "barrier", "crack_length_um", "dadn_min_um_per_cycle", "dadn_peak_um_per_cycle", "dadn_after_um_per_cycle",
    "depth_ratio", "crossing_length_um", "arrest", "kind", "zone",
)
#: Monte Carlo bands of the growth profile.
GROWTH_BANDS: tuple[str, ...] = (
    "crack_length_um", "cycles_p05", "dadn_um_per_cycle_p05", "cycles_p50", "dadn_um_per_cycle_p50", "cycles_p95",
    "dadn_um_per_cycle_p95",
)

#: The first columns of a notch plan table (the rest: objectives, terms, weights, bands).
NOTCH_PLAN_LEADING: tuple[str, ...] = ("root_x_um", "root_y_um", "rank", "plan_score")

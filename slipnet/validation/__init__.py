"""Validation harness: virtual experiments scored against slipnet's own cyclic crystal-plasticity model.

The reference is slipnet's own slow model (:func:`slipnet.stress.solve_cyclic`), so every score here
is a consistency test between a fast and a slow model, not a validation against experiments.
"""

from __future__ import annotations

from slipnet.validation.baselines import BASELINES, baseline_fields
from slipnet.validation.cases import (
    HELD_OUT_SEEDS,
    TRAINING_SEEDS,
    BuiltCase,
    Case,
    CaseRanges,
    build_case,
    draw_case,
    draw_cases,
)
from slipnet.validation.fit import HarnessSettings, fit_weights, write_weights
from slipnet.validation.harness import (
    METRICS,
    SCORE_COLUMNS,
    ValidationResult,
    run_validation,
    score_case,
    summarise,
)
from slipnet.validation.reference import (
    REFERENCE_STATEMENT,
    ReferenceField,
    ReferenceSettings,
    default_cache_dir,
    run_reference,
)
from slipnet.validation.scoring import (
    field_auc,
    grain_spearman,
    hot_mask,
    path_agreement,
    ridge_path,
    scoring_region,
    site_hits,
    spearman,
)
from slipnet.validation.standing import (
    STANDING_FORMAT,
    default_standing_path,
    read_standing,
    reliability,
    standing,
    write_standing,
)
from slipnet.validation.tasks import run_tasks

__all__ = [
    "BASELINES",
    "HELD_OUT_SEEDS",
    "METRICS",
    "REFERENCE_STATEMENT",
    "SCORE_COLUMNS",
    "STANDING_FORMAT",
    "TRAINING_SEEDS",
    "BuiltCase",
    "Case",
    "CaseRanges",
    "HarnessSettings",
    "ReferenceField",
    "ReferenceSettings",
    "ValidationResult",
    "baseline_fields",
    "build_case",
    "default_cache_dir",
    "default_standing_path",
    "draw_case",
    "draw_cases",
    "field_auc",
    "fit_weights",
    "grain_spearman",
    "hot_mask",
    "path_agreement",
    "read_standing",
    "reliability",
    "ridge_path",
    "run_reference",
    "run_tasks",
    "run_validation",
    "score_case",
    "scoring_region",
    "site_hits",
    "spearman",
    "standing",
    "summarise",
    "write_standing",
    "write_weights",
]

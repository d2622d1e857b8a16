"""A whole study on one orientation map: every step once, cached, and one self-contained report.

``run_study(options, out)`` reads and cleans the map, builds grains, slip, the full-field stress and
the notch plan, forecasts crack path, growth and uncertainty from each of the best candidate
notches, optionally compares with measurements, and writes ``report.html`` (plus ``study.toml``,
``summary.md``, ``steps.csv`` and ``tables/``). The options live in one study file.
"""

from __future__ import annotations

from slipnet.study.cache import (
    StepCache,
    StepRecord,
    file_digest,
    step_key,
)
from slipnet.study.options import (
    CompareOptions,
    ForecastOptions,
    GrainOptions,
    GrowthOptions,
    LoadOptions,
    MapOptions,
    NotchOptions,
    StressOptions,
    StudyOptions,
    read_study_file,
    study_file_text,
    write_study_file,
)
from slipnet.study.run import (
    StudyResult,
    run_study,
    validation_standing,
)
from slipnet.study.steps import (
    Outcome,
    arrest_probabilities,
)
from slipnet.study.store import (
    STORABLE,
    load_object,
    save_object,
)

__all__ = [
    "STORABLE",
    "CompareOptions",
    "ForecastOptions",
    "GrainOptions",
    "GrowthOptions",
    "LoadOptions",
    "MapOptions",
    "NotchOptions",
    "Outcome",
    "StepCache",
    "StepRecord",
    "StressOptions",
    "StudyOptions",
    "StudyResult",
    "arrest_probabilities",
    "file_digest",
    "load_object",
    "read_study_file",
    "run_study",
    "save_object",
    "step_key",
    "study_file_text",
    "validation_standing",
    "write_study_file",
]

"""Notch placement planner: candidates along an edge, their objectives, ranking, sweeps and studies.
"""

from __future__ import annotations

from slipnet.notch.candidates import (
    candidate_positions,
    edge_of_map,
)
from slipnet.notch.kt import (
    full_field_kt,
    notch_stress_factor,
    peterson_kt,
)
from slipnet.notch.objectives import (
    evaluate_candidate,
)
from slipnet.notch.plan import (
    plan_notch,
)
from slipnet.notch.ranking import (
    finish_plan,
    pareto_ranks,
    rank_candidates,
)
from slipnet.notch.settings import (
    CONCENTRATION_METHODS,
    DEFAULT_WEIGHTS,
    OBJECTIVES,
    Candidate,
    NotchPlan,
    PlanSettings,
)
from slipnet.notch.study import (
    iter_batch,
    run_study,
)
from slipnet.notch.sweep import (
    LOCAL_SCHEDULERS,
    SweepPool,
    run_sweep,
)

__all__ = [
    "CONCENTRATION_METHODS",
    "DEFAULT_WEIGHTS",
    "LOCAL_SCHEDULERS",
    "OBJECTIVES",
    "Candidate",
    "NotchPlan",
    "PlanSettings",
    "SweepPool",
    "candidate_positions",
    "edge_of_map",
    "evaluate_candidate",
    "finish_plan",
    "full_field_kt",
    "iter_batch",
    "notch_stress_factor",
    "pareto_ranks",
    "peterson_kt",
    "plan_notch",
    "rank_candidates",
    "run_study",
    "run_sweep",
]

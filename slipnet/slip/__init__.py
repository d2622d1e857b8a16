"""Slip activity of a grain graph: per-grain Schmid and slip-trace tables and per-boundary transmission.
"""

from __future__ import annotations

from slipnet.slip.activity import (
    GIVEN_SOURCE,
    SLIP_EDGE_KEYS,
    SLIP_NODE_KEYS,
    UNIFORM_SOURCE,
    SlipActivity,
    slip_activity,
    with_slip_annotations,
)
from slipnet.slip.tables import (
    LOCAL_SOURCE,
    factors_or_local,
    grain_quats_for,
    grain_schmid_table,
    local_grain_factors,
    slip_trace_table,
)
from slipnet.slip.transmission import (
    transmission_table,
)

__all__ = [
    "GIVEN_SOURCE",
    "LOCAL_SOURCE",
    "SLIP_EDGE_KEYS",
    "SLIP_NODE_KEYS",
    "UNIFORM_SOURCE",
    "SlipActivity",
    "factors_or_local",
    "grain_quats_for",
    "grain_schmid_table",
    "local_grain_factors",
    "slip_activity",
    "slip_trace_table",
    "transmission_table",
    "with_slip_annotations",
]

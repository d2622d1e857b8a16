"""Grain reconstruction: an orientation map in, a :class:`~slipnet.maps.GrainGraph` out.
"""

from __future__ import annotations

from slipnet.grains.build import (
    MAX_THRESHOLD_DEG,
    build_grain_graph,
)

__all__ = [
    "MAX_THRESHOLD_DEG",
    "build_grain_graph",
]

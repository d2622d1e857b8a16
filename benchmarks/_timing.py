"""Timing helper shared by the benchmark scripts (imported from the scripts' own folder)."""

from __future__ import annotations

import time
from collections.abc import Callable


def best_time(fn: Callable[[], object], repeat: int = 3) -> float:
    """Smallest wall time of ``repeat`` calls, seconds (the least disturbed run)."""
    times = []
    for _ in range(repeat):
        t0 = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t0)
    return min(times)

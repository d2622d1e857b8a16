"""How many numba threads a stress computation runs on (small grids run serially: launches cost more)."""

from __future__ import annotations

import contextlib
import os
from collections.abc import Iterator

from slipnet._checks import check_positive

#: Below this many points (about 360²) the kernels and FFTs run on one thread by default: waking
#: threads costs more than it saves, and on a loaded machine one parallel launch can take
#: milliseconds (measured: a 256² iteration 33 ms on one thread, 73 ms on two, shared 2-core box).
PARALLEL_MIN_POINTS = 131072


def _workers(workers: int | None, n_points: int) -> int:
    if workers is None:
        return 1 if n_points < PARALLEL_MIN_POINTS else max(1, min(os.cpu_count() or 1, 2))
    return int(check_positive(workers, "workers"))


@contextlib.contextmanager
def _numba_threads(n: int) -> Iterator[None]:
    """Run the numba kernels inside the block on ``n`` threads (restored afterwards)."""
    import numba

    old = numba.get_num_threads()
    numba.set_num_threads(max(1, min(int(n), numba.config.NUMBA_NUM_THREADS)))
    try:
        yield
    finally:
        numba.set_num_threads(old)

"""One progress style for every long step: tqdm bars, silent unless asked."""

from __future__ import annotations

import logging
import time
from collections.abc import Iterable, Iterator
from typing import TypeVar

__all__ = ["StepProgress", "progress_iter"]

T = TypeVar("T")
logger = logging.getLogger("slipnet")


class StepProgress:
    """Progress over named steps; records how long each step took.

    Parameters
    ----------
    total
        Number of steps.
    enabled
        Show a tqdm bar (on stderr); timings are recorded either way.
    desc
        Label of the bar.

    Examples
    --------
    >>> steps = StepProgress(2, False, "demo")
    >>> steps("read"); steps("write"); steps.close()
    >>> sorted(steps.timings)
    ['read', 'write']
    """

    def __init__(self, total: int, enabled: bool, desc: str = "slipnet") -> None:
        self.bar = None
        self.timings: dict[str, float] = {}
        self._t = time.perf_counter()
        self._desc = desc
        if enabled:
            from tqdm.auto import tqdm

            self.bar = tqdm(total=total, desc=desc, unit="step", leave=False)

    def __call__(self, name: str) -> None:
        now = time.perf_counter()
        self.timings[name] = now - self._t
        self._t = now
        logger.debug("%s step %s: %.3f s", self._desc, name, self.timings[name])
        if self.bar is not None:
            self.bar.set_postfix_str(name)
            self.bar.update(1)

    def close(self) -> None:
        """Close the bar (if any)."""
        if self.bar is not None:
            self.bar.close()


def progress_iter(items: Iterable[T], enabled: bool, desc: str, *, total: int | None = None,
                  unit: str = "item") -> Iterator[T]:
    """``items``, with a tqdm bar when ``enabled``."""
    if not enabled:
        yield from items
        return
    from tqdm.auto import tqdm

    yield from tqdm(items, desc=desc, total=total, unit=unit, leave=False)

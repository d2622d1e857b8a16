"""The built-in demo: the invented specimen run through every step of the job.

Each step is a function ``_step_<name>(ctx)`` that reads what earlier steps left in ``ctx`` (a
plain dict) and writes its outputs under ``ctx["out"]``. :data:`STEPS` lists them in order.
"""

from __future__ import annotations

import os
import time
from collections.abc import Callable
from pathlib import Path

from .report import write_summary


def _step_specimen(ctx: dict) -> None:
    from .synthetic import demo_specimen

    spec = demo_specimen(seed=ctx["seed"], quick=ctx["quick"])
    ctx["specimen"] = spec
    ctx["omap"] = spec.omap


STEPS: list[tuple[str, Callable[[dict], None]]] = [
    ("specimen", _step_specimen),
]


def run_demo(out: str | os.PathLike = "slipnet-demo", *, seed: int = 7, quick: bool = False) -> dict:
    """Run every demo step, writing into ``out``; returns the context dict of results.

    Parameters
    ----------
    out
        Output folder (created if missing).
    seed
        Seed of the synthetic specimen and of every random step.
    quick
        A smaller specimen and fewer Monte Carlo samples.
    """
    out = Path(out)
    out.mkdir(parents=True, exist_ok=True)
    ctx: dict = {"out": out, "seed": int(seed), "quick": bool(quick), "log": []}
    for name, step in STEPS:
        t0 = time.perf_counter()
        step(ctx)
        ctx["log"].append(f"- {name}: {time.perf_counter() - t0:.1f} s")
    write_summary(out, "slipnet demo", ["Synthetic demo specimen (invented data).", "", "Steps:", *ctx["log"]])
    return ctx

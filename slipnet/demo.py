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
    ny, nx = spec.omap.shape
    ctx.setdefault("notes", []).extend([
        f"Specimen: {spec.name}, {ny} × {nx} points at {spec.omap.step:g} µm, {spec.n_grains} grains.",
        spec.description,
        "",
    ])


def _step_files(ctx: dict) -> None:
    from .figures._common import save_figure
    from .figures.maps import plot_ipf_map
    from .io import write_map

    spec, out = ctx["specimen"], ctx["out"]
    files = [write_map(spec.omap, out / "specimen.txt"), write_map(spec.omap, out / "specimen.npz")]
    ax = plot_ipf_map(spec.omap, direction=(0.0, 0.0, 1.0), title=f"{spec.name}: IPF colouring, normal direction z")
    if spec.notch_root is not None:
        ax.plot(*spec.notch_root, marker="o", ms=7, mfc="white", mec="black", ls="none", label="notch root")
        ax.legend(loc="lower right", fontsize=8, framealpha=0.8)
    save_figure(ax.figure, out / "ipf_map.png")
    files.append(out / "ipf_map.png")
    ctx["files"] = files
    ctx.setdefault("notes", []).append("Map files: " + ", ".join(p.name for p in files) + ".")


STEPS: list[tuple[str, Callable[[dict], None]]] = [
    ("specimen", _step_specimen),
    ("files", _step_files),
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
    write_summary(out, "slipnet demo",
                  ["Synthetic demo specimen (invented data).", "", *ctx.get("notes", []), "", "Steps:", *ctx["log"]])
    return ctx

"""Run notch-placement sweeps on Dask, from Python, from a study file, or over a folder of specimens.

Candidates are split into chunks, each chunk evaluated by one task
(:func:`slipnet.notch.evaluate_candidate` per candidate). Each candidate's Monte Carlo draws come
from its own seed (``SeedSequence([seed, candidate index])``), and results are put back in
candidate order, so the table is the same on every scheduler and with any number of workers.

Study file (TOML)
-----------------
A study file records everything a plan needs so it can be re-run exactly; see
``examples/notch/study.toml``. Sections and keys (units in the key names)::

    [specimen]     map (path, relative to the study file), threshold_deg, min_grain_size
    [loading]      axis (3 numbers, map frame), stress_amplitude_mpa, stress_ratio
    [notch]        depth_um, root_radius_um, opening_deg, concentration ("peterson" | "full_field")
    [candidates]   edge ("left" | "right" | "top" | "bottom" or [[x, y], ...] in µm), spacing_um,
                   window_um, crack_sizes_um (list)
    [objectives]   weights (table objective = weight), method ("weighted" | "pareto"),
                   strong_barrier, top_k, target ({boundary = [a, b], distance_um = d} or
                   {grain = g, distance_um = d})
    [uncertainty]  samples, orientation_noise_deg, load_misalignment_deg, position_error_um, seed
    [growth]       any keyword of slipnet.growth.simulate_growth (friction_stress, coefficient, ...)
    [run]          scheduler ("synchronous" | "threads" | "processes" | "tcp://host:port"), workers
"""

from __future__ import annotations

import json
import math
import os
import tomllib
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pandas as pd

from .errors import InputFileError, ParameterError
from .notch import Candidate, PlanSettings, evaluate_candidate

__all__ = ["Study", "read_study", "run_batch", "run_study", "run_sweep", "write_plan"]

LOCAL_SCHEDULERS = ("synchronous", "threads", "processes")


def _eval_chunk(gg, chunk: list[Candidate], s: PlanSettings, systems) -> list[dict]:
    return [evaluate_candidate(gg, c, s, systems) for c in chunk]


def _single_threaded_worker() -> None:
    """Initialise a sweep worker process with single-threaded numba and BLAS."""
    import numba
    from threadpoolctl import threadpool_limits

    numba.set_num_threads(1)
    threadpool_limits(1)


def _chunks(items: list, n: int) -> list[list]:
    n = max(1, min(n, len(items)))
    return [list(c) for c in np.array_split(np.array(items, dtype=object), n) if len(c)]


def run_sweep(gg, candidates: list[Candidate], s: PlanSettings, *, systems=None, scheduler: str = "synchronous",
              workers: int | None = None, progress: bool = False) -> list[dict]:
    """Evaluate every candidate on a Dask scheduler; rows come back in candidate order.

    Parameters
    ----------
    gg
        The grain graph (sent once per worker on a distributed cluster).
    candidates
        From :func:`slipnet.notch.candidate_positions`.
    s
        Plan settings.
    systems
        Slip systems (default: those of the map's first phase).
    scheduler
        ``"synchronous"``, ``"threads"``, ``"processes"`` or a ``dask.distributed`` scheduler
        address (``"tcp://host:port"``).
    workers
        Local workers (default: the machine's cores); ignored for a cluster address.
    progress
        Show a progress bar.

    Raises
    ------
    ParameterError
        For an unknown scheduler name or an unreachable scheduler address.
    """
    if not candidates:
        raise ParameterError("no candidate notch positions to evaluate")
    sched = str(scheduler)
    nw = int(workers) if workers else (os.cpu_count() or 1)
    if nw < 1:
        raise ParameterError(f"workers should be >= 1; got {workers!r}")
    if sched in LOCAL_SCHEDULERS:
        import dask

        chunks = _chunks(candidates, 1 if sched == "synchronous" else 8 * nw)
        tasks = [dask.delayed(_eval_chunk)(gg, c, s, systems) for c in chunks]
        kw: dict = {"scheduler": sched}
        pool = None
        if sched == "threads":
            kw["num_workers"] = nw
        elif sched == "processes":
            # one compute thread per worker process: numba's and BLAS's own thread pools would
            # otherwise oversubscribe the cores and two workers run no faster than one
            import multiprocessing
            from concurrent.futures import ProcessPoolExecutor

            pool = ProcessPoolExecutor(max_workers=nw, mp_context=multiprocessing.get_context("spawn"),
                                       initializer=_single_threaded_worker)
            kw["pool"] = pool
        try:
            if progress:
                from dask.diagnostics import ProgressBar

                with ProgressBar():
                    parts = dask.compute(*tasks, **kw)
            else:
                parts = dask.compute(*tasks, **kw)
        finally:
            if pool is not None:
                pool.shutdown()
    elif "://" in sched:
        parts = _run_distributed(gg, candidates, s, systems, sched, progress)
    else:
        raise ParameterError(
            f"scheduler should be one of {', '.join(LOCAL_SCHEDULERS)} or a dask.distributed address "
            f"such as 'tcp://127.0.0.1:8786'; got {scheduler!r}"
        )
    rows = [r for part in parts for r in part]
    return sorted(rows, key=lambda r: r["candidate"])


def _run_distributed(gg, candidates, s, systems, address: str, progress: bool) -> list[list[dict]]:
    from distributed import Client, as_completed

    try:
        client = Client(address, timeout="10s", set_as_default=False)
    except (OSError, TimeoutError) as err:
        raise ParameterError(
            f"could not reach the dask scheduler at {address!r} ({err}); start one with `dask scheduler` "
            "and workers with `dask worker ADDRESS`, or use scheduler='processes'"
        ) from err
    try:
        n = max(1, len(client.scheduler_info().get("workers", {})))
        chunks = _chunks(candidates, 4 * n)
        gg_f = client.scatter(gg, broadcast=True)
        futures = [client.submit(_eval_chunk, gg_f, c, s, systems, pure=False) for c in chunks]
        if progress:
            from tqdm import tqdm

            for _ in tqdm(as_completed(futures), total=len(futures), desc="notch candidates"):
                pass
        return client.gather(futures)
    finally:
        client.close()


# ---------------------------------------------------------------------------------------------
# study files

_STUDY_KEYS = {
    "specimen": {"map", "threshold_deg", "min_grain_size"},
    "loading": {"axis", "stress_amplitude_mpa", "stress_ratio"},
    "notch": {"depth_um", "root_radius_um", "opening_deg", "concentration"},
    "candidates": {"edge", "spacing_um", "window_um", "crack_sizes_um"},
    "objectives": {"weights", "method", "strong_barrier", "top_k", "target"},
    "uncertainty": {"samples", "orientation_noise_deg", "load_misalignment_deg", "position_error_um", "seed"},
    "growth": None,  # passed through to simulate_growth
    "run": {"scheduler", "workers"},
}


@dataclass(frozen=True)
class Study:
    """A parsed study file: the map to read, how to build grains, and the plan keywords."""

    path: Path
    map_path: Path | None
    grain_options: dict
    plan_options: dict

    def with_map(self, map_path: Path) -> Study:
        """The same study on another specimen map (batch mode)."""
        return Study(self.path, Path(map_path), self.grain_options, self.plan_options)


def read_study(path: str | os.PathLike) -> Study:
    """Read and check a TOML study file (see the module docstring for its keys).

    Raises
    ------
    InputFileError
        For a missing or malformed file, an unknown section or key, or a missing map file.
    """
    p = Path(path)
    if not p.is_file():
        raise InputFileError("study file not found; give the path of a TOML study file", path=str(p))
    try:
        data = tomllib.loads(p.read_text(encoding="utf-8"))
    except (tomllib.TOMLDecodeError, UnicodeDecodeError) as err:
        raise InputFileError(f"not a valid TOML study file ({err})", path=str(p)) from err
    for sec, val in data.items():
        if sec not in _STUDY_KEYS:
            raise InputFileError(f"unknown section [{sec}]; accepted: {', '.join(_STUDY_KEYS)}", path=str(p))
        if not isinstance(val, dict):
            raise InputFileError(f"[{sec}] should be a table of keys", path=str(p))
        allowed = _STUDY_KEYS[sec]
        if allowed is not None:
            extra = sorted(set(val) - allowed)
            if extra:
                raise InputFileError(
                    f"unknown key(s) {', '.join(extra)} in [{sec}]; accepted: {', '.join(sorted(allowed))}",
                    path=str(p))
    spec = data.get("specimen", {})
    map_path = None
    if "map" in spec:
        map_path = (p.parent / spec["map"]).resolve()
        if not map_path.is_file():
            raise InputFileError(f"the map {spec['map']!r} named in [specimen] does not exist ({map_path})",
                                 path=str(p))
    grain_options = {k: spec[k] for k in ("threshold_deg", "min_grain_size") if k in spec}
    load = data.get("loading", {})
    notch = data.get("notch", {})
    cand = data.get("candidates", {})
    obj = data.get("objectives", {})
    unc = data.get("uncertainty", {})
    run = data.get("run", {})
    opts: dict = {}
    if "axis" in load:
        opts["load_axis"] = tuple(load["axis"])
    for src, dst in (("stress_amplitude_mpa", "stress_amplitude"), ("stress_ratio", "stress_ratio")):
        if src in load:
            opts[dst] = load[src]
    opts.update(notch)
    opts.update(cand)
    if "weights" in obj:
        opts["objectives"] = dict(obj["weights"])
    for k in ("method", "strong_barrier", "top_k"):
        if k in obj:
            opts[k] = obj[k]
    if "target" in obj:
        t = dict(obj["target"])
        if "boundary" in t:
            t["boundary"] = tuple(int(v) for v in t["boundary"])
        opts["target"] = t
    opts.update(unc)
    if "growth" in data:
        opts["growth"] = dict(data["growth"])
    opts.update(run)
    if isinstance(opts.get("edge"), list):
        opts["edge"] = np.asarray(opts["edge"], dtype=float)
    return Study(p, map_path, grain_options, opts)


def run_study(study: Study | str | os.PathLike, out: str | os.PathLike | None = None, *, gg=None,
              scheduler: str | None = None, progress: bool = False) -> pd.DataFrame:
    """Run a study: read its map, build grains, plan the notch, write the outputs if ``out`` is given."""
    from .grains import build_grain_graph
    from .io import read_map
    from .notch import plan_notch

    st = study if isinstance(study, Study) else read_study(study)
    if gg is None:
        if st.map_path is None:
            raise ParameterError("the study names no [specimen] map; give one or pass a grain graph")
        gg = build_grain_graph(read_map(st.map_path), **st.grain_options)
    opts = dict(st.plan_options)
    edge = opts.pop("edge", "left")
    load = opts.pop("load_axis", (1.0, 0.0, 0.0))
    if scheduler is not None:
        opts["scheduler"] = scheduler
    plan = plan_notch(gg, edge, load, progress=progress, **opts)
    plan.attrs["settings"]["study"] = str(st.path)
    plan.attrs["settings"]["map"] = str(st.map_path) if st.map_path else None
    if out is not None:
        write_plan(plan, gg, out)
    return plan


def run_batch(folder: str | os.PathLike, study: str | os.PathLike, out: str | os.PathLike, *,
              scheduler: str | None = None, progress: bool = False) -> pd.DataFrame:
    """Run one study over every map in ``folder`` (our text tables and bundles, and files orix reads).

    Each specimen's outputs go to ``out/<map stem>/``; a combined table of every specimen's best
    candidates goes to ``out/batch_best.csv``. All maps are read (and checked) before any plan runs.
    """
    from .grains import build_grain_graph
    from .io import read_map
    from .report import write_summary, write_table

    st = read_study(study)
    src = Path(folder)
    if not src.is_dir():
        raise ParameterError(f"batch folder {src} does not exist; give a folder of specimen maps")
    files = sorted(f for f in src.iterdir() if f.is_file() and not f.name.startswith("."))
    if not files:
        raise ParameterError(f"batch folder {src} holds no map files")
    maps = [(f, read_map(f)) for f in files]  # fail early, before any output
    best = []
    for f, omap in maps:
        gg = build_grain_graph(omap, **st.grain_options)
        plan = run_study(st.with_map(f), Path(out) / f.stem, gg=gg, scheduler=scheduler, progress=progress)
        top = plan.head(3).copy()
        top.insert(0, "specimen", f.name)
        best.append(top)
    table = pd.concat(best, ignore_index=True)
    write_table(table, Path(out) / "batch_best.csv")
    write_summary(out, "Notch plans, batch", [f"Study: {st.path}", f"Specimens: {len(maps)}",
                                              "Best three candidates per specimen: batch_best.csv"])
    return table


def write_plan(plan: pd.DataFrame, gg, out: str | os.PathLike, *, figures: bool = True) -> dict:
    """Write a plan: ``notch_plan.csv``, ``notch_plan.json``, ``settings.json``, pictures, summary."""
    from ._files import atomic_path
    from .report import write_summary, write_table

    out = Path(out)
    out.mkdir(parents=True, exist_ok=True)
    written = {"table": write_table(plan, out / "notch_plan.csv"), "json": write_table(plan, out / "notch_plan.json")}
    settings = plan.attrs.get("settings", {})
    with atomic_path(out / "settings.json") as tmp:
        tmp.write_text(json.dumps(settings, indent=1, default=_json_default), encoding="utf-8")
    written["settings"] = out / "settings.json"
    if figures:
        from .figures.notch import plot_plan_map, plot_plan_terms

        written["map"] = plot_plan_map(plan, gg, out / "notch_plan_map.png")
        written["terms"] = plot_plan_terms(plan, out / "notch_plan_terms.png")
    lines = [f"Candidates: {len(plan)}; objectives and weights: {settings.get('weights')}",
             f"Ranking: {settings.get('method', 'weighted')}", "", "Best candidates (notch root, µm):", ""]
    cols = [c for c in ("rank", "x", "y", "score", "initiation_drive", "barrier_strength_in_window",
                        "first_barrier_um", "log10_cycles_to_window", "arrest_probability", "p_top_k") if c in plan]
    lines.append(plan.head(5)[cols].to_markdown(index=False) if _has_tabulate() else plan.head(5)[cols].to_string())
    lines += ["", "Stress concentration: Peterson-type K_t (semi-infinite plate chart fit, Pilkey & Pilkey 2008); "
              "growth at σ·min(K_t, √((t+a)/a)) (Dowling 1979).", *settings.get("notes", [])]
    written["summary"] = write_summary(out, "Notch placement plan", lines)
    return written


def _has_tabulate() -> bool:
    try:
        import tabulate  # noqa: F401
    except ImportError:
        return False
    return True


def _json_default(o):
    if isinstance(o, np.generic):
        return o.item()
    if isinstance(o, np.ndarray):
        return o.tolist()
    if isinstance(o, float) and not math.isfinite(o):
        return str(o)
    return str(o)

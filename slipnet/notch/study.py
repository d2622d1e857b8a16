"""Run a notch study (a TOML study file) on its map, or on every map of a folder."""

from __future__ import annotations

import os
from collections.abc import Iterator
from pathlib import Path

from slipnet.errors import ParameterError
from slipnet.grains.build import build_grain_graph
from slipnet.io.folders import read_map_folder
from slipnet.io.maps import read_map
from slipnet.io.study import Study, read_study
from slipnet.maps.grain_graph import GrainGraph
from slipnet.notch.plan import plan_notch
from slipnet.notch.settings import NotchPlan
from slipnet.notch.sweep import LOCAL_SCHEDULERS, SweepPool, is_remote_scheduler

__all__ = ["iter_batch", "run_study"]


def run_study(study: Study | str | os.PathLike, *, gg: GrainGraph | None = None, scheduler: str | None = None,
              progress: bool = False, allow_remote: bool = False, pool: SweepPool | None = None) -> NotchPlan:
    """Run a study: read its map, build grains (unless ``gg`` is given) and plan the notch.

    Parameters
    ----------
    study
        A :class:`~slipnet.io.Study` or the path of a TOML study file.
    gg
        A grain graph to use instead of building one from the study's map.
    scheduler
        Overrides the study's ``[run] scheduler``. A remote address given here is taken as the
        caller's consent to use it (trusted machines only; see :mod:`slipnet.notch.sweep`).
    progress
        Show progress bars.
    allow_remote
        Also accept a remote scheduler address written in the study file itself. Without it (the
        default) such a study is refused: a file must not choose where code runs.
    pool
        A :class:`~slipnet.notch.sweep.SweepPool` to run the sweep on (kept open by the caller,
        as :func:`iter_batch` does for all its maps); it replaces the scheduler.

    Returns
    -------
    NotchPlan
        With ``source`` naming the study file and the map.
    """
    st = study if isinstance(study, Study) else read_study(study)
    _check_scheduler(st, scheduler, allow_remote)
    if gg is None:
        if st.map_path is None:
            raise ParameterError("the study names no [specimen] map; give one or pass a grain graph")
        gg = build_grain_graph(read_map(st.map_path, **st.map_options), **st.grain_options)
    opts = dict(st.plan_options)
    edge = opts.pop("edge", "left")
    load = opts.pop("load_axis")
    if scheduler is not None:
        opts["scheduler"] = scheduler
    if pool is not None:
        opts.pop("scheduler", None)
        opts.pop("workers", None)
    plan = plan_notch(gg, edge, load, progress=progress, allow_remote=allow_remote or scheduler is not None,
                      pool=pool, **opts)
    source = {"study": str(st.path), "map": str(st.map_path) if st.map_path else None}
    return NotchPlan(plan.table, plan.settings, plan.method, plan.top_k, plan.notes, source)


def _check_scheduler(st: Study, scheduler: str | None, allow_remote: bool) -> None:
    """Refuse a remote scheduler that only the study file asks for."""
    named = st.plan_options.get("scheduler")
    if scheduler is None and not allow_remote and is_remote_scheduler(named):
        raise ParameterError(
            f"study {st.path}: [run] scheduler should be local ({', '.join(LOCAL_SCHEDULERS)}); got the remote "
            f"address {named!r}. A study file never chooses a remote machine: to use that cluster (trusted machines "
            f"only), name it on the command line: --scheduler {named}")


def iter_batch(folder: str | os.PathLike, study: Study | str | os.PathLike, *, scheduler: str | None = None,
               progress: bool = False, allow_remote: bool = False) -> Iterator[tuple[Path, GrainGraph, NotchPlan]]:
    """Run one study over every map in ``folder``, one specimen at a time.

    ``scheduler`` and ``allow_remote`` mean what they mean for :func:`run_study`.

    All maps are read (and checked) before the first plan runs, so a bad map stops the batch
    before anything is computed or written. One :class:`~slipnet.notch.sweep.SweepPool` serves
    every map: worker processes start once for the batch and stop when it ends (or is abandoned).

    Yields
    ------
    (map path, grain graph, plan)
    """
    st = study if isinstance(study, Study) else read_study(study)
    _check_scheduler(st, scheduler, allow_remote)
    maps = read_map_folder(folder, **st.map_options)
    opts = st.plan_options
    with SweepPool(scheduler or opts.get("scheduler", "synchronous"), opts.get("workers"),
                   allow_remote=allow_remote or scheduler is not None) as pool:
        for path, omap in maps:
            gg = build_grain_graph(omap, **st.grain_options)
            yield path, gg, run_study(st.with_map(path), gg=gg, progress=progress, pool=pool)

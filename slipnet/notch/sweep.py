"""Run notch-placement sweeps on Dask: every candidate evaluated, in chunks, on any scheduler.

Candidates are split into chunks, each chunk evaluated by one task
(:func:`slipnet.notch.evaluate_candidate` per candidate). Each candidate's Monte Carlo draws come
from its own seed (``SeedSequence([seed, candidate index])``), and results are put back in
candidate order, so the table is the same on every scheduler and with any number of workers.

A remote ``dask.distributed`` scheduler (``"tcp://host:port"``, ``"tls://…"``) is used only when the
caller asks for it (``allow_remote=True``; on the command line, ``--scheduler ADDRESS``), never
because a study file names one, and the connection is announced on stderr. Use it with trusted
machines only: the scheduler and its workers run the sweep's tasks, and what they send back is
unpickled on this machine, so a hostile scheduler can run code here. Only an in-process cluster
(``"inproc://…"``) needs no such consent.
"""

from __future__ import annotations

import os
import sys

import numpy as np

from slipnet.errors import ParameterError
from slipnet.notch.objectives import evaluate_candidate
from slipnet.notch.settings import Candidate, PlanSettings

__all__ = ["LOCAL_SCHEDULERS", "is_remote_scheduler", "run_sweep"]

LOCAL_SCHEDULERS = ("synchronous", "threads", "processes")


def is_remote_scheduler(scheduler: str | None) -> bool:
    """Whether ``scheduler`` is the address of a ``dask.distributed`` scheduler outside this process.

    Examples
    --------
    >>> is_remote_scheduler("tcp://10.0.0.5:8786"), is_remote_scheduler("processes")
    (True, False)
    """
    return scheduler is not None and "://" in str(scheduler) and not str(scheduler).startswith("inproc://")


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
              workers: int | None = None, progress: bool = False, allow_remote: bool = False) -> list[dict]:
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
        address (``"tcp://host:port"``; only with ``allow_remote=True``).
    workers
        Local workers (default: the machine's cores); ignored for a cluster address.
    progress
        Show a progress bar.
    allow_remote
        Consent to send the sweep to a remote scheduler address. Trusted machines only: the
        scheduler and its workers run the tasks, and their results are unpickled here. The
        connection is announced on stderr.

    Raises
    ------
    ParameterError
        For an unknown scheduler name, a remote address without ``allow_remote``, or an
        unreachable scheduler address.
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
        if is_remote_scheduler(sched):
            if not allow_remote:
                raise ParameterError(
                    f"scheduler {sched!r} is a remote dask scheduler, which runs the sweep's tasks and sends back "
                    "data unpickled here; it should be asked for explicitly: --scheduler ADDRESS on the command "
                    "line or allow_remote=True in Python (trusted machines only); got it without that consent")
            print(f"notch: connecting to the remote dask scheduler {sched} (trusted machines only: its workers run "
                  "the sweep's tasks and their results are unpickled on this machine)", file=sys.stderr)
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
















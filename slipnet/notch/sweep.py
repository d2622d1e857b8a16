"""Run notch-placement sweeps on Dask: every candidate evaluated, in chunks, on any scheduler.

Candidates are split into chunks, each chunk evaluated by one task
(:func:`slipnet.notch.evaluate_candidate` per candidate). Each candidate's Monte Carlo draws come
from its own seed (``SeedSequence([seed, candidate index])``), and results are put back in
candidate order, so the table is the same on every scheduler and with any number of workers.

Worker processes cost seconds to start (imports, compiled-kernel loads), so they are kept in a
:class:`SweepPool` for a whole study: started at the first sweep that needs them, reused by every
later sweep (a batch over many maps), closed at the end. Each grain graph is sent to every worker
once (``scatter(..., broadcast=True)``) and stays there as one object, so the forecast's
per-graph geometry is built once per worker, not once per task. :func:`run_sweep` without a pool
opens one for its own call.

A remote ``dask.distributed`` scheduler (``"tcp://host:port"``, ``"tls://…"``) is used only when the
caller asks for it (``allow_remote=True``; on the command line, ``--scheduler ADDRESS``), never
because a study file names one, and the connection is announced on stderr. Use it with trusted
machines only: the scheduler and its workers run the sweep's tasks, and what they send back is
unpickled on this machine, so a hostile scheduler can run code here. Only an in-process cluster
(``"inproc://…"``) needs no such consent.
"""

from __future__ import annotations

import math
import os
import sys

from slipnet.errors import ParameterError
from slipnet.notch.objectives import evaluate_candidate
from slipnet.notch.settings import Candidate, PlanSettings

__all__ = ["LOCAL_SCHEDULERS", "SweepPool", "is_remote_scheduler", "run_sweep"]

LOCAL_SCHEDULERS = ("synchronous", "threads", "processes")

#: Forecast + growth runs per task worth its round trip: a task of a few seconds keeps the
#: scheduler's per-task cost (milliseconds) out of sight while leaving enough tasks to balance.
_EVALS_PER_TASK = 16
#: Tasks per worker at least, so the last tasks of a sweep do not leave a worker idle for long.
_TASKS_PER_WORKER = 4


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


def _prepare_worker() -> int:
    """Load the sweep's code in a worker process before the first task needs it; returns its pid."""
    import slipnet.notch.objectives  # noqa: F401  (the import is the warm-up)

    return os.getpid()


# one compute thread per worker process: numba's and BLAS's own thread pools would otherwise
# oversubscribe the cores and two workers run no faster than one (set in the environment the
# workers start with: numba's set_num_threads only acts on the thread that calls it)
_SINGLE_THREAD_ENV = {"NUMBA_NUM_THREADS": "1", "OMP_NUM_THREADS": "1", "OPENBLAS_NUM_THREADS": "1",
                      "MKL_NUM_THREADS": "1"}


def _chunk_size(n: int, samples: int, workers: int) -> int:
    """Candidates per task: about :data:`_EVALS_PER_TASK` runs, and at least
    :data:`_TASKS_PER_WORKER` tasks per worker."""
    by_cost = math.ceil(_EVALS_PER_TASK / (1 + max(0, int(samples))))
    by_balance = math.ceil(n / (_TASKS_PER_WORKER * max(1, workers)))
    return max(1, min(by_cost, by_balance))


def _chunks(items: list, size: int) -> list[list]:
    return [items[i:i + size] for i in range(0, len(items), size)]


class SweepPool:
    """Where sweeps run: a scheduler and, for worker processes, the workers kept between sweeps.

    Use it as a context manager around every sweep of a study (``with SweepPool("processes",
    2) as pool: run_sweep(..., pool=pool)``). Worker processes (``"processes"``, a
    ``dask.distributed`` local cluster of single-threaded workers) or the connection to a
    cluster address start at the first sweep and stay until :meth:`close`; each grain graph is
    sent to every worker once and kept there while it is the pool's current graph.

    Parameters
    ----------
    scheduler
        ``"synchronous"`` (this process), ``"threads"``, ``"processes"`` or a ``dask.distributed``
        scheduler address (``"tcp://host:port"``; only with ``allow_remote=True``).
    workers
        Local workers (default: the machine's cores); ignored for a cluster address.
    allow_remote
        Consent to send sweeps to a remote scheduler address (trusted machines only; see the
        module docstring). The connection is announced on stderr.

    Raises
    ------
    ParameterError
        For an unknown scheduler name, ``workers`` below 1 or a remote address without
        ``allow_remote`` (at once); an unreachable address at the first sweep.

    Examples
    --------
    >>> with SweepPool("threads", workers=2) as pool:
    ...     pool.scheduler, pool.workers
    ('threads', 2)
    """

    def __init__(self, scheduler: str = "synchronous", workers: int | None = None, *,
                 allow_remote: bool = False) -> None:
        sched = str(scheduler)
        if sched not in LOCAL_SCHEDULERS and "://" not in sched:
            raise ParameterError(
                f"scheduler should be one of {', '.join(LOCAL_SCHEDULERS)} or a dask.distributed address "
                f"such as 'tcp://127.0.0.1:8786'; got {scheduler!r}")
        if is_remote_scheduler(sched) and not allow_remote:
            raise ParameterError(
                f"scheduler {sched!r} is a remote dask scheduler, which runs the sweep's tasks and sends back "
                "data unpickled here; it should be asked for explicitly: --scheduler ADDRESS on the command "
                "line or allow_remote=True in Python (trusted machines only); got it without that consent")
        try:
            nw = int(workers) if workers else (os.cpu_count() or 1)
        except (TypeError, ValueError) as err:
            raise ParameterError(f"workers should be a whole number >= 1; got {workers!r}") from err
        if nw < 1:
            raise ParameterError(f"workers should be >= 1; got {workers!r}")
        self.scheduler = sched
        self.workers = nw
        self._cluster = None
        self._client = None
        self._graph = None  # (grain graph, its future on the workers): the graph kept there

    # ------------------------------------------------------------------ lifetime
    def __enter__(self) -> SweepPool:
        return self

    def __exit__(self, *exc) -> None:
        self.close()

    def close(self) -> None:
        """Stop the worker processes (or leave the cluster); the pool can start them again."""
        self._graph = None
        client, cluster = self._client, self._cluster
        self._client = self._cluster = None
        try:
            if client is not None:
                client.close()
        finally:
            if cluster is not None:
                cluster.close()

    @property
    def client(self):
        """The ``distributed.Client`` of the workers once started (None before, and for
        ``"synchronous"`` / ``"threads"``)."""
        return self._client

    @property
    def distributed(self) -> bool:
        """Whether sweeps run on ``dask.distributed`` workers (worker processes or a cluster)."""
        return self.scheduler == "processes" or "://" in self.scheduler

    def start(self):
        """Start the worker processes (or connect to the cluster) now rather than at the first
        sweep; returns the ``distributed.Client`` (None for ``"synchronous"`` / ``"threads"``)."""
        if not self.distributed:
            return None
        if self._client is not None:
            return self._client
        from distributed import Client

        if self.scheduler == "processes":
            import logging

            from distributed import LocalCluster

            # ":0": any free port; None would still ask for 8787 and warn when another cluster holds it
            self._cluster = LocalCluster(n_workers=self.workers, threads_per_worker=1, processes=True,
                                         dashboard_address=":0", silence_logs=logging.ERROR,
                                         env=dict(_SINGLE_THREAD_ENV))
            self._client = Client(self._cluster, set_as_default=False)
            # every worker imports the sweep's code now, side by side, not inside its first task
            self._client.run(_prepare_worker)
            return self._client
        if is_remote_scheduler(self.scheduler):
            print(f"notch: connecting to the remote dask scheduler {self.scheduler} (trusted machines only: its "
                  "workers run the sweep's tasks and their results are unpickled on this machine)", file=sys.stderr)
        try:
            self._client = Client(self.scheduler, timeout="10s", set_as_default=False)
        except (OSError, TimeoutError) as err:
            raise ParameterError(
                f"could not reach the dask scheduler at {self.scheduler!r} ({err}); start one with `dask scheduler` "
                "and workers with `dask worker ADDRESS`, or use scheduler='processes'"
            ) from err
        return self._client

    def _graph_on_workers(self, client, gg):
        """The future of ``gg`` on every worker, sent once while ``gg`` stays the current graph."""
        if self._graph is None or self._graph[0] is not gg:
            self._graph = None  # drops the previous graph's future, so the workers free it
            self._graph = (gg, client.scatter(gg, broadcast=True, hash=False))
        return self._graph[1]

    def _worker_count(self, client) -> int:
        if self.scheduler == "processes":
            return self.workers
        return max(1, len(client.scheduler_info().get("workers", {})))

    # ------------------------------------------------------------------ running
    def map(self, gg, candidates: list[Candidate], s: PlanSettings, systems=None, *,
            progress: bool = False) -> list[dict]:
        """Rows of every candidate, in candidate order (see :func:`run_sweep`)."""
        if not candidates:
            raise ParameterError("no candidate notch positions to evaluate")
        if self.scheduler == "synchronous":
            from slipnet._progress import progress_iter

            rows = [evaluate_candidate(gg, c, s, systems)
                    for c in progress_iter(candidates, progress, "notch candidates", total=len(candidates),
                                           unit="candidate")]
        elif self.scheduler == "threads":
            import dask

            chunks = _chunks(candidates, _chunk_size(len(candidates), s.samples, self.workers))
            tasks = [dask.delayed(_eval_chunk)(gg, c, s, systems) for c in chunks]
            kw = {"scheduler": "threads", "num_workers": self.workers}
            if progress:
                from dask.diagnostics import ProgressBar

                with ProgressBar():
                    parts = dask.compute(*tasks, **kw)
            else:
                parts = dask.compute(*tasks, **kw)
            rows = [r for part in parts for r in part]
        else:
            rows = self._map_distributed(gg, candidates, s, systems, progress)
        return sorted(rows, key=lambda r: r["candidate"])

    def _map_distributed(self, gg, candidates, s, systems, progress: bool) -> list[dict]:
        client = self.start()
        gg_f = self._graph_on_workers(client, gg)
        chunks = _chunks(candidates, _chunk_size(len(candidates), s.samples, self._worker_count(client)))
        futures = [client.submit(_eval_chunk, gg_f, c, s, systems, pure=False) for c in chunks]
        if progress:
            from distributed import as_completed
            from tqdm.auto import tqdm

            for _ in tqdm(as_completed(futures), total=len(futures), desc="notch candidates", leave=False):
                pass
        parts = client.gather(futures)
        return [r for part in parts for r in part]


def run_sweep(gg, candidates: list[Candidate], s: PlanSettings, *, systems=None, scheduler: str = "synchronous",
              workers: int | None = None, progress: bool = False, allow_remote: bool = False,
              pool: SweepPool | None = None) -> list[dict]:
    """Evaluate every candidate on a Dask scheduler; rows come back in candidate order.

    Parameters
    ----------
    gg
        The grain graph (sent once to every worker process).
    candidates
        From :func:`slipnet.notch.candidate_positions`.
    s
        Plan settings.
    systems
        Slip systems (default: those of the map's first phase).
    scheduler
        ``"synchronous"``, ``"threads"``, ``"processes"`` or a ``dask.distributed`` scheduler
        address (``"tcp://host:port"``; only with ``allow_remote=True``). Ignored with ``pool``.
    workers
        Local workers (default: the machine's cores); ignored for a cluster address and with ``pool``.
    progress
        Show a progress bar.
    allow_remote
        Consent to send the sweep to a remote scheduler address. Trusted machines only: the
        scheduler and its workers run the tasks, and their results are unpickled here. The
        connection is announced on stderr.
    pool
        A :class:`SweepPool` kept open by the caller for several sweeps (its workers are reused
        and left running); without one, the sweep opens its own and closes it at the end.

    Raises
    ------
    ParameterError
        For an unknown scheduler name, a remote address without ``allow_remote``, or an
        unreachable scheduler address.
    """
    if not candidates:
        raise ParameterError("no candidate notch positions to evaluate")
    if pool is not None:
        return pool.map(gg, candidates, s, systems, progress=progress)
    with SweepPool(scheduler, workers, allow_remote=allow_remote) as own:
        return own.map(gg, candidates, s, systems, progress=progress)

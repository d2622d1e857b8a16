"""Run the harness's per-case work as Dask tasks on any scheduler; results come back in item order."""

from __future__ import annotations

import os

from slipnet.errors import ParameterError

__all__ = ["LOCAL_SCHEDULERS", "run_tasks"]

LOCAL_SCHEDULERS = ("synchronous", "threads", "processes", "local")


def _single_threaded_worker() -> None:
    import numba
    from threadpoolctl import threadpool_limits

    numba.set_num_threads(1)
    threadpool_limits(1)


def run_tasks(fn, items: list, args: tuple, *, scheduler: str = "local", workers: int | None = None,
              progress: bool = False, desc: str = "validation") -> list:
    """``[fn(item, *args) for item in items]`` as Dask tasks; results in item order.

    ``scheduler``: ``"synchronous"`` (in this process), ``"threads"``, ``"processes"``, ``"local"`` (a
    ``dask.distributed`` local cluster of single-threaded worker processes) or the address of a
    running ``dask.distributed`` scheduler (``"tcp://host:8786"``) for more machines.
    """
    if not items:
        raise ParameterError("no cases to run; give at least one seed")
    sched = str(scheduler)
    nw = int(workers) if workers else min(len(items), os.cpu_count() or 1)
    if nw < 1:
        raise ParameterError(f"workers should be >= 1; got {workers!r}")
    if sched == "synchronous" or (sched in LOCAL_SCHEDULERS and nw == 1 and sched != "local"):
        from slipnet._progress import progress_iter

        return [fn(it, *args) for it in progress_iter(items, progress, desc, total=len(items), unit="case")]
    if sched in ("threads", "processes"):
        import dask

        tasks = [dask.delayed(fn)(it, *args) for it in items]
        kw: dict = {"scheduler": sched, "num_workers": nw}
        pool = None
        if sched == "processes":
            import multiprocessing
            from concurrent.futures import ProcessPoolExecutor

            pool = ProcessPoolExecutor(max_workers=nw, mp_context=multiprocessing.get_context("spawn"),
                                       initializer=_single_threaded_worker)
            kw = {"scheduler": sched, "pool": pool}
        try:
            if progress:
                from dask.diagnostics import ProgressBar

                with ProgressBar():
                    return list(dask.compute(*tasks, **kw))
            return list(dask.compute(*tasks, **kw))
        finally:
            if pool is not None:
                pool.shutdown()
    if sched == "local" or "://" in sched:
        return _distributed(fn, items, args, sched, nw, progress, desc)
    raise ParameterError(f"scheduler should be one of {', '.join(LOCAL_SCHEDULERS)} or a dask.distributed address "
                         f"such as 'tcp://127.0.0.1:8786'; got {scheduler!r}")


def _distributed(fn, items, args, address: str, nw: int, progress: bool, desc: str) -> list:
    from distributed import Client, LocalCluster, as_completed

    cluster = None
    try:
        if address == "local":
            cluster = LocalCluster(n_workers=nw, threads_per_worker=1, processes=True, dashboard_address=":0")
            client = Client(cluster, set_as_default=False)
            client.run(_single_threaded_worker)
        else:
            client = Client(address, timeout="10s", set_as_default=False)
    except (OSError, TimeoutError) as err:
        if cluster is not None:
            cluster.close()
        raise ParameterError(f"could not reach the dask scheduler at {address!r} ({err}); start one with "
                             "`dask scheduler` and workers with `dask worker ADDRESS`, or use scheduler='local'"
                             ) from err
    try:
        futures = [client.submit(fn, it, *args, pure=False) for it in items]
        if progress:
            from tqdm.auto import tqdm

            for _ in tqdm(as_completed(futures), total=len(futures), desc=desc, unit="case", leave=False):
                pass
        return client.gather(futures)
    finally:
        client.close()
        if cluster is not None:
            cluster.close()

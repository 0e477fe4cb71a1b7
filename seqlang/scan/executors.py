"""Where the points run: in this process, a local process pool, or a Dask cluster.

Each executor yields finished points as they complete, keeping only a few in
flight, so the driver's memory does not grow with the number of points. Every
point's numbers depend only on the job and its index, never on the executor.
"""
from __future__ import annotations

import contextlib
import multiprocessing
import os
import signal
import sys
from typing import Iterable, Iterator

from .work import Job, run_point

IN_FLIGHT_PER_WORKER = 2


def default_workers() -> int:
    return max(1, len(os.sched_getaffinity(0)) if hasattr(os, "sched_getaffinity") else os.cpu_count() or 1)


def run_points(job: Job, indices: list[int], workers: int | None = None, scheduler: str | None = None,
               dask_processes: bool = True) -> Iterator[dict]:
    """Finished points of `indices`, in completion order."""
    if scheduler is not None:
        return _dask(job, indices, scheduler, workers or default_workers(), dask_processes)
    workers = workers or default_workers()
    if workers == 1 or len(indices) <= 1:
        return _serial(job, indices)
    return _pool(job, indices, workers)


def _serial(job: Job, indices: Iterable[int]) -> Iterator[dict]:
    for index in indices:
        yield run_point(job, index)


def _ignore_interrupts() -> None:
    # The driver handles Ctrl-C and stops the workers; they must not die half-way through a point.
    signal.signal(signal.SIGINT, signal.SIG_IGN)


def _run_one(args) -> dict:
    return run_point(*args)


@contextlib.contextmanager
def _workers_skip_main():
    """New worker processes would re-run the caller's script (``__main__``) before their first
    task, looping forever in a script without an ``if __name__ == "__main__"`` guard. The
    task lives in seqlang, so the workers are started without it."""
    main = sys.modules.get("__main__")
    saved = {k: getattr(main, k) for k in ("__file__", "__spec__") if hasattr(main, k)}
    if "__file__" in saved:
        del main.__file__
    main.__spec__ = None
    try:
        yield
    finally:
        for key, value in saved.items():
            setattr(main, key, value)


def _pool(job: Job, indices: list[int], workers: int) -> Iterator[dict]:
    # forkserver: workers start from a clean, pre-imported process, not a fork of a driver
    # that may hold threads (the store's I/O loop).
    context = multiprocessing.get_context("forkserver")
    context.set_forkserver_preload(["seqlang.scan.work", "seqlang.sim.api"])
    with _workers_skip_main():
        pool = context.Pool(min(workers, len(indices)), initializer=_ignore_interrupts)
    finished = False
    try:
        yield from pool.imap_unordered(_run_one, ((job, i) for i in indices), chunksize=1)
        finished = True
    finally:
        if finished:
            pool.close()
        else:  # interrupted: the points in flight are given up
            pool.terminate()
        pool.join()


def _dask(job: Job, indices: list[int], scheduler: str, workers: int, processes: bool) -> Iterator[dict]:
    from distributed import as_completed
    with _dask_client(scheduler, workers, processes) as client:
        limit = max(1, IN_FLIGHT_PER_WORKER * len(client.scheduler_info()["workers"]))
        pending = iter(indices)
        submit = lambda i: client.submit(run_point, job, i, key=f"seqlang-point-{job.fingerprint[:12]}-{i}",
                                         pure=False)
        queue = as_completed([submit(i) for _, i in zip(range(limit), pending)])
        for future in queue:
            result = future.result()
            future.release()
            following = next(pending, None)
            if following is not None:
                queue.add(submit(following))
            yield result


@contextlib.contextmanager
def mapper(workers: int = 1, scheduler: str | None = None, preload: tuple[str, ...] = ()):
    """A `map(function, items) -> list` in the items' order, over the same executors as the points:
    this process (`workers` 1), a local process pool, or a Dask cluster (`scheduler` an address or
    `local`). The pool or cluster lives as long as the context, so repeated maps (an optimiser's
    generations) pay its start once. `function` and the items must pickle."""
    if scheduler is not None:
        with _dask_client(scheduler, workers or default_workers(), True) as client:
            yield lambda function, items: client.gather(client.map(function, list(items), pure=False))
        return
    workers = workers or default_workers()
    if workers == 1:
        yield lambda function, items: [function(item) for item in items]
        return
    context = multiprocessing.get_context("forkserver")
    context.set_forkserver_preload(list(preload) or ["seqlang.sim.api"])
    with _workers_skip_main():
        pool = context.Pool(workers, initializer=_ignore_interrupts)
    try:
        yield lambda function, items: pool.map(function, list(items), chunksize=1)
        pool.close()
    except BaseException:
        pool.terminate()
        raise
    finally:
        pool.join()


@contextlib.contextmanager
def _dask_client(scheduler: str, workers: int, processes: bool):
    from distributed import Client, LocalCluster
    cluster = None
    if scheduler == "local":
        with _workers_skip_main():
            cluster = LocalCluster(n_workers=workers, threads_per_worker=1, processes=processes,
                                   dashboard_address=None)
    client = Client(cluster if cluster is not None else scheduler)
    try:
        yield client
    finally:
        client.close()
        if cluster is not None:
            cluster.close()

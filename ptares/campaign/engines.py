"""Where campaign tasks run: a local process pool or a Dask cluster.

Workers only compute and hand rows back; each runs with the sweep's thread count
(BLAS, numba; one by default), which keeps results identical whatever the number of
workers and avoids oversubscribing the cores.
"""

from __future__ import annotations

import functools
import os
from concurrent.futures import ProcessPoolExecutor, as_completed
from concurrent.futures.process import BrokenProcessPool
from contextlib import contextmanager

from ptares.campaign.tasks import run_task
from ptares.errors import InputError
from ptares.threads import current_threads, pin_process, thread_count, thread_environment, thread_limits

__all__ = ["SINGLE_THREAD", "threaded_children", "single_threaded_children", "run_locally", "run_on_dask",
           "dask_client"]


#: Threading variables that give a worker process one thread per pool (for cluster job scripts).
SINGLE_THREAD = thread_environment(1)


@contextmanager
def threaded_children(threads: int):
    """Environment for child processes (workers) with ``threads`` BLAS, OpenMP and numba threads each."""
    variables = thread_environment(threads)
    saved = {k: os.environ.get(k) for k in variables}
    os.environ.update(variables)
    try:
        yield
    finally:
        for key, value in saved.items():
            if value is None:
                os.environ.pop(key, None)
            else:
                os.environ[key] = value


def single_threaded_children():
    """Environment for child processes (workers) with one BLAS, OpenMP and numba thread each."""
    return threaded_children(1)


def run_locally(tasks, workers, threads: int | None = None, function=run_task, where: str = "sweep"):
    """Rows of ``function(task)`` (a campaign task by default) as ``workers`` local processes finish them,
    each process with ``threads`` threads (None: the count in effect here, see
    :func:`~ptares.threads.current_threads`); ``where`` names the command in messages."""
    import multiprocessing

    threads = current_threads() if threads is None else thread_count(threads)
    # the environment sizes the pools a worker starts with; pin_process also limits the BLAS that
    # importing ptares has already loaded there, and passes the sizes on to the worker's own children
    with threaded_children(threads):
        with ProcessPoolExecutor(max_workers=workers, mp_context=multiprocessing.get_context("spawn"),
                                 initializer=pin_process, initargs=(threads,)) as pool:
            futures = [pool.submit(function, task) for task in tasks]
            try:
                for future in as_completed(futures):
                    try:
                        yield future.result()
                    except BrokenProcessPool:
                        raise InputError("a worker process died (out of memory?); finished tasks are kept, "
                                         "rerun the same command to continue", where) from None
            except BaseException:
                for future in futures:
                    future.cancel()
                raise


def _run_with_threads(task, threads: int, function=run_task) -> dict:
    """``function(task)`` under ``threads`` threads; a Dask worker process is shared, so the limits last only the task."""
    with thread_limits(threads):
        return function(task)


def dask_client(scheduler):
    """A client of the Dask ``scheduler`` (an address, or a client, returned as it is); an address that
    cannot be reached is an :class:`~ptares.errors.InputError` naming it."""
    from distributed import Client

    if not isinstance(scheduler, str):
        return scheduler
    try:
        return Client(scheduler, timeout="20s")
    except OSError as exc:
        raise InputError(f"cannot reach the Dask scheduler ({exc})", scheduler) from None


def run_on_dask(tasks, scheduler, threads: int | None = None, function=run_task):
    """Rows of ``function(task)`` (a campaign task by default) as the Dask ``scheduler`` (address or client)
    finishes them, each task run with ``threads`` threads (None: the count in effect here)."""
    from distributed import as_completed as dask_completed

    client = dask_client(scheduler)
    threads = current_threads() if threads is None else thread_count(threads)
    try:
        futures = client.map(functools.partial(_run_with_threads, threads=threads, function=function), tasks, pure=False)
        for future in dask_completed(futures):
            yield future.result()
    finally:
        if isinstance(scheduler, str):
            client.close()

"""Where campaign tasks run: a local process pool or a Dask cluster.

Workers only compute and hand rows back; they run with one thread each (BLAS,
numba), which keeps results identical whatever the number of workers and avoids
oversubscribing the cores.
"""

from __future__ import annotations

import os
from concurrent.futures import ProcessPoolExecutor, as_completed
from concurrent.futures.process import BrokenProcessPool
from contextlib import contextmanager

from ptares.campaign.tasks import run_task
from ptares.errors import InputError

__all__ = ["SINGLE_THREAD", "single_threaded_children", "run_locally", "run_on_dask"]


#: Threading variables set to 1 in worker processes.
SINGLE_THREAD = {"OPENBLAS_NUM_THREADS": "1", "OMP_NUM_THREADS": "1", "MKL_NUM_THREADS": "1", "NUMBA_NUM_THREADS": "1"}


@contextmanager
def single_threaded_children():
    """Environment for child processes (workers) with one BLAS, OpenMP and numba thread each."""
    saved = {k: os.environ.get(k) for k in SINGLE_THREAD}
    os.environ.update(SINGLE_THREAD)
    try:
        yield
    finally:
        for key, value in saved.items():
            if value is None:
                os.environ.pop(key, None)
            else:
                os.environ[key] = value


def run_locally(tasks, workers):
    import multiprocessing

    with single_threaded_children():
        with ProcessPoolExecutor(max_workers=workers, mp_context=multiprocessing.get_context("spawn")) as pool:
            futures = [pool.submit(run_task, task) for task in tasks]
            try:
                for future in as_completed(futures):
                    try:
                        yield future.result()
                    except BrokenProcessPool:
                        raise InputError("a worker process died (out of memory?); finished tasks are kept, "
                                         "rerun the same command to continue", "sweep") from None
            except BaseException:
                for future in futures:
                    future.cancel()
                raise


def run_on_dask(tasks, scheduler):
    from distributed import Client
    from distributed import as_completed as dask_completed

    if isinstance(scheduler, str):
        try:
            client = Client(scheduler, timeout="20s")
        except OSError as exc:
            raise InputError(f"cannot reach the Dask scheduler ({exc})", scheduler) from None
    else:
        client = scheduler
    try:
        futures = client.map(run_task, tasks, pure=False)
        for future in dask_completed(futures):
            yield future.result()
    finally:
        if isinstance(scheduler, str):
            client.close()

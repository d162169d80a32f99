"""How many threads the numerical libraries may use in each ptares process.

numpy and scipy call BLAS (OpenBLAS or MKL), which starts a pool of threads as large as
the machine; numba's parallel kernels have a pool of their own.  Left alone, these pools
fight every other busy process for the cores, and on a shared machine a fit then runs
many times slower.  Every command and every worker therefore runs under
:func:`thread_limits` (or, in a worker process, :func:`pin_process`) with a deliberate
count.  Environment variables alone are not enough: a BLAS library already loaded in the
running process has read them before, so the limits are applied with ``threadpoolctl``
and ``numba.set_num_threads`` as well.
"""

from __future__ import annotations

import operator
import os
from contextlib import contextmanager

from ptares.errors import InputError

__all__ = ["DEFAULT_THREADS", "thread_count", "thread_environment", "thread_limits", "current_threads",
           "pin_process", "worker_initializer"]

#: Threads per process unless the user asks for more.  One, because ptares runs on shared
#: machines where another busy process makes larger pools much slower, not faster; ptares
#: gets its parallelism from processes instead (sweep workers, fit workers), each with this many threads.
DEFAULT_THREADS = 1

#: The environment variables that size the thread pools of processes started later.
THREAD_VARIABLES = ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS", "NUMBA_NUM_THREADS")

_current: int | None = None  # the count applied by the innermost thread_limits or by pin_process


def thread_count(count, where: str = "--threads") -> int:
    """``count`` checked as a number of threads (an integer of at least 1); None gives :data:`DEFAULT_THREADS`.

    Anything else is an :class:`~ptares.errors.InputError` naming ``where``.
    """
    if count is None:
        return DEFAULT_THREADS
    try:
        if isinstance(count, bool):
            raise TypeError
        value = operator.index(count)
    except TypeError:
        raise InputError(f"must be a whole number of threads, got {count!r}", where) from None
    if value < 1:
        raise InputError(f"must be at least 1, got {value}", where)
    return value


def thread_environment(count: int) -> dict:
    """The environment variables (name -> text) that give a process started later ``count`` threads per pool."""
    return dict.fromkeys(THREAD_VARIABLES, str(thread_count(count)))


def current_threads() -> int:
    """The count set by the innermost :func:`thread_limits` or by :func:`pin_process`, else :data:`DEFAULT_THREADS`."""
    return DEFAULT_THREADS if _current is None else _current


def _load_thread_pools():
    """Load the libraries that own thread pools, so that limits reach them.

    threadpoolctl sees only libraries already loaded, and scipy carries a BLAS of its own
    besides numpy's; numba's pool starts with its first parallel call or size query.
    """
    import numba
    import numpy  # noqa: F401
    import scipy.linalg  # noqa: F401

    return numba


@contextmanager
def thread_limits(count: int | None):
    """Run the body with ``count`` BLAS, OpenMP and numba threads in this process (None: :data:`DEFAULT_THREADS`).

    The previous sizes are restored on exit.  numba cannot exceed the pool it started
    with (``NUMBA_NUM_THREADS``, the core count by default), so it gets at most that.
    """
    global _current
    count = thread_count(count)
    from threadpoolctl import threadpool_limits

    numba = _load_thread_pools()
    numba_before = numba.get_num_threads()
    previous = _current
    numba.set_num_threads(min(count, numba.config.NUMBA_NUM_THREADS))
    try:
        with threadpool_limits(limits=count):
            _current = count
            yield count
    finally:
        _current = previous
        numba.set_num_threads(numba_before)


def pin_process(count: int | None) -> None:
    """Give this whole process ``count`` threads per pool for the rest of its life; for worker initialisers.

    Also sets the environment variables, so that processes it starts (grand-children
    of a command) begin with the same sizes.
    """
    global _current
    count = thread_count(count)
    os.environ.update(thread_environment(count))
    from threadpoolctl import threadpool_limits

    numba = _load_thread_pools()
    numba.set_num_threads(min(count, numba.config.NUMBA_NUM_THREADS))
    threadpool_limits(limits=count)  # applied at once and kept: nothing restores it
    _current = count


def worker_initializer(count: int | None, then=None, *arguments) -> None:
    """Initialiser of a process pool: :func:`pin_process` with ``count``, then ``then(*arguments)`` if given.

    It combines with a pool's own initialiser, which must be picklable like it::

        Pool(n, initializer=worker_initializer, initargs=(current_threads(), _ignore_interrupts))
    """
    pin_process(count)
    if then is not None:
        then(*arguments)

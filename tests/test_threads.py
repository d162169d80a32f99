"""Thread limits: BLAS and numba pools of this process, of worker processes, of commands and of the API."""

import functools
import multiprocessing
import os
import signal
from concurrent.futures import ProcessPoolExecutor

import numba
import numpy as np
import pytest
import threadpoolctl
from conftest import small_config

import ptares
from ptares.cli import main
from ptares.errors import InputError
from ptares.inference.parameters import COMMON_INDEX
from ptares.threads import (
    DEFAULT_THREADS,
    THREAD_VARIABLES,
    current_threads,
    thread_count,
    thread_limits,
    worker_initializer,
)


def blas_threads() -> list:
    """The thread count of every BLAS library loaded in this process."""
    return [lib["num_threads"] for lib in threadpoolctl.threadpool_info() if lib["user_api"] == "blas"]


def pool_sizes() -> dict:
    """Library file -> thread count, for every BLAS and OpenMP library loaded in this process."""
    return {lib["filepath"]: lib["num_threads"] for lib in threadpoolctl.threadpool_info()}


def test_thread_limits_sets_blas_and_numba_and_restores_them():
    import scipy.linalg  # noqa: F401  (its BLAS is a library of its own besides numpy's)

    numba_before = numba.get_num_threads()  # first: it may load numba's OpenMP library
    before = pool_sizes()
    with thread_limits(1) as count:
        assert count == 1 and current_threads() == 1
        threads = blas_threads()
        assert len(threads) >= 1 and set(threads) == {1}
        assert numba.get_num_threads() == 1
    assert pool_sizes() == before
    assert numba.get_num_threads() == numba_before
    assert current_threads() == DEFAULT_THREADS


def test_nested_limits_restore_the_outer_count():
    with thread_limits(2):
        with thread_limits(1):
            assert current_threads() == 1
        assert current_threads() == 2
        assert set(blas_threads()) == {2}
        assert numba.get_num_threads() == min(2, numba.config.NUMBA_NUM_THREADS)


@pytest.mark.parametrize("value", [0, -3, 1.5, "2", True, None])
def test_thread_count_accepts_whole_numbers_only(value):
    if value is None:
        assert thread_count(value) == DEFAULT_THREADS
        return
    with pytest.raises(InputError, match="^--threads: "):
        thread_count(value)
    assert thread_count(np.int64(3)) == 3


@pytest.mark.parametrize("value, words", [("0", "must be at least 1, got 0"), ("x", "whole number of threads, got 'x'")])
@pytest.mark.parametrize("before_command", [False, True])
def test_bad_threads_option_is_one_line_and_exit_2(tmp_path, capsys, value, words, before_command):
    argv = ["check", str(tmp_path / "none.toml")]
    argv = ["--threads", value, *argv] if before_command else [*argv, "--threads", value]
    with pytest.raises(SystemExit) as stopped:
        main(argv)
    assert stopped.value.code == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "argument --threads" in err and words in err


def test_worker_initializer_pins_a_spawned_worker_and_runs_the_next_initializer():
    """A pool as the sweep and the fit make it: every BLAS library and numba at the chosen count, the
    environment passed on to the worker's own children, and the initializer combined with another."""
    ignore_interrupts = functools.partial(signal.signal, signal.SIGINT, signal.SIG_IGN)
    with ProcessPoolExecutor(1, mp_context=multiprocessing.get_context("spawn"),
                             initializer=worker_initializer, initargs=(1, ignore_interrupts)) as pool:
        info = pool.submit(threadpoolctl.threadpool_info).result()
        numba_threads = pool.submit(numba.get_num_threads).result()
        environment = [pool.submit(os.getenv, name).result() for name in THREAD_VARIABLES]
        handler = pool.submit(signal.getsignal, signal.SIGINT).result()
    blas = [lib["num_threads"] for lib in info if lib["user_api"] == "blas"]
    assert len(blas) >= 2 and set(blas) == {1}, info  # numpy's and scipy's
    assert numba_threads == 1
    assert environment == ["1"] * len(THREAD_VARIABLES)
    assert handler == signal.SIG_IGN


def test_fit_runs_under_its_threads(monkeypatch):
    from ptares.inference import model

    seen = []

    class Watched(model.FitModel):
        def __init__(self, *args, **kwargs):
            seen.append((blas_threads(), numba.get_num_threads()))
            super().__init__(*args, **kwargs)

    monkeypatch.setattr(model, "FitModel", Watched)
    data = ptares.simulate(small_config(array={"random": {"count": 2}}), seed=1)
    fitted = ptares.fit(data, common="uncorrelated", red="none", fixed={COMMON_INDEX: 13 / 3}, max_steps=20,
                        seed=1, threads=1)
    assert fitted.steps == 20
    assert seen and all(set(blas) == {1} and numba_threads == 1 for blas, numba_threads in seen)
    with pytest.raises(InputError, match="^threads: must be at least 1"):
        ptares.fit(data, max_steps=20, threads=0)

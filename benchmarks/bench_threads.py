"""Thread limits on a shared machine, as times measured side by side in one run (never asserted).

Case: a fixed-length fit (every step run) of the Hellings–Downs background to a small
array, through the Python API, timed

* on a quiet machine, with ptares's default threads;
* while another process keeps one core busy with numpy matrix products, with the
  default threads (target: at most 1.3x the quiet time);
* the same busy machine with threads = all cores, for contrast: BLAS and numba pools
  as large as the machine wait on the core the other process holds.  This one runs a
  tenth of the steps, scaled to the whole length (it is that slow).

The other process sizes its own BLAS pool as it likes but gets one core's worth of work:
one product at a time of matrices too small for OpenBLAS to split over threads.  Each run
also prints the cores ptares got on average and the CPU time it burnt: at one thread the
CPU time stays that of the quiet run, and a wall time above it means yet other programs
were busy too; pools that wait on a busy core burn CPU time while they wait.

Run: ``python benchmarks/bench_threads.py``
"""

from __future__ import annotations

import multiprocessing
import os
import time

from common import regular_array

import ptares
from ptares.inference.parameters import COMMON_INDEX
from ptares.threads import DEFAULT_THREADS

PULSARS, TOAS, FREQUENCIES, STEPS = 10, 300, 10, 600


def keep_one_core_busy(stop, report) -> None:
    """Matrix products in a loop until ``stop`` is set (in its own process, with numpy's default threads);
    puts the cores it used on average into ``report``."""
    import numpy as np

    rng = np.random.default_rng(0)
    a, b = rng.standard_normal((2, 48, 48))
    start, cpu = time.perf_counter(), time.process_time()
    while not stop.is_set():
        for _ in range(200):
            a = np.tanh(a @ b)
    report.put((time.process_time() - cpu) / (time.perf_counter() - start))


def timed_fit(data, threads: int, steps: int = STEPS) -> tuple:
    """``(wall-clock time (s) scaled to STEPS steps, cores used on average)`` of a fit of ``steps`` steps
    with ``threads`` threads."""
    start, cpu = time.perf_counter(), time.process_time()
    result = ptares.fit(data, common="hellings-downs", red="injected", fixed={COMMON_INDEX: 13 / 3},
                        max_steps=steps, autocorr_factor=1e6, seed=1, threads=threads)
    elapsed = time.perf_counter() - start
    assert result.steps == steps
    return elapsed * STEPS / steps, (time.process_time() - cpu) / elapsed


def main():
    cores = os.cpu_count() or 1
    data = ptares.simulate(regular_array(PULSARS, TOAS, FREQUENCIES, seed=3))
    ptares.fit(data, common="hellings-downs", red="injected", fixed={COMMON_INDEX: 13 / 3},
               max_steps=10, autocorr_factor=1e6, seed=1)  # compile the numba kernels and warm the caches

    load = os.getloadavg()[0]
    quiet, quiet_cores = timed_fit(data, DEFAULT_THREADS)
    context = multiprocessing.get_context("spawn")
    stop, report = context.Event(), context.Queue()
    other = context.Process(target=keep_one_core_busy, args=(stop, report), daemon=True)
    other.start()
    try:
        time.sleep(2.0)  # let it import numpy and start
        busy, busy_cores = timed_fit(data, DEFAULT_THREADS)
        busy_all, busy_all_cores = timed_fit(data, cores, STEPS // 10)
    finally:
        stop.set()
        used = report.get(timeout=60)
        other.join()

    print(f"case: {PULSARS} pulsars x {TOAS} TOAs, {FREQUENCIES} frequencies, Hellings-Downs fit of {STEPS} steps; "
          f"{cores} cores, load average {load:.2f} before the quiet run")
    print(f"the other process used {used:.2f} cores on average while busy")
    rows = [(f"quiet, threads {DEFAULT_THREADS} (default)", quiet, quiet_cores),
            (f"one core busy, threads {DEFAULT_THREADS} (default)", busy, busy_cores),
            (f"one core busy, threads {cores} (all cores)", busy_all, busy_all_cores)]
    print(f"{'':36s} {'wall s':>8s} {'cores':>6s} {'CPU s':>8s}")
    for name, wall, used_cores in rows:
        print(f"{name:36s} {wall:8.2f} {used_cores:6.2f} {wall * used_cores:8.2f}")
    print(f"(all cores: from {STEPS // 10} steps, scaled; cores: what ptares got on average; "
          "fewer than 1 at 1 thread means more than one other process was busy)")
    print(f"ratio busy / quiet, default threads  {busy / quiet:8.2f}   (target: at most 1.3)")
    print(f"ratio busy / quiet, all cores        {busy_all / quiet:8.2f}")


if __name__ == "__main__":
    main()

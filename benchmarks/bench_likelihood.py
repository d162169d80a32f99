"""Hellings–Downs likelihood speed against its floor, as times measured side by side in one run (never asserted).

Case: 100 pulsars x 300 TOAs, the common process on 14 frequencies and each pulsar's red
noise on 30, white noise fixed (so the per-pulsar products F^T N'^-1 F are cached, as in a
fit of the background), the common amplitude changing from call to call.

* Hellings–Downs likelihood call against one ``scipy.linalg.cho_factor`` of a random
  positive-definite matrix the size of its coupled core, (100 x 2 x 14) squared: the red-noise
  frequencies above the common ones are eliminated pulsar by pulsar, so this factorisation
  is the floor (target: at most 1.3x); also against the bare LAPACK factorisation in place
  (no copy to Fortran order, no finiteness check), which is what the likelihood itself calls;
* how the cost scales: with the number of pulsars (25, 50, 100) and with the red-noise
  frequencies (30, 60), and a call whose white noise changes (no cache).

BLAS runs on one thread for both sides (threadpoolctl where it is installed, and the
thread-count environment variables set before numpy is imported), so the ratio does not
depend on the machine's core count or on what else runs on it.

Run: ``python benchmarks/bench_likelihood.py``
"""

from __future__ import annotations

import os

for _name in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ[_name] = "1"  # before numpy is imported, which reads them once

import dataclasses
import itertools
import time
from contextlib import nullcontext

import numpy as np
import scipy.linalg
from common import best_of, regular_array

from ptares.inference.likelihood import Likelihood
from ptares.simulation.simulate import simulate

try:
    from threadpoolctl import threadpool_limits
except ImportError:
    threadpool_limits = None

PULSARS, TOAS, HARMONICS, RED_HARMONICS = 100, 300, 14, 30


def fixed_white_calls(likelihood: Likelihood, pulsars: int):
    """A likelihood call with the injected white noise and a new common amplitude each time."""
    ones, zeros = np.ones(pulsars), np.zeros(pulsars)
    red_amplitude, red_spectral_index = np.full(pulsars, 1e-15), np.full(pulsars, 13 / 3)
    amplitudes = itertools.cycle(np.geomspace(1e-15, 1e-14, 7))
    likelihood(ones, zeros, red_amplitude, red_spectral_index, 2.4e-15)  # fill the white-noise cache
    return lambda: likelihood(ones, zeros, red_amplitude, red_spectral_index, next(amplitudes))


def new_white_calls(likelihood: Likelihood, pulsars: int):
    """A likelihood call whose white-noise scale is new each time (the cache never applies)."""
    zeros = np.zeros(pulsars)
    red_amplitude, red_spectral_index = np.full(pulsars, 1e-15), np.full(pulsars, 13 / 3)
    scales = itertools.count()
    return lambda: likelihood(np.full(pulsars, 1.0 + 1e-3 * next(scales)), zeros, red_amplitude, red_spectral_index, 2.4e-15)


def timed(function):
    """``function`` made to return how long it took (s)."""

    def run():
        start = time.perf_counter()
        function()
        return time.perf_counter() - start

    return run


def side_by_side(*functions, repeats: int = 9):
    """The shortest of ``repeats`` times (s) that each function reports for itself, called in turn so that
    other work on the machine slows them alike."""
    best = [float("inf")] * len(functions)
    for _ in range(repeats):
        for which, function in enumerate(functions):
            best[which] = min(best[which], function())
    return best


def main():
    data = simulate(regular_array(PULSARS, TOAS, RED_HARMONICS, seed=5, toa_error_us=0.5))
    pinned = threadpool_limits(limits=1) if threadpool_limits is not None else nullcontext()
    how = "threadpoolctl and environment variables" if threadpool_limits is not None else "environment variables set before numpy import"
    with pinned:
        likelihood = Likelihood(data, HARMONICS, RED_HARMONICS, True)
        size = PULSARS * 2 * HARMONICS
        rng = np.random.default_rng(0)
        root = rng.standard_normal((size, size))
        dense = root @ root.T + size * np.eye(size)
        fortran = np.empty_like(dense, order="F")

        def in_place():
            fortran[...] = dense
            start = time.perf_counter()
            scipy.linalg.lapack.dpotrf(fortran, lower=1, clean=0, overwrite_a=1)
            return time.perf_counter() - start

        t_likelihood, t_cholesky, t_floor = side_by_side(timed(fixed_white_calls(likelihood, PULSARS)),
                                                         timed(lambda: scipy.linalg.cho_factor(dense)), in_place)

        scaling = []
        for count in (25, 50, 100):
            subset = dataclasses.replace(data, pulsars=data.pulsars[:count])
            calls = fixed_white_calls(Likelihood(subset, HARMONICS, RED_HARMONICS, True), count)
            scaling.append((count, RED_HARMONICS, "fixed", best_of(calls)))
        wide = Likelihood(data, HARMONICS, 2 * RED_HARMONICS, True)
        scaling.append((PULSARS, 2 * RED_HARMONICS, "fixed", best_of(fixed_white_calls(wide, PULSARS))))
        for red, model in ((RED_HARMONICS, likelihood), (2 * RED_HARMONICS, wide)):
            scaling.append((PULSARS, red, "new each call", best_of(new_white_calls(model, PULSARS), repeats=3)))

    print(f"case: {PULSARS} pulsars x {TOAS} TOAs, {HARMONICS} common and {RED_HARMONICS} red-noise frequencies, "
          f"coupled core {size} x {size}")
    print(f"BLAS pinned to one thread ({how})")
    print(f"Hellings-Downs likelihood, fixed white noise   {t_likelihood * 1e3:8.1f} ms")
    print(f"one scipy cho_factor, {size} x {size}           {t_cholesky * 1e3:8.1f} ms")
    print(f"ratio likelihood / Cholesky                    {t_likelihood / t_cholesky:8.2f}   (target: at most 1.3)")
    print(f"bare LAPACK dpotrf in place, same matrix       {t_floor * 1e3:8.1f} ms   (cho_factor less its copy and checks)")
    print(f"ratio likelihood / bare dpotrf                 {t_likelihood / t_floor:8.2f}")
    print(f"scaling ({HARMONICS} common frequencies):")
    print("  pulsars  red frequencies  white noise       call")
    for count, red, white, t in scaling:
        print(f"  {count:7d}  {red:15d}  {white:13s} {t * 1e3:8.1f} ms")
    print("expected: the coupled core costs O((P 2Kc)^3 / 3), 8x per doubling of the pulsars once it dominates,\n"
          "and does not grow with the red-noise frequencies Kr; they add the per-pulsar elimination, O(P (2Kr)^3),\n"
          "and, at each change of white noise, the products F^T N'^-1 F, O(P n (2K)^2) with K = max(Kc, Kr)")

if __name__ == "__main__":
    main()

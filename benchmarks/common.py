"""Helpers shared by the benchmark scripts: timing and a regularly observed array."""

from __future__ import annotations

import time

import numpy as np

from ptares.inputs.config import Config


def best_of(function, repeats: int = 5) -> float:
    """The shortest of ``repeats`` wall-clock timings of ``function()`` (s)."""
    times = []
    for _ in range(repeats):
        start = time.perf_counter()
        function()
        times.append(time.perf_counter() - start)
    return min(times)


def regular_array(pulsars: int, toas: int, frequencies: int, seed: int, toa_error_us: float = 0.5) -> Config:
    """A random array with ``toas`` evenly spaced TOAs per pulsar over 10 yr, red noise and a background."""
    span_days = 10 * 365.25
    return Config.model_validate(
        {
            "run": {"seed": seed},
            "array": {"random": {"count": pulsars}},
            "observing": {"start": 53000, "span": 10.0, "cadence": span_days / (toas - 1), "toa_error": toa_error_us},
            "noise": {"red": {"amplitude": 1e-15, "harmonics": frequencies}},
            "gwb": {"amplitude": 2.4e-15, "harmonics": frequencies},
        }
    )


def gibbs_iteration_seconds(model, x, repeats: int, keep_factors: bool = True) -> float:
    """Mean wall-clock time (s) of one Gibbs iteration of ``model`` from the free parameters ``x``, after one
    untimed iteration (numba compilation, caches); ``keep_factors=False`` refactorises for each coefficient draw."""
    from ptares.inference.samplers.gibbs import GibbsSampler

    sampler = GibbsSampler(model)
    rng = np.random.default_rng(0)
    x = np.array(x, dtype=float)
    proposals = sampler.proposals()
    sampler.iterate(x, rng, proposals)
    start = time.perf_counter()
    for _ in range(repeats):
        if not keep_factors:
            sampler._kept = None
        sampler.iterate(x, rng, proposals)
    return (time.perf_counter() - start) / repeats

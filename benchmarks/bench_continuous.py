"""Continuous-wave kernel speed, as ratios measured side by side in one run (never asserted).

Case: 100 pulsars x 2000 TOAs x 1000 binaries, every binary with an Earth and a
pulsar term, half of them evolving.

Printed:
* the numba kernel against the bare numpy cost of evaluating the same number of
  sines (one ``np.sin`` per source, pulsar, TOA and term: the floor for this work;
  the kernel computes a sine and a cosine per term);
* the numba kernel against its numpy twin, on a 10-pulsar slice of the same case
  (the twin needs several GB for the whole case).

Run: ``python benchmarks/bench_continuous.py``
"""

from __future__ import annotations

import numpy as np
from common import best_of

from ptares.physics.constants import YEAR
from ptares.simulation.kernels import wave_residuals, wave_residuals_reference

PULSARS, TOAS, SOURCES = 100, 2000, 1000



def inputs(pulsars, rng):
    span = 15 * YEAR
    times = np.concatenate([np.sort(rng.uniform(0, span, TOAS)) for _ in range(pulsars)])
    bounds = np.arange(pulsars + 1) * TOAS
    frequency = 10 ** rng.uniform(np.log10(2e-9), np.log10(1e-7), SOURCES)
    rate = np.where(rng.uniform(size=SOURCES) < 0.5, rng.uniform(0, 0.01, SOURCES) / span, 0.0)
    earth = np.column_stack([rng.uniform(0, 2 * np.pi, SOURCES), 2 * np.pi * frequency, rate, np.full(SOURCES, 1e-8)])
    pulsar = np.stack(
        [np.column_stack([rng.uniform(0, 2 * np.pi, SOURCES), earth[:, 1] * 0.98, rate * 0.95, earth[:, 3]]) for _ in range(pulsars)],
        axis=1,
    )
    fplus, fcross = rng.normal(size=(2, SOURCES, pulsars))
    weights = rng.normal(size=(SOURCES, 2))
    return times, bounds, earth, pulsar, fplus, fcross, weights


def main():
    rng = np.random.default_rng(0)
    full = inputs(PULSARS, rng)
    wave_residuals(*inputs(2, rng))  # compile
    phases = rng.uniform(0, 300, SOURCES * TOAS)

    def numpy_floor():
        for _ in range(2 * PULSARS):  # Earth and pulsar term for every pulsar
            np.sin(phases)

    t_kernel = best_of(lambda: wave_residuals(*full))
    t_floor = best_of(numpy_floor, repeats=2)
    part = inputs(10, np.random.default_rng(1))
    t_kernel_part = best_of(lambda: wave_residuals(*part))
    t_twin_part = best_of(lambda: wave_residuals_reference(*part), repeats=1)

    print(f"case: {PULSARS} pulsars x {TOAS} TOAs x {SOURCES} binaries, Earth and pulsar terms")
    print(f"numba kernel                        {t_kernel:8.3f} s")
    print(f"numpy floor (same number of sines)  {t_floor:8.3f} s")
    print(f"ratio kernel / floor                {t_kernel / t_floor:8.3f}   (target: at most 1)")
    print(f"10-pulsar slice: kernel {t_kernel_part:.3f} s, numpy twin {t_twin_part:.3f} s")
    print(f"ratio twin / kernel (speed-up)      {t_twin_part / t_kernel_part:8.1f}x")


if __name__ == "__main__":
    main()

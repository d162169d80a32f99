"""Simulation speed, as ratios measured side by side in one run (never asserted).

Case: 100 pulsars x 1000 TOAs, a Hellings–Downs background on 30 frequencies,
white noise and per-pulsar red noise on 30 frequencies.

Printed:
* the whole ``ptares.simulate`` call against the bare numpy cost of the same
  sine/cosine synthesis (phase matrix, ``sin``, ``cos``, product with the
  coefficients) for the background alone: the floor a plain implementation
  could not go below;
* the numba synthesis kernel against its numpy twin on the same inputs.

Run: ``python benchmarks/bench_simulate.py``
"""

from __future__ import annotations

import numpy as np
from common import best_of, regular_array

from ptares.simulation.kernels import synthesise, synthesise_reference
from ptares.simulation.simulate import simulate

PULSARS, TOAS, FREQUENCIES = 100, 1000, 30



def main():
    config = regular_array(PULSARS, TOAS, FREQUENCIES, seed=1, toa_error_us=0.3)
    dataset = simulate(config)  # compile and warm caches
    toas = sum(p.toa_count for p in dataset.pulsars)
    times = [(p.mjd - dataset.start_mjd) * 86400.0 for p in dataset.pulsars]
    rng = np.random.default_rng(0)
    sine, cosine = rng.normal(size=(2, PULSARS, FREQUENCIES))
    k = np.arange(1, FREQUENCIES + 1)
    df = 1.0 / dataset.span

    def numpy_floor():
        for a, t in enumerate(times):
            phase = 2 * np.pi * df * np.outer(t, k)
            np.sin(phase) @ sine[a] + np.cos(phase) @ cosine[a]

    flat = np.concatenate(times)
    owner = np.repeat(np.arange(PULSARS), [t.size for t in times])
    t_simulate = best_of(lambda: simulate(config))
    t_floor = best_of(numpy_floor)
    t_kernel = best_of(lambda: synthesise(flat, owner, df, sine, cosine))
    t_twin = best_of(lambda: synthesise_reference(flat, owner, df, sine, cosine))

    print(f"case: {PULSARS} pulsars, {toas} TOAs, {FREQUENCIES} frequencies (background and red noise)")
    print(f"simulate (whole call)             {t_simulate * 1e3:8.1f} ms")
    print(f"numpy sin/cos synthesis floor     {t_floor * 1e3:8.1f} ms")
    print(f"ratio simulate / numpy floor      {t_simulate / t_floor:8.2f}   (target: at most ~1)")
    print(f"numba kernel                      {t_kernel * 1e3:8.2f} ms")
    print(f"numpy twin                        {t_twin * 1e3:8.2f} ms")
    print(f"ratio twin / kernel (speed-up)    {t_twin / t_kernel:8.1f}x")


if __name__ == "__main__":
    main()

"""Plane waves of any profile: speed as ratios measured side by side in one run (never asserted).

Printed:
* a memory-step fit at 100 pulsars x 500 TOAs (white and red noise per pulsar, 30 red frequencies): the cost
  of the step's residuals in one posterior call against the likelihood evaluation it feeds, and how the
  posterior call grows with pulsars and TOAs;
* a tabulated wave (20 000 samples) with Earth and pulsar terms against the closed-form burst it samples,
  and both against direct quadrature of the redshift (the tests' reference) on a slice of the TOAs.

Run: ``python benchmarks/bench_waves.py`` (one BLAS and numba thread).
"""

from __future__ import annotations

import numpy as np
from common import best_of
from scipy.integrate import quad

from ptares.inference.model import FitModel
from ptares.inputs.config import Config, FitSection
from ptares.physics.constants import KPC, YEAR
from ptares.physics.sky import antenna_patterns, unit_vector
from ptares.physics.waveforms import SineGaussian, plane_wave_residuals, sample_profile
from ptares.simulation.simulate import simulate
from ptares.threads import thread_limits

PULSARS, TOAS = 100, 500


def memory_array(pulsars: int, toas: int):
    span_days = 10 * 365.25
    config = Config.model_validate({
        "run": {"seed": 1},
        "array": {"random": {"count": pulsars}},
        "observing": {"start": 53000, "span": 10.0, "cadence": span_days / (toas - 1), "toa_error": 0.3},
        "noise": {"red": {"amplitude": 1e-15, "harmonics": 30}},
        "wave": [{"shape": "memory", "epoch": 54800.0, "amplitude": 2e-14, "ra": 100.0, "dec": 20.0, "pulsar_term": False}],
    })
    data = simulate(config)
    model = FitModel(data, FitSection(common="none", red="free", red_harmonics=30, memory=True))
    return model, model.sample_prior(np.random.default_rng(0), 1)[0]


def main():
    model, x = memory_array(PULSARS, TOAS)
    values = model.parameters(x)
    t_signal = best_of(lambda: model._memory_signal(values))
    t_posterior = best_of(lambda: model(x))
    print(f"memory-step fit: {PULSARS} pulsars x {TOAS} TOAs, {model.ndim} free parameters")
    print(f"  step residuals per posterior call      {t_signal * 1e3:8.2f} ms")
    print(f"  whole posterior call                   {t_posterior * 1e3:8.2f} ms")
    print(f"  share of the call spent on the step    {t_signal / t_posterior:8.1%}")
    for pulsars, toas, what in ((2 * PULSARS, TOAS, "pulsars x2"), (PULSARS, 2 * TOAS, "TOAs x2")):
        bigger, y = memory_array(pulsars, toas)
        print(f"  posterior call, {what:10s}             {best_of(lambda: bigger(y), repeats=3) / t_posterior:8.2f}x")

    rng = np.random.default_rng(2)
    positions = unit_vector(rng.uniform(0, 2 * np.pi, PULSARS), np.arcsin(rng.uniform(-1, 1, PULSARS)))
    distances = rng.uniform(0.5, 2.0, PULSARS) * KPC
    span = 10 * YEAR
    times = [np.sort(rng.uniform(0, span, TOAS)) for _ in range(PULSARS)]
    burst = SineGaussian(1e-13, 0.4 * span, 0.05 * span, 2e-8, 0.3, 0.5)
    reach = 2 * distances.max() / 3e8 + span
    table = sample_profile(burst, -reach, span, (reach + span) / 20_000, hold=True)

    def tabled():
        return plane_wave_residuals(table, times, positions, distances, 1.0, 0.2, 0.4, True)

    def closed():
        return plane_wave_residuals(burst, times, positions, distances, 1.0, 0.2, 0.4, True)

    t_table, t_closed = best_of(tabled), best_of(closed)
    fplus, fcross = antenna_patterns(positions[:1], 1.0, 0.2, 0.4)
    delay = distances[0] / 3e8 * (1 - positions[0] @ unit_vector(1.0, 0.2))

    def redshift(t):
        now, then = burst.strain(t), burst.strain(t - delay)
        return fplus[0] * (now[0] - then[0]) + fcross[0] * (now[1] - then[1])

    slice_ = times[0][:50]
    t_quad = best_of(lambda: [quad(redshift, 0.0, t, limit=200)[0] for t in slice_], repeats=1)
    per_toa_quad = t_quad / slice_.size
    per_toa_table = t_table / (PULSARS * TOAS)
    per_toa_closed = t_closed / (PULSARS * TOAS)
    print(f"tabulated wave, {table.times.size} samples, Earth and pulsar terms, {PULSARS} pulsars x {TOAS} TOAs")
    print(f"  table (cubic splines)                  {t_table * 1e3:8.2f} ms")
    print(f"  closed-form burst                      {t_closed * 1e3:8.2f} ms   (table / closed form {t_table / t_closed:.2f})")
    print(f"  quadrature of the redshift, per TOA    {per_toa_quad * 1e6:8.1f} us  "
          f"({per_toa_quad / per_toa_table:.0f}x the table's, {per_toa_quad / per_toa_closed:.0f}x the closed form's)")


if __name__ == "__main__":
    with thread_limits(1):  # one BLAS and numba thread: the setting of fits and campaign workers
        main()

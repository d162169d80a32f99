"""Forecast speed at 100 pulsars, as ratios measured side by side in one run (never asserted).

Case: 100 pulsars x 500 TOAs over 10 yr with white and red noise, a Hellings–Downs background
on 14 Fourier frequencies; the full ``ptares sensitivity`` forecast (200-point curves, 20
amplitudes with exact-in-the-mean S/N and detection probability, 8 observing spans, continuous
waves against frequency and on a 5-degree sky map).

* ours: :func:`ptares.forecast.sensitivity.forecast` with one thread;
* simulation: one simulated realisation and its optimal statistic (the cost of one campaign
  task); a campaign that measures the same detection probability to +/- 0.05 needs about
  100 of them per amplitude;
* rebuilt products: the forecast's per-amplitude products built again from the TOAs (the
  reference twin of the Woodbury update :func:`ptares.forecast.statistic.with_common_power`).

Then how the forecast's cost grows with pulsars, TOAs per pulsar and Fourier frequencies.

Run: ``python benchmarks/bench_sensitivity.py``
"""

from __future__ import annotations

import time
from dataclasses import replace

import numpy as np
from common import regular_array

from ptares.correlation.analysis import correlate
from ptares.correlation.fourier import fourier_products
from ptares.correlation.noise import noise_from_dataset
from ptares.forecast import spectral
from ptares.forecast.sensitivity import forecast
from ptares.forecast.statistic import with_common_power
from ptares.inputs.config import CorrelateSection, SensitivitySection
from ptares.simulation.simulate import outline, simulate
from ptares.threads import thread_limits

PULSARS, TOAS, FREQUENCIES = 100, 500, 14


def timed(function) -> float:
    start = time.perf_counter()
    function()
    return time.perf_counter() - start


def forecast_seconds(pulsars: int, toas: int, frequencies: int) -> float:
    dataset = outline(regular_array(pulsars, toas, frequencies, seed=4))
    return timed(lambda: forecast(dataset, SensitivitySection()))


def main():
    with thread_limits(1):
        config = regular_array(PULSARS, TOAS, FREQUENCIES, seed=4)
        dataset = outline(config)
        ours = timed(lambda: forecast(dataset, SensitivitySection()))
        noise = noise_from_dataset(dataset)
        positions = np.array([p.position for p in dataset.pulsars])

        def curves():
            spectra = spectral.pulsar_spectra(dataset, noise, spectral.frequency_grid(dataset, 200))
            spectral.power_law_integrated(spectra.frequency, spectral.array_curve(spectra, positions, dataset.span),
                                          dataset.span, 1.0)
            spectral.wave_strain(spectral.wave_response(spectra), positions, 5.0)

        frequency_domain = timed(curves)

        data = simulate(config)
        one = timed(lambda: correlate(simulate(config), noise_from_dataset(data),
                                      CorrelateSection(scrambles=0, phase_shifts=0, fit_trials=0)))

        base = fourier_products(dataset, replace(noise, common_amplitude=0.0), FREQUENCIES, 13 / 3)
        amplitudes = np.geomspace(1e-16, 1e-13, 20)
        woodbury = timed(lambda: [with_common_power(base, a**2) for a in amplitudes])
        rebuilt = timed(lambda: [fourier_products(dataset, replace(noise, common_amplitude=a,
                                                                   common_harmonics=FREQUENCIES), FREQUENCIES, 13 / 3)
                                 for a in amplitudes])

        print(f"case: {PULSARS} pulsars x {TOAS} TOAs, {FREQUENCIES} frequencies, one thread")
        print(f"ptares sensitivity, whole forecast            {ours:8.2f} s   (target: seconds)")
        print(f"  of which the frequency-domain curves        {frequency_domain:8.2f} s   (the rest: 29 exact S/N and "
              "detection-probability evaluations)")
        print(f"one simulated realisation + optimal statistic {one:8.2f} s")
        print(f"ratio 100 realisations / forecast             {100 * one / ours:8.1f}x")
        print(f"products for 20 amplitudes, Woodbury update    {woodbury:8.3f} s")
        print(f"products for 20 amplitudes, rebuilt from TOAs  {rebuilt:8.3f} s   ratio {rebuilt / woodbury:6.1f}x")

        print("\nhow the forecast grows (seconds; each doubling alone):")
        reference = forecast_seconds(50, 250, 10)
        for label, arguments in (("50 pulsars, 250 TOAs, 10 frequencies", (50, 250, 10)),
                                 ("pulsars x2", (100, 250, 10)), ("TOAs x2", (50, 500, 10)),
                                 ("frequencies x2", (50, 250, 20))):
            seconds = reference if arguments == (50, 250, 10) else forecast_seconds(*arguments)
            print(f"  {label:38s} {seconds:7.2f} s   x{seconds / reference:4.1f}")
        print("  (pairs grow as P^2: the pair sums and the S/N distributions dominate at large P; TOAs enter once,\n"
              "   through the per-pulsar products and the transmission; frequencies through the distributions'\n"
              "   P x 2K eigenvalues)")


if __name__ == "__main__":
    main()

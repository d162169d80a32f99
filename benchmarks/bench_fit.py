"""Likelihood speed, as ratios measured side by side in one run (never asserted).

Case: 30 pulsars x 1000 TOAs, 30 frequencies for the common process and the
red noise, white noise fixed (as in a fit of the background).

* Hellings–Downs likelihood call against one scipy Cholesky factorisation of a
  matrix the size of its dense core, (30 x 60) squared: the floor for this
  model (target: at most 1.5x);
* uncorrelated likelihood call against the brute-force dense likelihood, one
  N_toa x N_toa Cholesky per pulsar (target: at least 100x faster).

Run: ``python benchmarks/bench_fit.py``
"""

from __future__ import annotations

import numpy as np
import scipy.linalg
from common import best_of, regular_array

from ptares.physics.spectra import fourier_basis
from ptares.inference.likelihood import Likelihood
from ptares.physics.spectra import coefficient_variance
from ptares.simulation.simulate import simulate

PULSARS, TOAS, COMPONENTS = 30, 1000, 30



def main():
    config = regular_array(PULSARS, TOAS, COMPONENTS, seed=3, toa_error_us=0.5)
    data = simulate(config)
    ones, zeros = np.ones(PULSARS), np.zeros(PULSARS)
    red_amplitude, red_spectral_index = np.full(PULSARS, 1e-15), np.full(PULSARS, 13 / 3)
    correlated = Likelihood(data, COMPONENTS, COMPONENTS, True)
    uncorrelated = Likelihood(data, COMPONENTS, COMPONENTS, False)
    arguments = (ones, zeros, red_amplitude, red_spectral_index, 2.4e-15, 13 / 3)
    correlated(*arguments), uncorrelated(*arguments)  # fill the white-noise caches

    size = PULSARS * 2 * COMPONENTS
    rng = np.random.default_rng(0)
    root = rng.standard_normal((size, size))
    dense = root @ root.T + size * np.eye(size)

    def brute_force():
        total = 0.0
        for p in data.pulsars:
            t = (p.mjd - data.start_mjd) * 86400.0
            F = fourier_basis(t, data.span, COMPONENTS)
            prior = np.repeat(coefficient_variance(data.span, COMPONENTS, 1e-15, 13 / 3)
                              + coefficient_variance(data.span, COMPONENTS, 2.4e-15, 13 / 3), 2)
            C = np.diag(p.errors**2) + (F * prior) @ F.T
            u = np.linalg.svd(p.design_matrix, full_matrices=True)[0]
            G = u[:, p.design_matrix.shape[1]:]
            factor = scipy.linalg.cho_factor(G.T @ C @ G)
            x = G.T @ p.residuals
            total += -0.5 * x @ scipy.linalg.cho_solve(factor, x) - np.sum(np.log(np.diag(factor[0])))
        return total

    t_correlated = best_of(lambda: correlated(*arguments))
    t_cholesky = best_of(lambda: scipy.linalg.cho_factor(dense))
    t_uncorrelated = best_of(lambda: uncorrelated(*arguments))
    t_brute = best_of(brute_force, repeats=2)

    print(f"case: {PULSARS} pulsars x {TOAS} TOAs, {COMPONENTS} frequencies (dense core {size} x {size})")
    print(f"Hellings-Downs likelihood            {t_correlated * 1e3:8.1f} ms")
    print(f"one scipy Cholesky, same size        {t_cholesky * 1e3:8.1f} ms")
    print(f"ratio likelihood / Cholesky          {t_correlated / t_cholesky:8.2f}   (target: at most 1.5)")
    print(f"uncorrelated likelihood              {t_uncorrelated * 1e3:8.2f} ms")
    print(f"brute-force dense likelihood         {t_brute * 1e3:8.0f} ms")
    print(f"ratio brute force / uncorrelated     {t_brute / t_uncorrelated:8.0f}x  (target: at least 100x)")


if __name__ == "__main__":
    main()

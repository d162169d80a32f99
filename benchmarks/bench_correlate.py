"""Optimal-statistic speed, as a ratio measured side by side in one run (never asserted).

Case: 100 pulsars x 1000 TOAs with white and red noise and a background, 30
template frequencies, 4950 pairs.

* ours: the whole statistic (per-pulsar Fourier products through the Woodbury
  identity, then every pair at once);
* naive: the published dense formula per pair, with an explicit N_toa x N_toa
  inverse of each pulsar's covariance (on the complement of the timing model)
  formed for every pair.  It takes seconds per pair, so it is timed on 6 pairs
  and scaled to 4950; the printout says so.

Run: ``python benchmarks/bench_correlate.py``
"""

from __future__ import annotations

import time

import numpy as np
from common import regular_array

from ptares.correlation.fourier import fourier_products, unit_template
from ptares.physics.spectra import fourier_basis
from ptares.correlation.noise import noise_from_dataset
from ptares.correlation.pairs import optimal_statistic, pair_correlations
from ptares.physics.patterns import correlation_matrix
from ptares.physics.spectra import coefficient_variance
from ptares.simulation.simulate import simulate

PULSARS, TOAS, COMPONENTS, TIMED_PAIRS = 100, 1000, 30, 6


def naive_pair(data, noise, a, b, template):
    """rho_ab and sigma_ab with dense inverses formed for this pair."""
    inverses, bases = [], []
    for index in (a, b):
        p = data.pulsars[index]
        t = (p.mjd - data.start_mjd) * 86400.0
        F = fourier_basis(t, data.span, COMPONENTS)
        prior = np.repeat(coefficient_variance(data.span, COMPONENTS, noise.red_amplitude[index], noise.red_spectral_index[index])
                          + coefficient_variance(data.span, COMPONENTS, noise.common_amplitude, noise.common_spectral_index), 2)
        covariance = np.diag(noise.white_sigma(index, p.errors) ** 2) + (F * prior) @ F.T
        u, _, _ = np.linalg.svd(p.design_matrix, full_matrices=True)
        G = u[:, p.design_matrix.shape[1]:]
        inverses.append(G @ np.linalg.inv(G.T @ covariance @ G) @ G.T)
        bases.append(F)
    cross = (bases[0] * template) @ bases[1].T
    trace = np.trace(inverses[0] @ cross @ inverses[1] @ cross.T)
    return data.pulsars[a].residuals @ inverses[0] @ cross @ inverses[1] @ data.pulsars[b].residuals / trace, trace**-0.5


def main():
    config = regular_array(PULSARS, TOAS, COMPONENTS, seed=2, toa_error_us=0.5)
    data = simulate(config)
    noise = noise_from_dataset(data)
    positions = np.array([p.position for p in data.pulsars])
    gamma = correlation_matrix(positions)

    start = time.perf_counter()
    products = fourier_products(data, noise, COMPONENTS, 13 / 3)
    pairs = pair_correlations(products, positions)
    optimal_statistic(pairs, gamma[pairs.a, pairs.b])
    ours = time.perf_counter() - start

    template = unit_template(data.span, COMPONENTS, 13 / 3)
    start = time.perf_counter()
    for k in range(TIMED_PAIRS):
        rho, sigma = naive_pair(data, noise, pairs.a[k], pairs.b[k], template)
        assert np.isclose(rho, pairs.rho[k], rtol=1e-6) and np.isclose(sigma, pairs.sigma[k], rtol=1e-6)
    per_pair = (time.perf_counter() - start) / TIMED_PAIRS
    naive = per_pair * pairs.rho.size

    print(f"case: {PULSARS} pulsars x {TOAS} TOAs, {COMPONENTS} frequencies, {pairs.rho.size} pairs")
    print(f"ptares, whole statistic                {ours:9.2f} s")
    print(f"naive dense, per pair (timed on {TIMED_PAIRS})    {per_pair:9.2f} s")
    print(f"naive dense, all pairs (scaled)        {naive:9.0f} s")
    print(f"ratio naive / ptares                   {naive / ours:9.0f}x   (target: at least 20x)")


if __name__ == "__main__":
    main()

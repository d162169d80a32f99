"""A free spectrum of the common process: one variance per frequency (PHYSICS.md, "Gibbs sampling").

The Gibbs sampler's draw of each variance rho_k given the Fourier coefficients is checked against the
conditional density computed by direct numerical integration over lg rho (numpy trapezoid rule on a fine
grid): the conjugate inverse-gamma route (prior uniform in lg rho, no other process at that frequency)
and the slice-sampling route (a pulsar's red noise sharing the frequency; correlated pulsars).  Quantiles
of many draws agree within 4 Monte Carlo standard errors sqrt(q (1 - q) / n) / p(x_q).
"""

import numpy as np
import pytest
from conftest import small_config

from ptares.inference.model import FitModel
from ptares.inference.samplers.gibbs import GibbsSampler
from ptares.inputs.config import FitSection
from ptares.simulation.simulate import simulate


def _sampler(common, red):
    data = simulate(small_config(array={"random": {"count": 5}}, gwb={"amplitude": 5e-15, "harmonics": 3},
                                 noise={"red": {"amplitude": 2e-15, "harmonics": 3}} if red else {}), seed=2)
    model = FitModel(data, FitSection(common=common, common_spectrum="free", harmonics=3,
                                      red="injected" if red else "none"))
    return model, GibbsSampler(model)


@pytest.mark.parametrize("common, red", [("uncorrelated", False), ("hellings-downs", False), ("uncorrelated", True),
                                         ("hellings-downs", True)])
def test_each_variance_is_drawn_from_its_conditional_given_the_coefficients(common, red):
    model, sampler = _sampler(common, red)
    P = len(model.dataset.pulsars)
    rng = np.random.default_rng(7)
    truth = 1e-14
    gamma = sampler.likelihood.gamma_matrix if common == "hellings-downs" else np.eye(P)
    own = np.zeros((P, sampler.likelihood.width))
    if red:  # pulsars' own variances at the frequencies, a few of them large
        own[:, :6] = np.repeat(np.array([[3e-15, 0.0, 1e-14, 0.0, 5e-15]]).T, 6, axis=1)
    covariance = truth * gamma + np.diag(own[:, 0])
    coefficients = np.zeros((P, sampler.likelihood.width))
    coefficients[:, :6] = np.linalg.cholesky(covariance) @ rng.standard_normal((P, 6))
    grid = np.linspace(-20.0, -8.0, 24001)
    k = 2  # the second frequency: columns 2 and 3
    pair = coefficients[:, 2:4]
    log_density = []
    for y in grid:
        C = 10.0**y * gamma + np.diag(own[:, 2])
        sign, log_det = np.linalg.slogdet(C)
        log_density.append(-0.5 * float(np.sum(pair * np.linalg.solve(C, pair))) - log_det)  # two columns
    density = np.exp(np.array(log_density) - max(log_density))
    cumulative = np.concatenate([[0.0], np.cumsum((density[1:] + density[:-1]) / 2 * np.diff(grid))])
    density /= cumulative[-1]
    cumulative /= cumulative[-1]

    draws = []
    x = np.array([model.values[n] for n in model.names])
    for _ in range(3000):
        sampler._spectrum_step(x, coefficients, own, rng)
        draws.append(x[model.names.index(f"common_lg_variance_{k}")])
    draws = np.array(draws)
    # slice updates are correlated: count effective draws from the lag-one autocorrelation (AR(1) approximation)
    lag = np.corrcoef(draws[:-1], draws[1:])[0, 1]
    effective = draws.size * (1 - lag) / (1 + lag) if lag > 0 else draws.size
    for q in (0.05, 0.5, 0.95):
        exact = float(np.interp(q, cumulative, grid))
        error = np.sqrt(q * (1 - q) / effective) / float(np.interp(exact, grid, density))
        assert abs(np.quantile(draws, q) - exact) < 4 * error, (q, np.quantile(draws, q), exact, error)

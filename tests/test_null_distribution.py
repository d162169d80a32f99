"""The exact noise-only distribution of the optimal statistic's S/N (ptares.correlation.null_distribution).

Tail probabilities by Imhof's method are checked against scipy's chi-squared and a Monte Carlo of
``sum lambda_i chi^2_1``; the S/N of a small array, drawn directly from its Gaussian null
(X_a with covariance blockdiag(Z_a)), against the exact p-values and skewness.  Tolerances are
binomial or batch-mean standard errors, seeds fixed.
"""

import numpy as np
import pytest
from conftest import listed_pulsars, small_config
from scipy import stats

from ptares.campaign.detection import (
    detection_probability,
    detection_rule,
)
from ptares.correlation.fourier import fourier_products
from ptares.correlation.noise import noise_from_dataset
from ptares.correlation.null_distribution import (
    null_density,
    null_eigenvalues,
    null_skewness,
    tail_probability,
)
from ptares.correlation.pairs import (
    optimal_statistic,
    overlap,
    pair_correlations,
    pair_matrices,
    weak_signal_weights,
)
from ptares.correlation.scatter import ensemble_draws
from ptares.simulation.simulate import simulate

LISTED = listed_pulsars(8, 77, "N")
HARMONICS = 6


@pytest.fixture(scope="module")
def array():
    """A small array without a background: (products, pairs, positions)."""
    config = small_config(
        array={"pulsars": LISTED},
        observing={"start": 53000, "span": 10.0, "cadence": 30.0, "cadence_jitter": 5.0, "toa_error": 0.2},
        gwb={"amplitude": 0.0, "harmonics": HARMONICS},
    )
    data = simulate(config, seed=5)
    positions = np.array([p.position for p in data.pulsars])
    products = fourier_products(data, noise_from_dataset(data), HARMONICS, 13 / 3)
    return products, pair_correlations(products, positions), positions


@pytest.mark.parametrize("k", [1, 2, 5, 30])
def test_equal_eigenvalues_give_chi_squared(k):
    """All lambda = 1: sum of k chi^2_1 is chi^2_k (scipy.stats.chi2), tail and density."""
    x = np.array([0.3, 2.0, 7.0, 25.0])
    tails = [tail_probability(v, np.ones(k)) for v in x]
    np.testing.assert_allclose(tails, stats.chi2.sf(x, k), rtol=1e-6, atol=1e-9)
    if k >= 2:  # chi^2_1's density is infinite at 0: checked away from it
        np.testing.assert_allclose(null_density(x, np.ones(k)), stats.chi2.pdf(x, k), rtol=1e-4, atol=1e-7)


@pytest.mark.statistical
def test_mixed_eigenvalues_match_monte_carlo():
    """lambda = (2, -0.5, 0.3): Monte Carlo of sum lambda_i chi^2_1 (numpy), 4 binomial standard errors."""
    lam = np.array([2.0, -0.5, 0.3])
    draws = np.random.default_rng(3).standard_normal((2_000_000, 3)) ** 2 @ lam
    for x in (-1.0, 0.0, 2.0, 8.0):
        empirical = np.mean(draws > x)
        error = np.sqrt(empirical * (1 - empirical) / draws.size)
        assert abs(tail_probability(x, lam) - empirical) < 4 * error
    # skewness from the cumulants kappa_r = 2^(r-1) (r-1)! sum lambda^r (derived in the module docstring)
    assert null_skewness(lam) == pytest.approx(stats.skew(draws), abs=0.05)


def _null_snr(products, pairs, gamma_ab, count, rng):
    """S/N of the weak-signal statistic for ``count`` draws of X from the null, covariance blockdiag(Z_a)."""
    X = ensemble_draws(products, np.eye(len(products.X)), 0.0, 0.0, count, rng)
    _, denominator = pair_matrices(products)
    numerator = np.einsum("nai,i,nbi->nab", X, products.phi, X, optimize=True)[:, pairs.a, pairs.b]
    statistic = optimal_statistic(pairs, gamma_ab)
    return numerator / denominator[pairs.a, pairs.b] @ weak_signal_weights(pairs, gamma_ab) / statistic["sigma"]


@pytest.mark.statistical
@pytest.mark.parametrize("pattern", ["hellings-downs", "monopole"])
def test_exact_null_matches_drawn_snr(array, pattern):
    """Tail probabilities and skewness of S/N drawn from the Gaussian null agree with the exact ones
    (binomial errors; skewness error from 20 batch means); the null's variance is exactly 1
    (weak-signal sigma is the noise-only standard deviation, PHYSICS.md)."""
    products, pairs, _ = array
    gamma_ab = overlap(pairs, pattern)
    sigma = optimal_statistic(pairs, gamma_ab)["sigma"]
    lam, method = null_eigenvalues(products, pairs, weak_signal_weights(pairs, gamma_ab), sigma)
    assert method == "exact"
    assert 2 * np.sum(lam**2) == pytest.approx(1.0, rel=1e-9) and abs(np.sum(lam)) < 1e-9
    snr = _null_snr(products, pairs, gamma_ab, 60_000, np.random.default_rng(11))
    for s in (-1.0, 1.0, 2.0, 3.0):
        empirical = np.mean(snr > s)
        exact = tail_probability(s, lam)
        assert abs(exact - empirical) < 4 * np.sqrt(exact * (1 - exact) / snr.size), (s, exact, empirical)
    batches = stats.skew(snr.reshape(20, -1), axis=1)
    skew_error = np.std(batches, ddof=1) / np.sqrt(20)
    assert abs(null_skewness(lam) - stats.skew(snr)) < 4 * skew_error
    assert null_skewness(lam) > 10 * skew_error  # skewed: a unit normal would be wrong


def test_frequency_diagonal_eigenvalues_keep_unit_variance(array, monkeypatch):
    """Above the size limit each Y_a is kept to its diagonal; the S/N variance 2 sum lambda^2 is then
    sum (sum_i y_ai y_bi)^2 / D_ab weights, close to 1 when Z_a is nearly diagonal (here within 20%)."""
    from ptares.correlation import null_distribution

    products, pairs, _ = array
    gamma_ab = overlap(pairs, "hellings-downs")
    sigma = optimal_statistic(pairs, gamma_ab)["sigma"]
    monkeypatch.setattr(null_distribution, "EIGEN_LIMIT", 0)
    lam, method = null_eigenvalues(products, pairs, weak_signal_weights(pairs, gamma_ab), sigma)
    assert method == "frequency-diagonal" and lam.size == len(products.X) * products.phi.size
    assert 2 * np.sum(lam**2) == pytest.approx(1.0, rel=0.2)


def test_campaign_uses_exact_p_values_without_enough_null_tasks():
    """Fewer than 5 no-signal tasks: detection is each task's exact p-value below the false-alarm probability;
    without exact p-values, the unit normal (scipy.stats.norm) as before."""
    rows = [{"status": "ok", "injected_amplitude": a, "hd_snr": s, "hd_p_exact": p}
            for a, s, p in ((0.0, 0.5, 0.3), (1e-14, 2.0, 0.04), (1e-14, 2.5, 0.06), (1e-14, 4.0, 1e-4))]
    rule = detection_rule(rows, 0.05)
    assert rule.column == "hd_p_exact" and not rule.above and rule.threshold == 0.05 and "exact" in rule.how
    found = detection_probability(rows, rule)
    assert found[1e-14].fraction == pytest.approx(2 / 3) and found[0.0].fraction == 0.0
    plain = [{k: v for k, v in r.items() if k != "hd_p_exact"} for r in rows]
    rule = detection_rule(plain, 0.05)
    threshold, how = rule.threshold, rule.how
    assert threshold == pytest.approx(stats.norm.isf(0.05)) and "unit-normal" in how


def test_eigenvalues_of_a_chosen_pattern_match_a_dense_construction(array):
    """Eigenvalues from the reduced problem equal those of C^(1/2) Q C^(1/2) built densely (numpy.linalg)."""
    products, pairs, _ = array
    gamma_ab = overlap(pairs, "dipole")
    weights = weak_signal_weights(pairs, gamma_ab)
    lam, _ = null_eigenvalues(products, pairs, weights, 1.0)
    P, size = products.X.shape
    _, denominator = pair_matrices(products)
    Q = np.zeros((P, size, P, size))
    for a, b, w in zip(pairs.a, pairs.b, weights):
        Q[a, :, b, :] = Q[b, :, a, :] = 0.5 * w / denominator[a, b] * np.diag(products.phi)
    C = np.zeros((P, size, P, size))
    for a in range(P):
        C[a, :, a, :] = products.Z[a]
    values, vectors = np.linalg.eigh(C.reshape(P * size, -1))
    root = vectors @ np.diag(np.sqrt(np.clip(values, 0, None))) @ vectors.T
    dense = np.linalg.eigvalsh(root @ Q.reshape(P * size, -1) @ root)
    np.testing.assert_allclose(np.sort(lam), np.sort(dense), atol=1e-9 * np.max(np.abs(dense)))

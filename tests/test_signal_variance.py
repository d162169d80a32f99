"""Signal-aware variance of the optimal statistic (Allen & Romano 2023, PRD 108, 043026), the
pair-covariant estimator and the per-frequency statistic, checked over Gaussian-ensemble draws of
the Fourier-domain products (ptares.correlation.scatter.ensemble_draws).

The relative error of a standard deviation from n draws is about 1 / sqrt(2 (n - 1)) (common
practice, Gaussian approximation); checks allow 3 of those.  Seeds are fixed.
"""

import numpy as np
import pytest
from conftest import listed_pulsars, small_config

from ptares.correlation.analysis import correlate
from ptares.correlation.fourier import FourierProducts, fourier_products
from ptares.correlation.noise import noise_from_dataset
from ptares.correlation.pairs import (
    optimal_statistic,
    overlap,
    pair_correlations,
    pair_covariant_statistic,
    pair_matrices,
    per_frequency_statistics,
    weak_signal_weights,
)
from ptares.correlation.scatter import (
    ensemble_draws,
    pair_covariance,
    weighted_covariance,
)
from ptares.inputs.config import CorrelateSection
from ptares.physics.patterns import correlation_matrix
from ptares.simulation.simulate import simulate

LISTED = listed_pulsars(10, 91, "S")
HARMONICS = 6
AMPLITUDE = 2e-15  # S/N about 5 for this array: the background's own scatter dominates
DRAWS = 4000


def config_for(harmonics=HARMONICS):
    return small_config(
        array={"pulsars": LISTED},
        observing={"start": 53000, "span": 10.0, "cadence": 30.0, "cadence_jitter": 5.0, "toa_error": 0.2},
        gwb={"amplitude": AMPLITUDE, "harmonics": harmonics},
    )


@pytest.fixture(scope="module")
def array():
    """(dataset, products, pairs, positions, Gamma matrix, draws of the pair correlations at AMPLITUDE^2)."""
    data = simulate(config_for(), seed=3)
    positions = np.array([p.position for p in data.pulsars])
    products = fourier_products(data, noise_from_dataset(data), HARMONICS, 13 / 3)
    pairs = pair_correlations(products, positions)
    gamma_matrix = correlation_matrix(positions)
    X = ensemble_draws(products, gamma_matrix, AMPLITUDE**2, AMPLITUDE**2, DRAWS, np.random.default_rng(8))
    _, denominator = pair_matrices(products)
    rho = np.einsum("nai,i,nbi->nab", X, products.phi, X, optimize=True)[:, pairs.a, pairs.b] / denominator[pairs.a, pairs.b]
    return data, products, pairs, positions, gamma_matrix, X, rho


def tolerance(n):
    return 3.0 / np.sqrt(2.0 * (n - 1))


@pytest.mark.statistical
def test_signal_aware_sigma_matches_the_scatter_of_the_estimate(array):
    """sd of A^2_hat over ensemble draws equals sqrt(w^T Cov(rho) w) (Isserlis, Allen & Romano 2023)
    and clearly exceeds the weak-signal sigma (PHYSICS.md formula, exact only without a signal)."""
    _, products, pairs, _, gamma_matrix, _, rho = array
    gamma_ab = overlap(pairs, "hellings-downs")
    weights = weak_signal_weights(pairs, gamma_ab)
    variance, method = weighted_covariance(products, pairs, weights, gamma_matrix, AMPLITUDE**2, AMPLITUDE**2)
    sigma_signal = np.sqrt(variance.item())
    scatter = np.std(rho @ weights, ddof=1)
    assert method == "exact"
    assert scatter == pytest.approx(sigma_signal, rel=tolerance(DRAWS))
    weak = optimal_statistic(pairs, gamma_ab)["sigma"]
    assert scatter > weak * (1 + 3 * tolerance(DRAWS))
    assert np.mean(rho @ weights) == pytest.approx(AMPLITUDE**2, abs=3 * sigma_signal / np.sqrt(DRAWS))


@pytest.mark.statistical
def test_pair_covariant_estimator_variance_and_gain(array):
    """Generalised least squares with the pair covariance (Allen & Romano 2023): its weights have
    variance 1 / (G^T C^-1 G), confirmed by the draws, no larger than the weak-signal one."""
    _, products, pairs, _, gamma_matrix, _, rho = array
    gamma_ab = overlap(pairs, "hellings-downs")
    covariance, _ = pair_covariance(products, pairs, gamma_matrix, AMPLITUDE**2, AMPLITUDE**2)
    weak = weak_signal_weights(pairs, gamma_ab)
    # the dense covariance and the weighted sum are two routes to the same Isserlis sum
    direct, _ = weighted_covariance(products, pairs, weak, gamma_matrix, AMPLITUDE**2, AMPLITUDE**2)
    assert weak @ covariance @ weak == pytest.approx(direct.item(), rel=1e-10)
    found, weights = pair_covariant_statistic(pairs, gamma_ab, covariance)
    assert np.std(rho @ weights, ddof=1) == pytest.approx(found["sigma"], rel=tolerance(DRAWS))
    assert found["sigma"] <= np.sqrt(direct.item()) * (1 + 1e-12)


@pytest.mark.statistical
def test_per_frequency_estimates_are_unbiased(array):
    """Each frequency's estimate has mean A^2 times its expected factor
    sum Gamma^2 tr(Z_a Phi Z_b Phi_k) / sum Gamma^2 tr(Z_a Phi_k Z_b Phi_k) (from E[X_a X_b^T] in scatter.py),
    within 3 standard errors of the mean."""
    _, products, pairs, _, _, X, _ = array
    gamma_ab = overlap(pairs, "hellings-downs")
    values = np.array([per_frequency_statistics(FourierProducts(x, products.Z, products.phi), pairs, gamma_ab)["amplitude2"]
                       for x in X[:1500]])
    for k in range(HARMONICS):
        phi_k = np.zeros_like(products.phi)
        phi_k[2 * k:2 * k + 2] = products.phi[2 * k:2 * k + 2]
        full = np.einsum("aij,j,bji,i->ab", products.Z, products.phi, products.Z, phi_k)[pairs.a, pairs.b]
        own = np.einsum("aij,j,bji,i->ab", products.Z, phi_k, products.Z, phi_k)[pairs.a, pairs.b]
        factor = np.sum(gamma_ab**2 * full) / np.sum(gamma_ab**2 * own)
        error = np.std(values[:, k], ddof=1) / np.sqrt(len(values))
        assert abs(np.mean(values[:, k]) - AMPLITUDE**2 * factor) < 3 * error, k


def test_one_frequency_per_frequency_equals_the_full_estimate():
    """With one frequency in the template, per_frequency[0] is the full Hellings-Downs estimate (identity)."""
    data = simulate(config_for(1), seed=4)
    result = correlate(data, noise_from_dataset(data), CorrelateSection(harmonics=1, scrambles=0, phase_shifts=0,
                                                                        fit_trials=0))
    only, = result.estimates["per_frequency"]
    hd = result.estimates["hellings-downs"]
    assert only["frequency"] == pytest.approx(1.0 / data.span)
    for key in ("amplitude2", "sigma", "snr"):
        assert only[key] == pytest.approx(hd[key], rel=1e-10)


@pytest.mark.parametrize("estimator", ["weak-signal", "pair-covariant"])
def test_correlate_reports_both_sigmas_and_the_exact_null(array, estimator):
    """correlations.json keys: sigma_signal and its method, p_exact with its null, the estimator in settings;
    a pattern whose amplitude is clipped to zero has the weak-signal sigma as its signal-aware one (Isserlis
    without a background); the pair-covariant estimator's sigma is its signal-aware one (Allen & Romano 2023)."""
    data = array[0]
    result = correlate(data, noise_from_dataset(data), CorrelateSection(estimator=estimator, scrambles=0,
                                                                        phase_shifts=0, fit_trials=0))
    assert result.settings["estimator"] == estimator
    for name in ("hellings-downs", "monopole", "dipole"):
        entry = result.estimates[name]
        assert entry["sigma_method"] == "exact" and entry["null_method"] == "exact" and "noise only" in entry["null"]
        assert 0.0 <= entry["p_exact"] <= 1.0
        if entry["amplitude2"] <= 0 and estimator == "weak-signal" and name != "hellings-downs":
            assert entry["sigma_signal"] == pytest.approx(entry["sigma"], rel=1e-9)
    hd = result.estimates["hellings-downs"]
    if estimator == "pair-covariant":
        assert hd["sigma_signal"] == pytest.approx(hd["sigma"], rel=1e-9) and "weak_signal" in hd

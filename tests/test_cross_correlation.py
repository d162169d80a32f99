"""Pair cross-correlations and the optimal statistic against the dense published formulas."""

import numpy as np
import pytest
from conftest import small_config

from ptares.correlation.fourier import fourier_products
from ptares.correlation.noise import noise_from_dataset, noise_from_values
from ptares.correlation.pairs import (
    joint_statistic,
    optimal_statistic,
    overlap,
    pair_correlations,
)
from ptares.physics.patterns import correlation_matrix
from ptares.simulation.simulate import simulate

YEAR = 365.25 * 86400.0


def basis(times, span, harmonics):
    k = np.arange(1, harmonics + 1)
    phase = 2 * np.pi * np.outer(times, k) / span
    return np.hstack([np.sin(phase), np.cos(phase)])


def psd(f, amplitude, gamma):
    """A^2 / (12 pi^2) f_yr^-3 (f / f_yr)^-gamma (Jenet et al. 2006)."""
    return amplitude**2 / (12 * np.pi**2) * YEAR**3 * (f * YEAR) ** (-gamma)


def dense_rho_sigma(dataset, a, b, noise, harmonics, gamma):
    """Anholm et al. 2009 / Chamberlin et al. 2015 with explicit dense matrices:
    rho = r_a^T P_a^-1 S_ab P_b^-1 r_b / tr(P_a^-1 S_ab P_b^-1 S_ba), sigma = tr(...)^(-1/2), where P^-1 is
    the inverse of the auto-covariance on the complement of the timing model,
    G (G^T P G)^-1 G^T with G spanning the null space of M^T (scipy-free numpy SVD)."""
    span = dataset.span
    f = np.arange(1, harmonics + 1) / span
    template = np.concatenate([psd(f, 1.0, gamma), psd(f, 1.0, gamma)]) / span
    inverses, bases = [], []
    for index in (a, b):
        p = dataset.pulsars[index]
        t = (p.mjd - dataset.start_mjd) * 86400.0
        F = basis(t, span, harmonics)
        fr = np.arange(1, noise.red_harmonics + 1) / span
        Fr = basis(t, span, noise.red_harmonics)
        red = np.concatenate([psd(fr, noise.red_amplitude[index], noise.red_spectral_index[index])] * 2) / span
        common = np.concatenate([psd(f, noise.common_amplitude, noise.common_spectral_index)] * 2) / span
        white = (noise.white_scale[index] * p.errors) ** 2 + noise.white_quadrature[index] ** 2
        P = np.diag(white) + (Fr * red) @ Fr.T + (F * common) @ F.T
        u, s, vt = np.linalg.svd(p.design_matrix, full_matrices=True)
        G = u[:, p.design_matrix.shape[1]:]
        inverses.append(G @ np.linalg.inv(G.T @ P @ G) @ G.T)
        bases.append(F)
    S_ab = (bases[0] * template) @ bases[1].T
    ra, rb = dataset.pulsars[a].residuals, dataset.pulsars[b].residuals
    trace = np.trace(inverses[0] @ S_ab @ inverses[1] @ S_ab.T)
    return ra @ inverses[0] @ S_ab @ inverses[1] @ rb / trace, trace**-0.5


@pytest.mark.parametrize("red", [0.0, 3e-15])
def test_fast_estimator_equals_dense_formula(red):
    """Woodbury route (fourier_products) against explicit dense inverses, with timing model and red noise."""
    config = small_config(
        array={"random": {"count": 3}},
        observing={"start": 53000, "span": 8.0, "cadence": 20.0, "cadence_jitter": 5.0, "toa_error": 0.3,
                   "toa_error_scatter": 0.2, "gaps": [[54000, 54200]]},
        noise={"red": {"amplitude": red, "spectral_index": 3.0, "harmonics": 12}, "white": {"quadrature": 0.1}},
        gwb={"amplitude": 5e-15, "harmonics": 8},
        timing_model={"fit": ["offset", "spin_frequency", "spin_down", "yearly"]},
    )
    data = simulate(config)
    noise = noise_from_dataset(data)
    products = fourier_products(data, noise, 8, 13 / 3)
    pairs = pair_correlations(products, np.array([p.position for p in data.pulsars]))
    for k, (a, b) in enumerate(zip(pairs.a, pairs.b)):
        rho, sigma = dense_rho_sigma(data, a, b, noise, 8, 13 / 3)
        assert pairs.rho[k] == pytest.approx(rho, rel=1e-8, abs=0)
        assert pairs.sigma[k] == pytest.approx(sigma, rel=1e-8, abs=0)


def test_equal_white_noise_closed_form():
    """Equal white noise, no red noise, no timing model: P = s^2 I, so
    rho = r_a^T F_a Phi F_b^T r_b / tr(F_a^T F_a Phi F_b^T F_b Phi) and sigma = s^2 / tr(...)^(1/2)."""
    config = small_config(
        array={"random": {"count": 4}},
        observing={"start": 53000, "span": 6.0, "cadence": 15.0, "toa_error": 0.5},
        gwb={"amplitude": 1e-14, "harmonics": 6},
        timing_model={"fit": []},
    )
    data = simulate(config)
    noise = noise_from_values(data)  # white scale 1, nothing else
    products = fourier_products(data, noise, 6, 13 / 3)
    pairs = pair_correlations(products, np.array([p.position for p in data.pulsars]))
    span = 6 * YEAR  # the union window of the config
    f = np.arange(1, 7) / span
    template = np.concatenate([psd(f, 1.0, 13 / 3)] * 2) / span
    s2 = 0.5e-6**2
    for k, (a, b) in enumerate(zip(pairs.a, pairs.b)):
        Fa = basis((data.pulsars[a].mjd - 53000) * 86400, span, 6)
        Fb = basis((data.pulsars[b].mjd - 53000) * 86400, span, 6)
        trace = np.trace(Fa.T @ Fa @ np.diag(template) @ Fb.T @ Fb @ np.diag(template))
        rho = data.pulsars[a].residuals @ Fa @ np.diag(template) @ Fb.T @ data.pulsars[b].residuals / trace
        assert pairs.rho[k] == pytest.approx(rho, rel=1e-9, abs=0)
        assert pairs.sigma[k] == pytest.approx(s2 / np.sqrt(trace), rel=1e-9, abs=0)


def test_optimal_statistic_formula():
    """A^2 = sum rho Gamma / sigma^2 / sum Gamma^2 / sigma^2, sigma_A2 = (sum Gamma^2/sigma^2)^(-1/2) (PHYSICS.md);
    the joint fit of a single pattern is the same estimate."""
    config = small_config(array={"random": {"count": 6}}, gwb={"amplitude": 5e-15, "harmonics": 8})
    data = simulate(config)
    products = fourier_products(data, noise_from_dataset(data), 8, 13 / 3)
    pairs = pair_correlations(products, np.array([p.position for p in data.pulsars]))
    gamma = overlap(pairs, "hellings-downs")
    w = pairs.sigma**-2
    single = optimal_statistic(pairs, gamma)
    assert single["amplitude2"] == pytest.approx(np.sum(pairs.rho * gamma * w) / np.sum(gamma**2 * w), rel=1e-6, abs=0)
    assert single["sigma"] == pytest.approx(np.sum(gamma**2 * w) ** -0.5, rel=1e-6, abs=0)
    joint = joint_statistic(pairs, ["hellings-downs"])
    assert joint["amplitude2"]["hellings-downs"] == pytest.approx(single["amplitude2"], rel=1e-6, abs=0)
    assert joint["sigma"]["hellings-downs"] == pytest.approx(single["sigma"], rel=1e-6, abs=0)
    positions = np.array([p.position for p in data.pulsars])
    np.testing.assert_allclose(gamma, correlation_matrix(positions)[pairs.a, pairs.b])

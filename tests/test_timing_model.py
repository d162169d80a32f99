"""The timing-model fit."""

import numpy as np
import pytest

from ptares.physics.timing_model import column_names, design_matrix, fit_timing_model


@pytest.fixture
def schedule():
    rng = np.random.default_rng(4)
    mjd = np.sort(rng.uniform(53000, 58000, 300))
    sigma = rng.uniform(1e-7, 1e-6, 300)
    return mjd, sigma


def test_fit_removes_injected_quadratic_exactly(schedule):
    """A quadratic in time (offset, spin-frequency and spin-down errors) lies in the model's span."""
    mjd, sigma = schedule
    t = (mjd - 53000) * 86400
    quadratic = 3e-6 - 2e-14 * t + 5e-23 * t**2
    post, _ = fit_timing_model(quadratic, design_matrix(mjd, ["offset", "spin_frequency", "spin_down"]), sigma)
    assert np.max(np.abs(post)) < 1e-12 * np.max(np.abs(quadratic))


def test_yearly_term_removes_annual_sinusoid(schedule):
    """Any sinusoid of period one Julian year is a combination of the yearly sine and cosine columns."""
    mjd, sigma = schedule
    annual = 4e-7 * np.sin(2 * np.pi * mjd / 365.25 + 0.8)
    post, _ = fit_timing_model(annual, design_matrix(mjd, ["offset", "yearly"]), sigma)
    assert np.max(np.abs(post)) < 1e-12


def test_post_fit_residuals_orthogonal_to_columns_in_weighted_product(schedule):
    """Weighted least squares (common practice): M^T N^-1 r_post = 0."""
    mjd, sigma = schedule
    r = np.random.default_rng(5).normal(0, sigma) + 1e-6 * ((mjd - 55000) / 1000) ** 3
    design = design_matrix(mjd, ["offset", "spin_frequency", "spin_down"])
    post, coefficients = fit_timing_model(r, design, sigma)
    np.testing.assert_allclose(design.T @ (post / sigma**2), 0.0, atol=1e-9 * np.abs(design.T @ (r / sigma**2)).max())
    np.testing.assert_allclose(r - post, design @ coefficients)


def test_column_names_and_shape():
    mjd = np.linspace(50000, 51000, 20)
    terms = ["offset", "spin_frequency", "spin_down", "yearly"]
    assert column_names(terms) == ["offset", "spin_frequency", "spin_down", "yearly_sin", "yearly_cos"]
    assert design_matrix(mjd, terms).shape == (20, 5)
    assert design_matrix(mjd, []).shape == (20, 0)
    r = np.ones(20)
    np.testing.assert_array_equal(fit_timing_model(r, design_matrix(mjd, []), np.ones(20))[0], r)

"""Power-law spectra and conversions against the published formulas (PHYSICS.md) and astropy."""

import numpy as np
import pytest
from astropy import units as u
from astropy.cosmology import Planck18
from scipy.integrate import quad

from ptares.physics.constants import F_YR, YEAR
from ptares.physics.spectra import (
    alpha_from_gamma,
    characteristic_strain,
    coefficient_variance,
    fourier_frequencies,
    gamma_from_alpha,
    omega_gw,
    residual_psd,
    residual_psd_from_strain,
    strain_from_omega_gw,
    strain_from_residual_psd,
)


def test_julian_year_from_astropy():
    """Common practice: the Julian year of 365.25 days (astropy's 'yr')."""
    assert YEAR == pytest.approx((365.25 * u.day).to_value(u.s), rel=1e-6, abs=0)
    assert F_YR == pytest.approx(1 / (1 * u.yr).to_value(u.s), rel=1e-6, abs=0)


def test_binary_population_index():
    """Phinney 2001: alpha = -2/3 for circular binaries gives gamma = 3 - 2 alpha = 13/3."""
    assert gamma_from_alpha(-2 / 3) == pytest.approx(13 / 3, rel=1e-6, abs=0)
    assert alpha_from_gamma(13 / 3) == pytest.approx(-2 / 3, rel=1e-6, abs=0)


def test_residual_psd_formula():
    """Jenet et al. 2006: S(f) = h_c^2 / (12 pi^2 f^3), with h_c = A (f / f_yr)^alpha, written out here."""
    f = np.geomspace(1e-9, 1e-7, 9)
    amplitude, gamma = 2.4e-15, 13 / 3
    h_c = amplitude * (f * YEAR) ** (-2 / 3)
    expected = h_c**2 / (12 * np.pi**2 * f**3)
    np.testing.assert_allclose(residual_psd(f, amplitude, gamma), expected, rtol=1e-12)
    np.testing.assert_allclose(characteristic_strain(f, amplitude, gamma), h_c, rtol=1e-12)
    np.testing.assert_allclose(residual_psd_from_strain(f, h_c), expected, rtol=1e-12)
    np.testing.assert_allclose(strain_from_residual_psd(f, expected), h_c, rtol=1e-12)


def test_omega_gw_with_astropy_units():
    """Omega_gw = 2 pi^2 f^2 h_c^2 / (3 H0^2), evaluated with astropy quantities and Planck18's H0."""
    f = np.array([3e-9, 1e-8, 3e-8]) * u.Hz
    h_c = characteristic_strain(f.value, 2.4e-15)
    expected = (2 * np.pi**2 * f**2 * h_c**2 / (3 * Planck18.H0**2)).to_value(u.dimensionless_unscaled)
    np.testing.assert_allclose(omega_gw(f.value, h_c), expected, rtol=1e-12)
    np.testing.assert_allclose(strain_from_omega_gw(f.value, expected), h_c, rtol=1e-12)
    h0 = (70 * u.km / u.s / u.Mpc).to_value(1 / u.s)
    assert omega_gw(1e-8, 1e-15, hubble_constant=h0) == pytest.approx(2 * np.pi**2 * 1e-16 * 1e-30 / (3 * h0**2), rel=1e-6, abs=0)


def test_fourier_frequencies():
    np.testing.assert_allclose(fourier_frequencies(10.0, 4), [0.1, 0.2, 0.3, 0.4])


def test_residual_variance_check_value():
    """PHYSICS.md check value: A = 2.4e-15, gamma = 13/3, T = 15 yr, N_f = 30 gives
    sum_k S(f_k)/T = (654 ns)^2, while the integral of S from 1/T (scipy.integrate.quad) gives (348 ns)^2."""
    span = 15 * YEAR
    variance = coefficient_variance(span, 30, 2.4e-15, 13 / 3).sum()
    assert np.sqrt(variance) == pytest.approx(654e-9, abs=0.5e-9)
    # integrate over ln f: S(f) f d(ln f), 40 e-folds above 1/T (the rest is below 1e-40 of it)
    log_low = np.log(1 / span)
    integral, _ = quad(lambda x: residual_psd(np.exp(x), 2.4e-15, 13 / 3) * np.exp(x), log_low, log_low + 40, epsabs=0.0, epsrel=1e-10)
    assert np.sqrt(integral) == pytest.approx(348e-9, abs=0.5e-9)


def test_power_law_factors_give_the_power_law():
    """A^2 unit exp(-gamma log_ratio) from power_law_factors equals coefficient_variance (the PHYSICS.md power law
    S(f) = A^2 / (12 pi^2) f_yr^-3 (f / f_yr)^-gamma divided by T) for several amplitudes and indices."""
    from ptares.physics.spectra import power_law_factors

    span = 12.5 * YEAR
    unit, log_ratio = power_law_factors(span, 20)
    for amplitude, gamma in ((1e-15, 13 / 3), (3e-14, 1.5), (2e-16, 6.0)):
        expected = amplitude**2 / (12 * np.pi**2) * F_YR**-3 * (np.arange(1, 21) / span / F_YR) ** -gamma / span
        np.testing.assert_allclose(amplitude**2 * unit * np.exp(-gamma * log_ratio), expected, rtol=1e-12)

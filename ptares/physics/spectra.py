"""Power-law spectra of stochastic signals and the conversions between them.

Conventions (PHYSICS.md, "Stochastic background"; Phinney 2001; Jenet et al. 2006):

* characteristic strain ``h_c(f) = A (f / f_yr)^alpha``;
* one-sided residual power spectral density
  ``S(f) = h_c^2 / (12 pi^2 f^3) = A^2 / (12 pi^2) f_yr^-3 (f / f_yr)^-gamma`` in s^2/Hz,
  with ``gamma = 3 - 2 alpha``;
* energy density ``Omega_gw(f) = 2 pi^2 f^2 h_c^2 / (3 H0^2)``;
* Fourier basis ``f_k = k / T``, k = 1..N, with sine and cosine coefficients of
  variance ``S(f_k) / T`` each, so that the residual variance before any fit is
  ``sum_k S(f_k) / T``.

Intrinsic red noise of a pulsar uses the same power-law form with its own
amplitude and index.  Frequencies are in Hz, spans in seconds.
"""

from __future__ import annotations

import numpy as np

from ptares.physics.constants import F_YR, REFERENCE_FREQUENCY_MHZ

__all__ = [
    "gamma_from_alpha",
    "alpha_from_gamma",
    "fourier_basis",
    "chromatic_scale",
    "turnover",
    "characteristic_strain",
    "residual_psd",
    "residual_psd_from_strain",
    "strain_from_residual_psd",
    "omega_gw",
    "strain_from_omega_gw",
    "fourier_frequencies",
    "coefficient_variance",
    "power_law_factors",
]


def gamma_from_alpha(alpha):
    """Residual spectral index ``gamma = 3 - 2 alpha``."""
    return 3.0 - 2.0 * np.asarray(alpha, dtype=float)


def alpha_from_gamma(gamma):
    """Strain spectral index ``alpha = (3 - gamma) / 2``."""
    return 0.5 * (3.0 - np.asarray(gamma, dtype=float))


def characteristic_strain(f, amplitude, gamma=13.0 / 3.0):
    """Characteristic strain ``A (f / f_yr)^alpha`` of a power law of residual index ``gamma``."""
    return amplitude * (np.asarray(f, dtype=float) / F_YR) ** alpha_from_gamma(gamma)


def residual_psd(f, amplitude, gamma=13.0 / 3.0):
    """One-sided residual power spectral density (s^2/Hz) of a power law."""
    f = np.asarray(f, dtype=float)
    return amplitude**2 / (12.0 * np.pi**2) * F_YR**-3 * (f / F_YR) ** (-np.asarray(gamma, dtype=float))


def residual_psd_from_strain(f, h_c):
    """Residual PSD ``h_c^2 / (12 pi^2 f^3)`` from characteristic strain at ``f``."""
    f = np.asarray(f, dtype=float)
    return np.asarray(h_c, dtype=float) ** 2 / (12.0 * np.pi**2 * f**3)


def strain_from_residual_psd(f, psd):
    """Characteristic strain from a residual PSD (inverse of :func:`residual_psd_from_strain`)."""
    f = np.asarray(f, dtype=float)
    return np.sqrt(12.0 * np.pi**2 * f**3 * np.asarray(psd, dtype=float))


def _hubble_constant_si(hubble_constant):
    if hubble_constant is None:
        from astropy.cosmology import Planck18

        return float(Planck18.H0.to_value("1/s"))
    return float(hubble_constant)


def omega_gw(f, h_c, hubble_constant=None):
    """Energy density per log frequency over the closure density.

    ``hubble_constant`` in 1/s; the default is astropy's Planck 2018 value.
    """
    h0 = _hubble_constant_si(hubble_constant)
    f = np.asarray(f, dtype=float)
    return 2.0 * np.pi**2 * f**2 * np.asarray(h_c, dtype=float) ** 2 / (3.0 * h0**2)


def strain_from_omega_gw(f, omega, hubble_constant=None):
    """Characteristic strain from ``Omega_gw`` (inverse of :func:`omega_gw`)."""
    h0 = _hubble_constant_si(hubble_constant)
    f = np.asarray(f, dtype=float)
    return np.sqrt(3.0 * h0**2 * np.asarray(omega, dtype=float) / (2.0 * np.pi**2 * f**2))


def fourier_frequencies(span: float, harmonics: int) -> np.ndarray:
    """Basis frequencies ``k / span`` for k = 1..harmonics (Hz; span in s)."""
    return np.arange(1, harmonics + 1) / span


def fourier_basis(times, span: float, harmonics: int) -> np.ndarray:
    """Columns ``sin(2 pi k t / T), cos(2 pi k t / T)`` interleaved, k = 1..harmonics; ``times`` in s."""
    phase = 2.0 * np.pi * np.outer(times, np.arange(1, harmonics + 1)) / span
    basis = np.empty((len(times), 2 * harmonics))
    basis[:, 0::2] = np.sin(phase)
    basis[:, 1::2] = np.cos(phase)
    return basis


def turnover(frequency, bend_frequency: float, bend_index: float) -> np.ndarray:
    """``1 / (1 + (f_bend / f)^kappa)``: the factor on a power law that turns over below ``bend_frequency`` (Hz), as
    binaries driven by their environment lose low-frequency power (Sampson, Cornish & McWilliams 2015, PRD 91,
    084055; the form from memory)."""
    return 1.0 / (1.0 + (bend_frequency / np.asarray(frequency, dtype=float)) ** bend_index)


def chromatic_scale(frequency_mhz, chromatic_index: float) -> np.ndarray:
    """``(nu_ref / nu)^chi`` for radio frequencies ``nu`` in MHz, ``nu_ref`` = 1400 MHz: the factor on a chromatic
    process's residuals (PHYSICS.md, "Radio frequency and chromatic noise")."""
    return (REFERENCE_FREQUENCY_MHZ / np.asarray(frequency_mhz, dtype=float)) ** chromatic_index


def coefficient_variance(span: float, harmonics: int, amplitude: float, gamma: float, bend_frequency=None,
                         bend_index: float = 2.0) -> np.ndarray:
    """Variance ``S(f_k) / T`` (s^2) of each sine and each cosine coefficient; with ``bend_frequency`` (Hz) the power
    law turns over below it (:func:`turnover`)."""
    frequency = fourier_frequencies(span, harmonics)
    variance = residual_psd(frequency, amplitude, gamma) / span
    return variance if bend_frequency is None else variance * turnover(frequency, bend_frequency, bend_index)


def power_law_factors(span: float, harmonics: int):
    """``(unit, log_ratio)`` with ``coefficient_variance(span, harmonics, A, gamma) = A^2 unit exp(-gamma log_ratio)``:
    the variance of a unit-amplitude flat spectrum and ``ln(f_k / f_yr)``, for samplers that evaluate many
    power laws on one basis without recomputing the frequencies."""
    return coefficient_variance(span, harmonics, 1.0, 0.0), np.log(fourier_frequencies(span, harmonics) / F_YR)

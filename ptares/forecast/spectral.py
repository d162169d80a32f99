"""Frequency-domain sensitivity of an array: noise spectra, transmission and strain-noise curves.

Each pulsar's timing noise is a one-sided power spectral density ``P_I(f)`` (s^2/Hz): white
noise ``2 T_I / sum_e w_e`` (the inverse-variance weights ``w_e`` of its epochs, jitter
included; ``2 dt sigma^2`` for even sampling), its red noise, and each chromatic process's
power law times the square of its inverse-variance-weighted scale ``(1400 MHz / nu)^chi``
(the power left in the band-averaged timing).  The timing-model fit removes power: a
sinusoid ``x = exp(2 pi i f t)`` keeps the share ``T_I(f) = 1 - |Q^T W^(1/2) x|^2 / sum w``
of its weighted power, ``Q`` an orthonormal basis of the whitened design matrix (the
transmission function; Hazboun, Romano & Smith 2019, PRD 100, 104028, there unweighted).
The pulsar's strain-noise spectrum is ``S_I(f) = P_I(f) / (T_I(f) R(f))`` with
``R(f) = 1 / (12 pi^2 f^2)``: a background of strain spectrum ``S_h = h_c^2 / f`` has residual
spectrum ``S_h R`` (PHYSICS.md: ``S(f) = h_c^2 / (12 pi^2 f^3)``).  The array's curve for a
Hellings–Downs-correlated background is
``S_eff(f) = [sum_{I<J} (T_IJ / T) Gamma_IJ^2 / (S_I S_J)]^(-1/2)`` (Hazboun, Romano & Smith
2019), ``T_IJ`` the pair's overlapping span, and the background's S/N
``rho^2 = 2 sum_{I<J} T_IJ int Gamma^2 S_h^2 / (S_I S_J) df`` (there, after Siemens et al. 2013),
here a sum over the Fourier frequencies ``k / T`` (``df = 1 / T``), the basis every ptares
estimator uses.  With the background's own power in each pulsar (``S_I -> S_I + S_h``) and in
each pair's variance (``+ Gamma^2 S_h^2``) the same sum holds in every regime; it leaves out
the covariance between pairs, so in the strong-signal regime it overstates the S/N (Allen 2023).

Continuous waves: a sinusoid of residual amplitude ``a`` over ``T_I`` has matched-filter
``rho^2 = a^2 T_I T_I(f) / P_I(f)``.  For a circular binary of strain ``h0`` at sky direction
``s``, averaged over polarisation angle and ``cos i`` (uniform), the Earth term's residual
amplitude has ``<a^2> = (2/5) (F+^2 + Fx^2) h0^2 / (2 pi f)^2`` with
``F+^2 + Fx^2 = (1 + s.p)^2 / 4`` (from the antenna pattern of PHYSICS.md; its sky average is
1/3); a pulsar term at an unrelated phase doubles the power on average.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import cached_property

import numpy as np

from ptares.correlation.noise import NoiseModel
from ptares.dataset import Dataset
from ptares.physics.constants import DAY, F_YR
from ptares.physics.patterns import correlation_matrix
from ptares.physics.spectra import chromatic_scale, fourier_frequencies, residual_psd

__all__ = [
    "PulsarSpectra",
    "array_curve",
    "background_snr",
    "frequency_grid",
    "power_law_integrated",
    "pulsar_spectra",
    "strain_psd",
    "transmission",
    "wave_response",
    "wave_strain",
]


@dataclass(frozen=True)
class PulsarSpectra:
    """Per pulsar on the grid ``frequency`` (F,) in Hz: noise ``psd`` and ``transmission`` (P, F), white-noise
    level ``white`` (P,) s^2/Hz, first and last TOA ``start``/``end`` (P,) in s from the array's start."""

    frequency: np.ndarray
    psd: np.ndarray
    transmission: np.ndarray
    white: np.ndarray
    start: np.ndarray
    end: np.ndarray

    @property
    def span(self) -> np.ndarray:
        return self.end - self.start

    @cached_property
    def strain(self) -> np.ndarray:
        """Strain-noise spectra ``S_I(f)`` (P, F), 1/Hz (computed once, on first use)."""
        return strain_psd(self.frequency, self.psd / self.transmission)

    def overlap(self) -> np.ndarray:
        """Overlapping span ``T_IJ`` (s) of every pair, (P, P)."""
        return np.clip(np.minimum.outer(self.end, self.end) - np.maximum.outer(self.start, self.start), 0.0, None)


def strain_psd(frequency, residual_spectrum):
    """Strain spectrum (1/Hz) of a residual spectrum (s^2/Hz): ``12 pi^2 f^2 P(f)``."""
    return 12.0 * np.pi**2 * np.asarray(frequency, dtype=float) ** 2 * residual_spectrum


def frequency_grid(dataset: Dataset, points: int) -> np.ndarray:
    """``points`` log-spaced frequencies (Hz) from half the lowest Fourier frequency ``1 / (2 T)`` to the
    Nyquist frequency of the median cadence."""
    gaps = np.concatenate([np.diff(np.unique(p.mjd)) for p in dataset.pulsars]) * DAY
    highest = 0.5 / np.median(gaps[gaps > 0]) if np.any(gaps > 0) else 1.0 / dataset.span
    return np.geomspace(0.5 / dataset.span, highest, points)


def transmission(times, weights, design, frequency) -> np.ndarray:
    """Share of a sinusoid's weighted power left after the weighted least-squares timing-model fit, at each
    ``frequency`` (Hz): ``1 - |Q^T W^(1/2) x|^2 / sum w``; ``times`` (s), ``weights`` 1/s^2, ``design`` (n, k)."""
    root = np.sqrt(weights)
    basis, _ = np.linalg.qr(design * root[:, None])
    left = np.ones_like(frequency, dtype=float)
    for part in np.array_split(np.arange(np.size(frequency)), max(1, times.size * np.size(frequency) // 2_000_000)):
        waves = root[:, None] * np.exp(2j * np.pi * np.outer(times, frequency[part]))
        left[part] = 1.0 - np.sum(np.abs(basis.T @ waves) ** 2, axis=0) / np.sum(weights)
    return np.clip(left, 1e-12, 1.0)


def _epoch_weights(noise: NoiseModel, a: int, pulsar) -> np.ndarray:
    """Inverse variance of each epoch's weighted mean TOA (white noise and jitter), 1/s^2."""
    weights = 1.0 / noise.white_sigma(a, pulsar.errors) ** 2
    jitter = noise.jitter(a)
    if jitter is None:
        return weights
    epochs = pulsar.epochs()
    summed = np.bincount(epochs, weights)
    variance = np.zeros(summed.size)
    variance[epochs] = jitter**2
    return summed / (1.0 + variance * summed)


def _cut(frequency, span: float, harmonics: int):
    """1 where a process on the Fourier basis ``k / span``, k <= ``harmonics``, has power, else 0."""
    return (np.asarray(frequency) <= (harmonics + 0.5) / span).astype(float)


def pulsar_spectra(dataset: Dataset, noise: NoiseModel, frequency) -> PulsarSpectra:
    """Noise spectra and transmission of every pulsar of ``dataset`` under ``noise`` on ``frequency`` (Hz)."""
    frequency = np.asarray(frequency, dtype=float)
    count = len(dataset.pulsars)
    psd, kept = np.empty((count, frequency.size)), np.empty((count, frequency.size))
    white, start, end = np.empty(count), np.empty(count), np.empty(count)
    for a, p in enumerate(dataset.pulsars):
        times = (p.mjd - dataset.start_mjd) * DAY
        start[a], end[a] = times.min(), times.max()
        span = max(end[a] - start[a], DAY)
        white[a] = 2.0 * span / np.sum(_epoch_weights(noise, a, p))
        psd[a] = white[a]
        if noise.red_amplitude[a] > 0:
            psd[a] += residual_psd(frequency, noise.red_amplitude[a], noise.red_spectral_index[a]) \
                * _cut(frequency, dataset.span, noise.red_harmonics)
        weights = 1.0 / noise.white_sigma(a, p.errors) ** 2
        for _, harmonics, amplitudes, spectral_indices, chromatic_indices in noise.chromatic:
            if amplitudes[a] > 0 and p.frequency_mhz is not None:
                scale = np.sum(weights * chromatic_scale(p.frequency_mhz, chromatic_indices[a])) / np.sum(weights)
                psd[a] += scale**2 * residual_psd(frequency, amplitudes[a], spectral_indices[a]) \
                    * _cut(frequency, dataset.span, harmonics)
        kept[a] = transmission(times, weights, p.design_matrix, frequency)
    return PulsarSpectra(frequency, psd, kept, white, start, end)


def array_curve(spectra: PulsarSpectra, positions, span: float) -> np.ndarray:
    """Hellings–Downs strain-noise curve ``S_eff(f)`` (F,) of the array, 1/Hz."""
    gamma = correlation_matrix(positions, "hellings-downs")
    np.fill_diagonal(gamma, 0.0)
    weight = gamma**2 * spectra.overlap() / span  # (P, P), zero on the diagonal
    inverse = 1.0 / spectra.strain
    total = 0.5 * np.einsum("ab,af,bf->f", weight, inverse, inverse, optimize=True)
    with np.errstate(divide="ignore"):
        return 1.0 / np.sqrt(total)


def _log_interpolated(at, frequency, values) -> np.ndarray:
    """``values`` (..., F) on the grid ``frequency`` (F,), interpolated in logs to the frequencies ``at``."""
    log_at, log_f = np.log(at), np.log(frequency)
    return np.exp(np.array([np.interp(log_at, log_f, np.log(v)) for v in np.atleast_2d(values)]).reshape(
        np.shape(values)[:-1] + (len(at),)))


def background_snr(spectra: PulsarSpectra, positions, span: float, harmonics: int, amplitude, gamma: float) -> dict:
    """Frequency-domain S/N of a Hellings–Downs background (``amplitude`` scalar or array) on ``harmonics``
    Fourier frequencies: ``weak`` (noise only in each pulsar), ``with_auto_power`` (the background's own
    power added to each pulsar's noise), ``signal_aware`` (and to each pair's variance)."""
    amplitude = np.atleast_1d(np.asarray(amplitude, dtype=float))
    basis = fourier_frequencies(span, harmonics)
    noise = _log_interpolated(basis, spectra.frequency, spectra.strain)  # (P, K)
    gamma_ab = correlation_matrix(positions, "hellings-downs")
    a, b = np.triu_indices(len(positions), 1)
    g2 = gamma_ab[a, b] ** 2
    share = spectra.overlap()[a, b] / span
    unit = strain_psd(basis, residual_psd(basis, 1.0, gamma))  # (K,)
    out = {"weak": [], "with_auto_power": [], "signal_aware": []}
    for value in amplitude:
        signal = value**2 * unit
        na, nb = noise[a], noise[b]
        terms = {
            "weak": na * nb,
            "with_auto_power": (na + signal) * (nb + signal),
            "signal_aware": (na + signal) * (nb + signal) + g2[:, None] * signal**2,
        }
        for key, denominator in terms.items():
            out[key].append(np.sqrt(2.0 * np.sum((share * g2)[:, None] * signal**2 / denominator)))
    return {key: np.array(values) for key, values in out.items()}


def power_law_integrated(frequency, effective, span: float, snr: float, alphas=np.linspace(-4.0, 4.0, 81)) -> dict:
    """Power-law-integrated curve (Thrane & Romano 2013, PRD 88, 124032) in characteristic strain.

    For each strain index ``alpha`` the amplitude ``A_alpha`` whose weak-signal S/N
    ``2 sum_k S_h(f_k)^2 / S_eff(f_k)^2`` over the Fourier frequencies inside ``frequency`` equals
    ``snr^2``; the curve is ``max_alpha A_alpha (f / f_yr)^alpha``.  Returns ``h_c`` (F,) and the
    amplitudes (per alpha, at f_yr).
    """
    frequency = np.asarray(frequency, dtype=float)
    basis = fourier_frequencies(span, int(frequency.max() * span))
    basis = basis[basis >= frequency.min()]
    noise = _log_interpolated(basis, frequency, effective)
    amplitudes = []
    for alpha in alphas:
        shape = (basis / F_YR) ** (2.0 * alpha) / basis  # S_h of unit amplitude: h_c^2 / f
        per_unit = np.sqrt(2.0 * np.sum(shape**2 / noise**2))  # S/N of unit amplitude, ~ A^2
        amplitudes.append(np.sqrt(snr / per_unit))
    amplitudes = np.array(amplitudes)
    curves = amplitudes[:, None] * (frequency[None, :] / F_YR) ** np.asarray(alphas)[:, None]
    return {"h_c": curves.max(axis=0), "alpha": np.asarray(alphas), "amplitude": amplitudes}


def wave_response(spectra: PulsarSpectra, pulsar_term: bool = True) -> np.ndarray:
    """``rho_I^2 / h0^2 / (F+^2 + Fx^2)_I`` (P, F): one pulsar's continuous-wave S/N squared per unit strain and
    unit antenna power, averaged over polarisation angle and inclination."""
    f = spectra.frequency
    factor = 0.4 * (2.0 if pulsar_term else 1.0)
    return factor / (2.0 * np.pi * f) ** 2 * spectra.span[:, None] * spectra.transmission / spectra.psd


def wave_strain(response: np.ndarray, positions, snr: float, directions=None) -> np.ndarray:
    """Strain ``h0`` a circular binary needs for S/N ``snr`` (its S/N squared averaged over polarisation and
    inclination): sky-averaged (F,) without ``directions``, else at each unit vector of ``directions`` (D, F).
    ``response`` is :func:`wave_response`'s."""
    if directions is None:
        return snr / np.sqrt(np.sum(response, axis=0) / 3.0)
    antenna = 0.25 * (1.0 + np.asarray(directions, dtype=float) @ np.asarray(positions, dtype=float).T) ** 2  # (D, P)
    return snr / np.sqrt(antenna @ response)

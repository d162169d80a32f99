"""Per-pulsar Fourier-domain products that every cross-correlation is built from.

Each pulsar's residuals are reduced, with its noise model and the timing model
marginalised (flat prior: ``C^-1 = N^-1 - N^-1 T Sigma^-1 T^T N^-1``, ``T = [M F]``,
van Haasteren & Vallisneri 2014), to ``X_a = F_a^T C_a^-1 r_a`` and
``Z_a = F_a^T C_a^-1 F_a`` on the basis ``f_k = k / T``, columns ordered
``sin f_1, cos f_1, sin f_2, ...``.  :mod:`ptares.correlation.pairs` turns these
into pair correlations.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.linalg

from ptares.correlation.noise import NoiseModel
from ptares.dataset import Dataset, jitter_weights
from ptares.errors import InputError
from ptares.limits import MEMORY_LIMIT
from ptares.physics.spectra import chromatic_scale, coefficient_variance, fourier_basis

__all__ = ["unit_template", "FourierProducts", "check_dataset", "fourier_products"]


def unit_template(span: float, harmonics: int, gamma: float) -> np.ndarray:
    """``Phi`` of the template: ``S(f_k) / T`` for unit amplitude, repeated for sine and cosine (s^2)."""
    return np.repeat(coefficient_variance(span, harmonics, 1.0, gamma), 2)


@dataclass(frozen=True)
class FourierProducts:
    """Per-pulsar products: ``X`` (P, 2K), ``Z`` (P, 2K, 2K), template ``phi`` (2K,)."""

    X: np.ndarray
    Z: np.ndarray
    phi: np.ndarray


def check_dataset(dataset: Dataset) -> None:
    """The faults an estimator cannot work around, each as one clear error."""
    if len(dataset.pulsars) < 2:
        raise InputError(f"has {len(dataset.pulsars)} pulsar(s); cross-correlation needs at least 2", "dataset")
    if not (np.isfinite(dataset.span) and dataset.span > 0 and np.isfinite(dataset.start_mjd)):
        raise InputError(f"span {dataset.span} s and start MJD {dataset.start_mjd} must be finite, the span positive", "dataset")
    for name, parameters in dataset.signals.items():
        for key, value in parameters.items():
            if isinstance(value, float) and not np.isfinite(value):
                raise InputError(f"signal parameter {key} is {value}", f"dataset signal {name}")
        if "harmonics" in parameters and not float(parameters["harmonics"]).is_integer():
            raise InputError(f"harmonics must be a whole number, got {parameters['harmonics']}", f"dataset signal {name}")
    for p in dataset.pulsars:
        where = f"dataset pulsar {p.name}"
        if not all(np.isfinite(v) for v in (p.ra, p.dec, p.distance, p.distance_error)):
            raise InputError("position or distance is not finite", where)
        if not all(np.isfinite(float(v)) for v in p.noise.values() if isinstance(v, (int, float))):
            raise InputError("an injected noise parameter is not finite", where)
        if not np.all(np.isfinite(p.design_matrix)):
            raise InputError("design matrix contains NaN or infinite values", where)
        n = p.mjd.size
        if p.residuals.shape != (n,) or p.errors.shape != (n,) or p.design_matrix.shape[0] != n:
            raise InputError(
                f"arrays do not match: {n} MJDs, {p.residuals.size} residuals, {p.errors.size} errors, "
                f"{p.design_matrix.shape[0]} design-matrix rows",
                where,
            )
        for key in ("mjd", "residuals", "errors"):
            if not np.all(np.isfinite(getattr(p, key))):
                raise InputError(f"{key} contain NaN or infinite values", where)
        if np.any(p.errors <= 0):
            raise InputError("TOA errors must be positive", where)
        if n <= p.design_matrix.shape[1]:
            raise InputError(f"{n} TOAs do not exceed the {p.design_matrix.shape[1]} timing-model columns", where)


def _chromatic(noise: NoiseModel, a: int, pulsar, times, span: float):
    """Pulsar ``a``'s chromatic columns (n, m), each process's basis scaled by (1400 MHz / nu)^chi, and their
    prior variances (m,); none where its amplitudes are zero."""
    columns, variances = [np.empty((times.size, 0))], [np.empty(0)]
    for name, harmonics, amplitudes, spectral_indices, chromatic_indices in noise.chromatic:
        if amplitudes[a] <= 0:
            continue
        if pulsar.frequency_mhz is None:
            raise InputError(f"has no radio frequencies, but the noise model has {name} noise", f"pulsar {pulsar.name}")
        scale = chromatic_scale(pulsar.frequency_mhz, chromatic_indices[a])
        columns.append(fourier_basis(times, span, harmonics) * scale[:, None])
        variances.append(np.repeat(coefficient_variance(span, harmonics, amplitudes[a], spectral_indices[a]), 2))
    return np.hstack(columns), np.concatenate(variances)


def _jitter(noise: NoiseModel, a: int, pulsar, weights: np.ndarray):
    """``inner(A, B)``: ``A^T N^-1 B`` for pulsar ``a``'s white noise ``N`` (inverse variances ``weights``) and its
    epoch jitter, by Sherman–Morrison per epoch (:func:`ptares.dataset.jitter_weights`), as the likelihood does."""
    jitter = noise.jitter(a)
    if jitter is None:
        return lambda A, B: A.T @ (B * weights[:, None])
    epochs = pulsar.epochs()
    variances = np.zeros(int(epochs.max()) + 1)
    variances[epochs] = jitter**2
    c, _ = jitter_weights(weights, epochs, variances)
    order = np.argsort(epochs, kind="stable")
    starts = np.flatnonzero(np.diff(epochs[order], prepend=-1))

    def sums(A):  # U^T W A: the weighted rows of A summed over each epoch
        return np.add.reduceat((A * weights[:, None])[order], starts, axis=0)

    return lambda A, B: A.T @ (B * weights[:, None]) - sums(A).T @ (sums(B) * c[:, None])


def fourier_products(dataset: Dataset, noise: NoiseModel, harmonics: int, gamma: float) -> FourierProducts:
    """``X_a`` and ``Z_a`` of every pulsar for a template of ``harmonics`` frequencies and index ``gamma``."""
    span = dataset.span
    memory = len(dataset.pulsars) * (2 * harmonics) ** 2 * 8
    if memory > MEMORY_LIMIT:
        raise InputError(f"{harmonics} frequencies for {len(dataset.pulsars)} pulsars need {memory / 1e9:.1f} GB; "
                         f"use fewer (at most {MEMORY_LIMIT / 1e9:.0f} GB is allowed)", "harmonics")
    basis_size = max(harmonics, noise.red_harmonics, noise.common_harmonics)
    phi = unit_template(span, harmonics, gamma)
    X = np.empty((len(dataset.pulsars), 2 * harmonics))
    Z = np.empty((len(dataset.pulsars), 2 * harmonics, 2 * harmonics))
    common = np.zeros(2 * basis_size)
    if noise.common_amplitude > 0:
        common[: 2 * noise.common_harmonics] = np.repeat(
            coefficient_variance(span, noise.common_harmonics, noise.common_amplitude, noise.common_spectral_index), 2
        )
    for a, p in enumerate(dataset.pulsars):
        times = (p.mjd - dataset.start_mjd) * 86400.0
        F = fourier_basis(times, span, basis_size)
        prior = common.copy()
        if noise.red_amplitude[a] > 0:
            red = coefficient_variance(span, noise.red_harmonics, noise.red_amplitude[a], noise.red_spectral_index[a])
            prior[: 2 * noise.red_harmonics] += np.repeat(red, 2)
        chromatic_columns, chromatic_prior = _chromatic(noise, a, p, times, span)
        F = np.hstack([F, chromatic_columns])  # the template's columns stay the first 2 * harmonics
        prior = np.concatenate([prior, chromatic_prior])
        inner = _jitter(noise, a, p, 1.0 / noise.white_sigma(a, p.errors) ** 2)  # A^T N^-1 B, white noise and jitter
        kept = prior > 0  # columns without prior power add nothing to the covariance
        T = np.hstack([p.design_matrix, F[:, kept]])
        sigma = inner(T, T)
        fourier = np.arange(p.design_matrix.shape[1], T.shape[1])
        sigma[fourier, fourier] += 1.0 / prior[kept]  # the timing model has a flat prior: nothing added
        try:
            factor = scipy.linalg.cho_factor(sigma)
        except np.linalg.LinAlgError:
            raise InputError("noise covariance is not positive definite (degenerate timing model?)", f"pulsar {p.name}") from None
        Ft = F[:, : 2 * harmonics]
        r = p.residuals[:, None]
        tnf, tnr = inner(T, Ft), inner(T, r)[:, 0]
        X[a] = inner(Ft, r)[:, 0] - tnf.T @ scipy.linalg.cho_solve(factor, tnr)
        Z[a] = inner(Ft, Ft) - tnf.T @ scipy.linalg.cho_solve(factor, tnf)
    return FourierProducts(X=X, Z=Z, phi=phi)

"""Pair cross-correlations and the optimal statistic.

For pulsars a and b (Anholm et al. 2009; Chamberlin et al. 2015; PHYSICS.md)
``rho_ab = r_a^T P_a^-1 S_ab P_b^-1 r_b / tr(P_a^-1 S_ab P_b^-1 S_ba)`` and
``sigma_ab = tr(P_a^-1 S_ab P_b^-1 S_ba)^(-1/2)``, where ``P_a`` is pulsar a's
auto-covariance (white and red noise and the common process) with the timing
model marginalised (flat prior: ``P^-1 -> C^-1 = N^-1 - N^-1 T Sigma^-1 T^T N^-1``,
``T = [M F]``, van Haasteren & Vallisneri 2014), and ``S_ab = F_a Phi F_b^T`` the
cross-covariance template for unit amplitude and the chosen index on the Fourier
basis ``f_k = k / T``.  Everything reduces to per-pulsar Fourier-domain
products ``X_a = F_a^T C_a^-1 r_a`` and ``Z_a = F_a^T C_a^-1 F_a``:
``rho_ab = X_a^T Phi X_b / tr(Z_a Phi Z_b Phi)``.  ``rho_ab`` estimates
``A^2 Gamma_ab``.

The optimal statistic of one pattern is
``A^2 = sum rho Gamma / sigma^2 / sum Gamma^2 / sigma^2`` with
``sigma_A2 = (sum Gamma^2 / sigma^2)^(-1/2)``; several patterns are fitted at
once by weighted least squares (Sardesai et al. 2023).  Basis columns are
ordered ``sin f_1, cos f_1, sin f_2, ...``.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import scipy.linalg

from .correlations import pattern_function
from .dataset import Dataset
from .errors import InputError
from .noise_model import NoiseModel
from .sky import separation_matrix
from .spectra import coefficient_variance

__all__ = [
    "FourierProducts",
    "PairCorrelations",
    "fourier_basis",
    "fourier_products",
    "pair_correlations",
    "optimal_statistic",
    "joint_statistic",
    "overlap",
    "pair_matrices",
    "check_dataset",
    "unit_template",
]


#: Largest working memory (bytes) the analyses allow themselves before refusing.
MEMORY_LIMIT = 4e9


def fourier_basis(times, span: float, components: int) -> np.ndarray:
    """Columns ``sin(2 pi k t / T), cos(2 pi k t / T)`` interleaved, k = 1..components; ``times`` in s."""
    phase = 2.0 * np.pi * np.outer(times, np.arange(1, components + 1)) / span
    basis = np.empty((len(times), 2 * components))
    basis[:, 0::2] = np.sin(phase)
    basis[:, 1::2] = np.cos(phase)
    return basis


def unit_template(span: float, components: int, gamma: float) -> np.ndarray:
    """``Phi`` of the template: ``S(f_k) / T`` for unit amplitude, repeated for sine and cosine (s^2)."""
    return np.repeat(coefficient_variance(span, components, 1.0, gamma), 2)


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
        if "components" in parameters and not float(parameters["components"]).is_integer():
            raise InputError(f"components must be a whole number, got {parameters['components']}", f"dataset signal {name}")
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


def fourier_products(dataset: Dataset, noise: NoiseModel, components: int, gamma: float) -> FourierProducts:
    """``X_a`` and ``Z_a`` of every pulsar for a template of ``components`` frequencies and index ``gamma``."""
    span = dataset.span
    memory = len(dataset.pulsars) * (2 * components) ** 2 * 8
    if memory > MEMORY_LIMIT:
        raise InputError(f"{components} frequencies for {len(dataset.pulsars)} pulsars need {memory / 1e9:.1f} GB; "
                         f"use fewer (at most {MEMORY_LIMIT / 1e9:.0f} GB is allowed)", "components")
    basis_size = max(components, noise.red_components, noise.common_components)
    phi = unit_template(span, components, gamma)
    X = np.empty((len(dataset.pulsars), 2 * components))
    Z = np.empty((len(dataset.pulsars), 2 * components, 2 * components))
    common = np.zeros(2 * basis_size)
    if noise.common_amplitude > 0:
        common[: 2 * noise.common_components] = np.repeat(
            coefficient_variance(span, noise.common_components, noise.common_amplitude, noise.common_gamma), 2
        )
    for a, p in enumerate(dataset.pulsars):
        times = (p.mjd - dataset.start_mjd) * 86400.0
        F = fourier_basis(times, span, basis_size)
        prior = common.copy()
        if noise.red_amplitude[a] > 0:
            red = coefficient_variance(span, noise.red_components, noise.red_amplitude[a], noise.red_gamma[a])
            prior[: 2 * noise.red_components] += np.repeat(red, 2)
        inv_n = 1.0 / noise.white_sigma(a, p.errors) ** 2
        kept = prior > 0  # columns without prior power add nothing to the covariance
        T = np.hstack([p.design_matrix, F[:, kept]])
        sigma = T.T @ (T * inv_n[:, None])
        fourier = np.arange(p.design_matrix.shape[1], T.shape[1])
        sigma[fourier, fourier] += 1.0 / prior[kept]  # the timing model has a flat prior: nothing added
        try:
            factor = scipy.linalg.cho_factor(sigma)
        except np.linalg.LinAlgError:
            raise InputError("noise covariance is not positive definite (degenerate timing model?)", f"pulsar {p.name}") from None
        Ft = F[:, : 2 * components]
        tnf = T.T @ (Ft * inv_n[:, None])
        tnr = T.T @ (p.residuals * inv_n)
        X[a] = Ft.T @ (p.residuals * inv_n) - tnf.T @ scipy.linalg.cho_solve(factor, tnr)
        Z[a] = Ft.T @ (Ft * inv_n[:, None]) - tnf.T @ scipy.linalg.cho_solve(factor, tnf)
    return FourierProducts(X=X, Z=Z, phi=phi)


@dataclass(frozen=True)
class PairCorrelations:
    """One entry per pair a < b: indices, separation (rad), ``rho`` and ``sigma`` (s^2, estimating A^2 Gamma)."""

    a: np.ndarray
    b: np.ndarray
    angle: np.ndarray
    rho: np.ndarray
    sigma: np.ndarray

    def with_values(self, rho, sigma) -> "PairCorrelations":
        return PairCorrelations(self.a, self.b, self.angle, rho, sigma)


def pair_matrices(products: FourierProducts):
    """Numerator ``X_a^T Phi X_b`` and denominator ``tr(Z_a Phi Z_b Phi)`` for all pairs, as P x P matrices."""
    X, Z, phi = products.X, products.Z, products.phi
    numerator = (X * phi) @ X.T
    weighted = (phi[None, :, None] * Z * phi[None, None, :]).reshape(len(X), -1)
    denominator = weighted @ Z.reshape(len(X), -1).T
    return numerator, denominator


def pair_correlations(products: FourierProducts, positions: np.ndarray) -> PairCorrelations:
    """``rho_ab`` and ``sigma_ab`` of every pair of pulsars at unit vectors ``positions``."""
    numerator, denominator = pair_matrices(products)
    a, b = np.triu_indices(len(positions), 1)
    return PairCorrelations(
        a=a,
        b=b,
        angle=separation_matrix(positions)[a, b],
        rho=numerator[a, b] / denominator[a, b],
        sigma=denominator[a, b] ** -0.5,
    )


def overlap(pairs: PairCorrelations, pattern: str) -> np.ndarray:
    """The pattern's ``Gamma_ab`` for every pair."""
    return pattern_function(pattern)(pairs.angle)


def optimal_statistic(pairs: PairCorrelations, gamma_ab: np.ndarray) -> dict:
    """Amplitude estimate for one pattern with values ``gamma_ab`` per pair."""
    weights = 1.0 / pairs.sigma**2
    norm = np.sum(gamma_ab**2 * weights)
    amplitude2 = np.sum(pairs.rho * gamma_ab * weights) / norm
    sigma = norm**-0.5
    return {"amplitude2": float(amplitude2), "sigma": float(sigma), "snr": float(amplitude2 / sigma)}


def joint_statistic(pairs: PairCorrelations, patterns: list) -> dict:
    """Weighted least-squares fit of several patterns at once; per-pattern values and their covariance."""
    design = np.column_stack([overlap(pairs, name) for name in patterns])
    weights = 1.0 / pairs.sigma**2
    fisher = design.T @ (design * weights[:, None])
    if pairs.rho.size < len(patterns) or np.linalg.matrix_rank(fisher) < len(patterns):
        nothing = {n: None for n in patterns}
        return {"patterns": list(patterns), "amplitude2": nothing, "sigma": dict(nothing), "snr": dict(nothing),
                "snr_total": None, "covariance": None,
                "note": f"{pairs.rho.size} pair(s) cannot separate {len(patterns)} patterns"}
    covariance = np.linalg.inv(fisher)
    amplitude2 = covariance @ (design.T @ (pairs.rho * weights))
    sigma = np.sqrt(np.diag(covariance))
    return {
        "patterns": list(patterns),
        "amplitude2": {n: float(v) for n, v in zip(patterns, amplitude2)},
        "sigma": {n: float(v) for n, v in zip(patterns, sigma)},
        "snr": {n: float(v) for n, v in zip(patterns, amplitude2 / sigma)},
        "snr_total": float(np.sqrt(amplitude2 @ fisher @ amplitude2)),
        "covariance": covariance.tolist(),
    }

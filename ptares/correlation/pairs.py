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

from ptares.correlation.fourier import FourierProducts
from ptares.physics.patterns import pattern_function
from ptares.physics.sky import separation_matrix

__all__ = [
    "PairCorrelations",
    "joint_statistic",
    "optimal_statistic",
    "overlap",
    "pair_correlations",
    "pair_covariant_statistic",
    "pair_matrices",
    "per_frequency_statistics",
    "weak_signal_weights",
]


@dataclass(frozen=True)
class PairCorrelations:
    """One entry per pair a < b: indices, separation (rad), ``rho`` and ``sigma`` (s^2, estimating A^2 Gamma)."""

    a: np.ndarray
    b: np.ndarray
    angle: np.ndarray
    rho: np.ndarray
    sigma: np.ndarray

    def with_values(self, rho, sigma) -> PairCorrelations:
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
    """Amplitude estimate for one pattern with values ``gamma_ab`` per pair (weak-signal weights)."""
    weights = weak_signal_weights(pairs, gamma_ab)
    amplitude2 = float(weights @ pairs.rho)
    sigma = float(np.sqrt(np.sum((weights * pairs.sigma) ** 2)))  # = (sum Gamma^2 / sigma^2)^(-1/2)
    return {"amplitude2": amplitude2, "sigma": sigma, "snr": amplitude2 / sigma}


def weak_signal_weights(pairs: PairCorrelations, gamma_ab: np.ndarray) -> np.ndarray:
    """Weights ``w`` with ``A^2 = sum w rho`` of :func:`optimal_statistic`: ``Gamma / sigma^2 / sum Gamma^2 / sigma^2``."""
    weights = gamma_ab / pairs.sigma**2
    return weights / np.sum(gamma_ab * weights)


def pair_covariant_statistic(pairs: PairCorrelations, gamma_ab: np.ndarray, covariance: np.ndarray) -> tuple:
    """Generalised least squares with the pair-pair ``covariance`` (s^4); ``(estimate dict, weights)``.

    ``A^2 = G^T C^-1 rho / G^T C^-1 G``, ``sigma^2 = 1 / G^T C^-1 G`` (Allen & Romano 2023).
    """
    solved = np.linalg.solve(covariance, gamma_ab)
    norm = float(gamma_ab @ solved)
    weights = solved / norm
    amplitude2 = float(weights @ pairs.rho)
    sigma = norm**-0.5
    return {"amplitude2": amplitude2, "sigma": sigma, "snr": amplitude2 / sigma}, weights


def per_frequency_statistics(products: FourierProducts, pairs: PairCorrelations, gamma_ab: np.ndarray) -> dict:
    """The weak-signal optimal statistic of each Fourier frequency alone: arrays (K,) of
    ``amplitude2``, ``sigma`` and ``snr``, ``Phi`` kept to that frequency's sine and cosine columns."""
    P, size = products.X.shape
    K = size // 2
    X = products.X.reshape(P, K, 2)
    k = np.arange(K)
    Z = products.Z.reshape(P, K, 2, K, 2)[:, k, :, k, :]  # (K, P, 2, 2): each frequency's own block
    phi = products.phi.reshape(K, 2)
    numerator = np.einsum("aki,bki,ki->kab", X, X, phi, optimize=True)[:, pairs.a, pairs.b]
    denominator = np.einsum("kaij,kbji,ki,kj->kab", Z, Z, phi, phi, optimize=True)[:, pairs.a, pairs.b]
    norm = np.sum(gamma_ab**2 * denominator, axis=1)
    amplitude2 = np.sum(numerator * gamma_ab, axis=1) / norm
    sigma = norm**-0.5
    return {"amplitude2": amplitude2, "sigma": sigma, "snr": amplitude2 / sigma}


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

"""How much binned pair correlations scatter about the curve, for this array.

Under the Gaussian ensemble the Fourier-domain products are jointly Gaussian
with ``E[X_a X_b^T] = Q_ab``: ``Q_aa = Z_a`` (plus ``(A^2 - A_model^2) Z_a Phi Z_a``
when the background differs from the one the noise model assumed) and
``Q_ab = A^2 Gamma_ab Z_a Phi Z_b``.  Isserlis' theorem then gives, with
``Y_ab = Phi^(1/2) Q_ab Phi^(1/2)`` and ``D_ab = tr(Z_a Phi Z_b Phi)``,
``Cov(rho_ab, rho_cd) = (<Y_ac, Y_bd> + <Y_ad, Y_bc>) / (D_ab D_cd)``
(``<,>``: sum of element-wise products).  This holds the measurement noise and
the background's own "cosmic" scatter (Allen 2023; Allen & Romano 2023, 2024;
PHYSICS.md, where one noise-free pair has ``Var = (1 + Gamma^2)/2``).

The exact sum needs ``(P (2K))^2`` numbers; for large arrays ptares keeps only
the diagonal of each ``Y`` (frequencies as independent measurements, the form
given in PHYSICS.md) and says so in its output.  Any weighted sum of pair
correlations (a bin, an optimal-statistic amplitude) has its variance from the
same sum (:func:`weighted_covariance`; Allen & Romano 2023 for the amplitude).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import stats

from ptares.correlation.fourier import FourierProducts
from ptares.correlation.pairs import PairCorrelations, pair_matrices
from ptares.errors import InputError
from ptares.limits import MEMORY_LIMIT

__all__ = [
    "EXACT_LIMIT",
    "BinnedCorrelations",
    "bin_pairs",
    "binned_covariance",
    "covariance_method",
    "ensemble_draws",
    "fit_quality",
    "pair_covariance",
    "refitted_chi2",
    "scaled_products",
    "weighted_covariance",
]

#: Largest P^2 (2K)^2 for which the exact pair-pair covariance is computed.
EXACT_LIMIT = 2.5e7
#: Working memory (bytes) of one pass of :func:`weighted_covariance` over the slices.
_CHUNK_BYTES = 2e8


@dataclass(frozen=True)
class BinnedCorrelations:
    """Noise-weighted means of ``rho`` in angular bins (radians) with their noise-only errors."""

    edges: np.ndarray
    centres: np.ndarray  #: weighted mean angle of the pairs in each bin
    rho: np.ndarray
    error: np.ndarray
    members: list  #: indices into the pair list, per bin
    weights: list  #: normalised weights of those pairs, per bin


def bin_pairs(pairs: PairCorrelations, bins: int = 8) -> BinnedCorrelations:
    """Bins of equal width in angle; empty bins are left out."""
    edges = np.linspace(0.0, np.pi, bins + 1)
    which = np.clip(np.digitize(pairs.angle, edges[1:-1]), 0, bins - 1)
    weights = 1.0 / pairs.sigma**2
    kept, centres, rho, error, members, normalised = [], [], [], [], [], []
    for k in range(bins):
        index = np.flatnonzero(which == k)
        if index.size == 0:
            continue
        w = weights[index] / weights[index].sum()
        kept.append(k)
        centres.append(np.sum(w * pairs.angle[index]))
        rho.append(np.sum(w * pairs.rho[index]))
        error.append(weights[index].sum() ** -0.5)
        members.append(index)
        normalised.append(w)
    return BinnedCorrelations(edges, np.array(centres), np.array(rho), np.array(error), members, normalised)


def scaled_products(products: FourierProducts) -> np.ndarray:
    """``Y_x = Phi^(1/2) Z_x Phi^(1/2)`` of every pulsar, (P, 2K, 2K)."""
    root = np.sqrt(products.phi)
    return root[None, :, None] * products.Z * root[None, None, :]


def _scaled_blocks(products: FourierProducts, amplitude2: float, model_amplitude2: float):
    """``Y_x`` (:func:`scaled_products`) and the diagonal blocks ``Y_xx`` of the ensemble covariance."""
    Y = scaled_products(products)
    auto = Y + (amplitude2 - model_amplitude2) * Y @ Y
    return Y, auto


def _slices(products: FourierProducts, gamma_matrix: np.ndarray, amplitude2: float, model_amplitude2: float):
    """Matrices ``M_s`` (S, P, P) with ``<Y_ac, Y_bd> = sum_s M_s[a, c] M_s[b, d]``, and the method.

    Exact: one slice per element (i, k) of the blocks, ``M_ik[a, c] = Y_ac[i, k]``;
    frequency-diagonal: one slice per basis column, each ``Y`` kept to its diagonal.
    """
    count, size = products.Z.shape[0], products.Z.shape[1]
    Y, auto = _scaled_blocks(products, amplitude2, model_amplitude2)
    off = amplitude2 * (gamma_matrix - np.diag(np.diag(gamma_matrix)))
    diagonal_index = np.arange(count)
    if covariance_method(products) == "exact":
        slices = off[None, None] * np.einsum("aij,cjk->ikac", Y, Y, optimize=True)
        slices[:, :, diagonal_index, diagonal_index] = auto.transpose(1, 2, 0)
        return slices.reshape(size * size, count, count), "exact"
    diagonal = np.einsum("xii->ix", Y)  # (2K, P)
    slices = off[None] * diagonal[:, :, None] * diagonal[:, None, :]
    slices[:, diagonal_index, diagonal_index] = np.einsum("xii->ix", auto)
    return slices, "frequency-diagonal"


def weighted_covariance(products: FourierProducts, pairs: PairCorrelations, weights: np.ndarray,
                        gamma_matrix: np.ndarray, amplitude2: float, model_amplitude2: float = 0.0):
    """Covariance of the weighted sums ``sum_pairs weights[m] * rho`` (weights: (n, pairs)); returns ``(matrix, method)``.

    A binned correlation and an optimal-statistic amplitude are both such sums.  With
    ``H_m[a, b] = weights[m, ab] / D_ab`` (symmetric) the Isserlis sum over ordered index
    pairs is ``sum_s tr(M_s H_m M_s^T H_n)``, twice the covariance (both orders of each pair).
    ``gamma_matrix`` is the P x P pattern of the background (its diagonal is not used).
    """
    weights = np.atleast_2d(weights)
    count = products.Z.shape[0]
    _, denominator = pair_matrices(products)
    H = np.zeros((len(weights), count, count))
    values = weights / denominator[pairs.a, pairs.b]
    H[:, pairs.a, pairs.b] = values
    H[:, pairs.b, pairs.a] = values
    slices, method = _slices(products, gamma_matrix, amplitude2, model_amplitude2)
    matrix = np.zeros((len(weights), len(weights)))
    chunk = max(1, int(_CHUNK_BYTES // (16 * len(weights) * count**2)))
    for start in range(0, len(slices), chunk):
        part = slices[start:start + chunk]
        right = (part[None] @ H[:, None]).reshape(len(weights), -1)  # M_s H_m
        left = (H[:, None] @ part[None]).reshape(len(weights), -1)  # H_n M_s
        matrix += 0.5 * right @ left.T
    return 0.5 * (matrix + matrix.T), method


def pair_covariance(products: FourierProducts, pairs: PairCorrelations, gamma_matrix: np.ndarray,
                    amplitude2: float, model_amplitude2: float = 0.0):
    """Covariance of all pair correlations, ``(pairs, pairs)`` in s^4, at ``amplitude2``; returns ``(matrix, method)``.

    ``Cov(rho_ab, rho_cd) = (<Y_ac, Y_bd> + <Y_ad, Y_bc>) / (D_ab D_cd)``; needs P^4 numbers.
    """
    count = products.Z.shape[0]
    memory = 8.0 * (count**4 + 3 * pairs.a.size**2)
    if memory > MEMORY_LIMIT:
        raise InputError(f"the pair-pair covariance of {count} pulsars needs {memory / 1e9:.1f} GB "
                         f"(at most {MEMORY_LIMIT / 1e9:.0f} GB is allowed); use estimator = 'weak-signal'",
                         "correlate.estimator")
    _, denominator = pair_matrices(products)
    slices, method = _slices(products, gamma_matrix, amplitude2, model_amplitude2)
    flat = slices.reshape(len(slices), count * count)
    gram = (flat.T @ flat).reshape(count, count, count, count)  # gram[a, c, b, d] = <Y_ac, Y_bd>
    a, b = pairs.a[:, None], pairs.b[:, None]
    c, d = pairs.a[None, :], pairs.b[None, :]
    scale = denominator[pairs.a, pairs.b]
    return (gram[a, c, b, d] + gram[a, d, b, c]) / np.outer(scale, scale), method


def binned_covariance(products: FourierProducts, pairs: PairCorrelations, binned: BinnedCorrelations,
                      gamma_matrix: np.ndarray, amplitude2: float, model_amplitude2: float = 0.0):
    """Covariance of the binned correlations at background ``amplitude2``; returns ``(matrix, method)``.

    ``gamma_matrix`` is the P x P pattern of the background (its diagonal is not used).
    """
    weights = np.zeros((len(binned.members), pairs.a.size))
    for row, index, w in zip(weights, binned.members, binned.weights):
        row[index] = w
    return weighted_covariance(products, pairs, weights, gamma_matrix, amplitude2, model_amplitude2)


def covariance_method(products: FourierProducts) -> str:
    """Which covariance :func:`binned_covariance` computes for these products: exact or frequency-diagonal."""
    count, size = products.Z.shape[0], products.Z.shape[1]
    return "exact" if count**2 * size**2 <= EXACT_LIMIT else "frequency-diagonal"


def ensemble_draws(products: FourierProducts, gamma_matrix: np.ndarray, amplitude2: float, model_amplitude2: float,
                   count: int, rng: np.random.Generator) -> np.ndarray:
    """``count`` draws of all pulsars' ``X`` (count, P, 2K) from the Gaussian ensemble at ``amplitude2``.

    The joint covariance has blocks ``Z_a + (A^2 - A_m^2) Z_a Phi Z_a`` and ``A^2 Gamma_ab Z_a Phi Z_b``.
    """
    Z, phi = products.Z, products.phi
    P, size = Z.shape[0], Z.shape[1]
    left = Z * phi[None, None, :]  # Z_a Phi
    joint = amplitude2 * np.einsum("ab,aij,bjk->aibk", gamma_matrix, left, Z, optimize=True)
    for a in range(P):
        joint[a, :, a, :] = Z[a] + (amplitude2 - model_amplitude2) * left[a] @ Z[a]
    joint = joint.reshape(P * size, P * size)
    joint = 0.5 * (joint + joint.T)
    try:
        root = np.linalg.cholesky(joint)  # fast; fails only for a singular ensemble (e.g. no noise)
    except np.linalg.LinAlgError:
        values, vectors = np.linalg.eigh(joint)
        root = vectors * np.sqrt(np.clip(values, 0.0, None))
    return (rng.standard_normal((count, P * size)) @ root.T).reshape(count, P, size)


def refitted_chi2(rows: np.ndarray, shape: np.ndarray, covariance_at, start: float, iterations: int = 5) -> tuple:
    """``(chi2, amplitude2)``, arrays (n,): the fit of ``A^2 * shape`` to each row of ``rows`` (n, bins), all at once.

    The amplitude is refitted by generalised least squares with the binned
    covariance evaluated at the current amplitude (``covariance_at(A2)``, which
    takes an array of amplitudes shaped (n, 1, 1)), iterated from ``start``
    (negative values are held at zero for the covariance, which needs a
    non-negative power).
    """
    rows = np.atleast_2d(rows)
    amplitude2 = np.full(len(rows), float(start))
    shapes = np.broadcast_to(shape, rows.shape)[..., None]
    for _ in range(iterations):
        weighted = np.linalg.solve(covariance_at(np.maximum(amplitude2, 0.0)[:, None, None]), shapes)[..., 0]
        amplitude2 = np.sum(weighted * rows, axis=1) / (weighted @ shape)
    residual = rows - amplitude2[:, None] * shape
    solved = np.linalg.solve(covariance_at(np.maximum(amplitude2, 0.0)[:, None, None]), residual[..., None])[..., 0]
    return np.sum(residual * solved, axis=1), amplitude2


def fit_quality(rho: np.ndarray, shape: np.ndarray, covariance_at, start: float, iterations: int = 5) -> dict:
    """Goodness of fit of ``A^2 * shape`` to the binned correlations ``rho`` (:func:`refitted_chi2`).

    ``p`` is the chi-squared tail probability with (bins - 1) degrees of freedom:
    approximate, since binned correlations are not exactly Gaussian.
    """
    (chi2,), (amplitude2,) = refitted_chi2(rho, shape, covariance_at, start, iterations)
    dof = max(len(rho) - 1, 1)
    return {"chi2": float(chi2), "dof": dof, "p": float(stats.chi2.sf(chi2, dof)), "amplitude2": float(amplitude2)}

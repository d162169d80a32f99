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
given in PHYSICS.md) and says so in its output.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import stats

from ptares.correlation.fourier import FourierProducts
from ptares.correlation.pairs import PairCorrelations, pair_matrices

__all__ = ["BinnedCorrelations", "bin_pairs", "binned_covariance", "covariance_method", "fit_quality", "EXACT_LIMIT"]

#: Largest P^2 (2K)^2 for which the exact pair-pair covariance is computed.
EXACT_LIMIT = 2.5e7


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


def _scaled_blocks(products: FourierProducts, amplitude2: float, model_amplitude2: float):
    """``Y_x = Phi^(1/2) Z_x Phi^(1/2)`` and the diagonal blocks ``Y_xx`` of the ensemble covariance."""
    root = np.sqrt(products.phi)
    Y = root[None, :, None] * products.Z * root[None, None, :]
    auto = Y + (amplitude2 - model_amplitude2) * Y @ Y
    return Y, auto


def _pair_weights(binned: BinnedCorrelations, denominator: np.ndarray, pairs: PairCorrelations, count: int):
    """Per bin, a symmetric P x P matrix of (normalised weight / D_ab)."""
    matrices = []
    for index, w in zip(binned.members, binned.weights):
        H = np.zeros((count, count))
        values = w / denominator[pairs.a[index], pairs.b[index]]
        H[pairs.a[index], pairs.b[index]] = values
        H[pairs.b[index], pairs.a[index]] = values
        matrices.append(H)
    return matrices


def binned_covariance(products: FourierProducts, pairs: PairCorrelations, binned: BinnedCorrelations,
                      gamma_matrix: np.ndarray, amplitude2: float, model_amplitude2: float = 0.0):
    """Covariance of the binned correlations at background ``amplitude2``; returns ``(matrix, method)``.

    ``gamma_matrix`` is the P x P pattern of the background (its diagonal is not used).
    """
    count, size = products.Z.shape[0], products.Z.shape[1]
    _, denominator = pair_matrices(products)
    exact = covariance_method(products) == "exact"
    Y, auto = _scaled_blocks(products, amplitude2, model_amplitude2)
    H = _pair_weights(binned, denominator, pairs, count)
    off = amplitude2 * (gamma_matrix - np.diag(np.diag(gamma_matrix)))
    if exact:
        # all blocks Y_xy: P x P x (2K)^2, then <Y_ac, Y_bd> for every (a, c), (b, d)
        blocks = off[:, :, None, None] * np.einsum("aij,cjk->acik", Y, Y, optimize=True)
        blocks[np.arange(count), np.arange(count)] = auto
        flat = blocks.reshape(count * count, size * size)
        gram = (flat @ flat.T).reshape(count, count, count, count)  # gram[a, c, b, d] = <Y_ac, Y_bd>
        # sum over ordered (a, b), (c, d) of H1[a, b] H2[c, d] <Y_ac, Y_bd> equals twice the unordered sum
        # of both Isserlis terms, so the unordered covariance is half of it
        matrix = np.array([[0.5 * np.einsum("ab,cd,acbd->", H1, H2, gram, optimize=True) for H2 in H] for H1 in H])
        return matrix, "exact"
    diagonal = np.einsum("xii->xi", Y)  # (P, 2K)
    auto_diagonal = np.einsum("xii->xi", auto)
    matrix = np.zeros((len(H), len(H)))
    for i in range(size):
        G = off * np.outer(diagonal[:, i], diagonal[:, i])
        G[np.diag_indices(count)] = auto_diagonal[:, i]
        products_i = [H1 @ G for H1 in H]
        for m, left in enumerate(products_i):
            for n, right in enumerate(products_i):
                matrix[m, n] += 0.5 * np.sum(left * right.T)
    return matrix, "frequency-diagonal"


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


def fit_quality(rho: np.ndarray, shape: np.ndarray, covariance_at, start: float, iterations: int = 5) -> dict:
    """Goodness of fit of ``A^2 * shape`` to the binned correlations ``rho``.

    The amplitude is refitted by generalised least squares with the binned
    covariance evaluated at the current amplitude (``covariance_at(A2)``),
    iterated from ``start`` (negative values are held at zero for the
    covariance, which needs a non-negative power).  ``p`` is the chi-squared
    tail probability with (bins - 1) degrees of freedom: approximate, since
    binned correlations are not exactly Gaussian.
    """
    amplitude2 = start
    for _ in range(iterations):
        covariance = covariance_at(max(amplitude2, 0.0))
        weighted = np.linalg.solve(covariance, shape)
        amplitude2 = float(weighted @ rho / (weighted @ shape))
    residual = rho - amplitude2 * shape
    chi2 = float(residual @ np.linalg.solve(covariance_at(max(amplitude2, 0.0)), residual))
    dof = max(len(residual) - 1, 1)
    return {"chi2": chi2, "dof": dof, "p": float(stats.chi2.sf(chi2, dof)), "amplitude2": amplitude2}

"""Exact noise-only distribution of the optimal statistic's S/N (PHYSICS.md).

With the noise model known and no inter-pulsar correlation, the Fourier-domain
products ``X_a`` are Gaussian with covariance ``blockdiag(Z_a)`` (the pulsars'
own noise, including any common auto-power the noise model assumes).  Any
fixed-weight statistic ``S/N = sum_pairs w rho / sigma`` is the quadratic form
``X^T Q X`` with blocks ``Q_ab = H_ab Phi / 2`` (a != b, ``H_ab = w_ab / (D_ab sigma)``)
and zero diagonal blocks, so it is distributed as ``sum_i lambda_i chi^2_1`` with
``lambda`` the eigenvalues of ``C^(1/2) Q C^(1/2)``.  Those equal the nonzero
eigenvalues of ``R^T (H x I) R / 2`` with ``Y_a = Phi^(1/2) Z_a Phi^(1/2) = R_a R_a^T``
(size P 2K).  Above :data:`EIGEN_LIMIT` each ``Y_a`` is kept to its diagonal, which
splits the problem into one P x P problem per basis column (the
"frequency-diagonal" form of :mod:`ptares.correlation.scatter`).

Tail probabilities follow Imhof (1961, Biometrika 48, 419):
``P(S > x) = 1/2 + (1/pi) int_0^inf sin theta(u) / (u rho(u)) du`` with
``theta(u) = sum arctan(lambda_i u) / 2 - x u / 2`` and
``rho(u) = prod (1 + lambda_i^2 u^2)^(1/4)``; the density is
``f(x) = (1 / 2 pi) int_0^inf cos theta(u) / rho(u) du`` (the same inversion).
The cumulants of ``sum lambda_i chi^2_1`` are ``kappa_r = 2^(r-1) (r-1)! sum lambda^r``,
so the mean is ``sum lambda`` (zero here: Q has no diagonal blocks), the variance
``2 sum lambda^2`` and the skewness ``kappa_3 / kappa_2^(3/2) = 2^(3/2) sum lambda^3 / (sum lambda^2)^(3/2)``.
"""

from __future__ import annotations

import numpy as np
from scipy import integrate

from ptares.correlation.fourier import FourierProducts
from ptares.correlation.pairs import PairCorrelations, pair_matrices
from ptares.correlation.scatter import scaled_products
from ptares.limits import MEMORY_LIMIT

__all__ = ["EIGEN_LIMIT", "NULL_DESCRIPTION", "null_density", "null_eigenvalues", "null_skewness", "signal_eigenvalues",
           "tail_probability", "threshold"]

#: Largest P 2K for which the eigenvalues are computed without approximation.
EIGEN_LIMIT = 3000
#: The null every exact p-value assumes.
NULL_DESCRIPTION = "noise only, noise model as assumed, Gaussian; estimator weights held fixed"
#: Absolute accuracy asked of the Imhof integral.
TOLERANCE = 1e-11


def null_eigenvalues(products: FourierProducts, pairs: PairCorrelations, weights: np.ndarray, sigma: float,
                     limit=None):
    """``(lambda, method)``: S/N of ``sum weights * rho / sigma`` is ``sum lambda_i chi^2_1`` under the null
    (exact up to ``limit`` rows P x 2K, by default :data:`EIGEN_LIMIT`).

    ``method`` is "exact", "frequency-diagonal", or ``None`` when even the
    approximation would exceed :data:`ptares.limits.MEMORY_LIMIT` (lambda is then empty).
    """
    count, size = products.Z.shape[0], products.Z.shape[1]
    _, denominator = pair_matrices(products)
    H = np.zeros((count, count))
    H[pairs.a, pairs.b] = weights / (denominator[pairs.a, pairs.b] * sigma)
    H = H + H.T
    Y = scaled_products(products)
    if count * size <= (EIGEN_LIMIT if limit is None else limit):
        values, vectors = np.linalg.eigh(Y)
        R = vectors * np.sqrt(np.clip(values, 0.0, None))[:, None, :]  # Y_a = R_a R_a^T
        blocks = 0.5 * H[:, None, :, None] * np.einsum("aji,bjk->aibk", R, R, optimize=True)
        return np.linalg.eigvalsh(blocks.reshape(count * size, count * size)), "exact"
    if 3 * size * count**2 * 8 > MEMORY_LIMIT:
        return np.empty(0), None
    diagonal = np.sqrt(np.clip(np.einsum("xii->ix", Y), 0.0, None))  # (2K, P)
    blocks = 0.5 * diagonal[:, :, None] * H[None] * diagonal[:, None, :]
    return np.linalg.eigvalsh(blocks).ravel(), "frequency-diagonal"


def signal_eigenvalues(products: FourierProducts, pairs: PairCorrelations, weights: np.ndarray, sigma: float,
                       gamma_matrix: np.ndarray, amplitude2: float, model_amplitude2: float,
                       limit: int = EIGEN_LIMIT):
    """``(lambda, method)`` of the same statistic when the data hold a background ``amplitude2`` with pattern
    ``gamma_matrix`` (P x P; its diagonal is not used) and the noise model assumed ``model_amplitude2``.

    In scaled coordinates ``Phi^(1/2) X_a`` the data covariance has blocks ``Y_a + (A^2 - A_m^2) Y_a Y_a``
    and ``A^2 Gamma_ab Y_a Y_b`` (:mod:`ptares.correlation.scatter`) and the statistic is
    ``sum_(a<b) H_ab (Phi^(1/2) X_a)^T (Phi^(1/2) X_b)``; lambda are the eigenvalues of ``L^T Q L`` with
    ``C = L L^T``.  Exact up to ``P 2K = limit``, beyond it one P x P problem per basis column with each
    ``Y`` kept to its diagonal ("frequency-diagonal").  With ``amplitude2 = model_amplitude2`` and no
    correlation this is :func:`null_eigenvalues`.
    """
    count, size = products.Z.shape[0], products.Z.shape[1]
    _, denominator = pair_matrices(products)
    H = np.zeros((count, count))
    H[pairs.a, pairs.b] = weights / (denominator[pairs.a, pairs.b] * sigma)
    H = H + H.T
    off = amplitude2 * (gamma_matrix - np.diag(np.diag(gamma_matrix)))
    excess = amplitude2 - model_amplitude2
    Y = scaled_products(products)
    if count * size <= limit:
        covariance = np.einsum("ab,aij,bjk->aibk", off, Y, Y, optimize=True)
        for a in range(count):
            covariance[a, :, a, :] = Y[a] + excess * Y[a] @ Y[a]
        covariance = covariance.reshape(count * size, count * size)
        root = _root(0.5 * (covariance + covariance.T))
        statistic = 0.5 * np.kron(H, np.eye(size))
        return np.linalg.eigvalsh(root.T @ statistic @ root), "exact"
    if 3 * size * count**2 * 8 > MEMORY_LIMIT:
        return np.empty(0), None
    diagonal = np.einsum("xii->ix", Y)  # (2K, P)
    values = []
    for y in diagonal:
        covariance = off * np.outer(y, y) + np.diag(y + excess * y**2)
        root = _root(covariance)
        values.append(np.linalg.eigvalsh(0.5 * root.T @ H @ root))
    return np.concatenate(values), "frequency-diagonal"


def _root(covariance: np.ndarray) -> np.ndarray:
    """``L`` with ``L L^T = covariance`` (Cholesky; a symmetric root where that fails)."""
    try:
        return np.linalg.cholesky(covariance)
    except np.linalg.LinAlgError:
        values, vectors = np.linalg.eigh(covariance)
        return vectors * np.sqrt(np.clip(values, 0.0, None))


def threshold(false_alarm: float, eigenvalues) -> float:
    """The ``x`` with ``P(sum lambda_i chi^2_1 > x) = false_alarm`` (Imhof's tail, :func:`tail_probability`), to
    1e-4 of the distribution's standard deviation.  The search starts at the quantile of the gamma
    distribution with the same mean, variance and skewness."""
    from scipy import stats
    from scipy.optimize import brentq

    lam = _kept(eigenvalues)
    mean, spread = float(np.sum(lam)), float(np.sqrt(2.0 * np.sum(lam**2)))
    skew = null_skewness(lam)
    if skew > 1e-6:
        shape = 4.0 / skew**2
        guess = mean + spread * (stats.gamma.isf(false_alarm, shape) - shape) / np.sqrt(shape)
    else:
        guess = mean + spread * stats.norm.isf(false_alarm)
    step = 0.05 * spread
    low, high = guess - step, guess + step
    while tail_probability(low, lam) < false_alarm:
        low, step = low - step, 2 * step
    while tail_probability(high, lam) > false_alarm:
        high, step = high + step, 2 * step
    return float(brentq(lambda x: tail_probability(x, lam) - false_alarm, low, high, xtol=1e-4 * spread))


def _kept(eigenvalues) -> np.ndarray:
    eigenvalues = np.asarray(eigenvalues, dtype=float)
    return eigenvalues[np.abs(eigenvalues) > 1e-12 * np.max(np.abs(eigenvalues))]


def _upper_limit(eigenvalues: np.ndarray, tolerance: float) -> float:
    """A ``U`` beyond which ``int_U^inf du / (u rho(u)) < pi tolerance``.

    ``log rho`` is convex in ``log u`` with slope ``k(u) = sum t^2 / (1 + t^2) / 2``,
    ``t = lambda u``, so that tail is at most ``1 / (k(U) rho(U))``.
    """
    u = 1.0 / np.max(np.abs(eigenvalues))
    for _ in range(200):
        t2 = (eigenvalues * u) ** 2
        slope = 0.5 * np.sum(t2 / (1.0 + t2))
        if -0.25 * np.sum(np.log1p(t2)) - np.log(slope) < np.log(np.pi * tolerance):
            return u
        u *= 1.5
    return u


def tail_probability(x: float, eigenvalues) -> float:
    """``P(sum lambda_i chi^2_1 > x)`` by Imhof's method (absolute accuracy about 1e-9).

    The integral runs to ``a``, 20 times the longest scale ``1 / max |lambda|`` of the phase (or less where
    the envelope ``1 / (u rho)`` has fallen below 1e-3 before that); beyond,
    ``sin theta = sin phi cos(x u / 2) - cos phi sin(x u / 2)`` with ``phi = sum arctan(lambda u) / 2``
    slowly varying, and the two Fourier integrals go to quadpack's routine for them (QAWF).
    """
    lam = _kept(eigenvalues)
    known = {}  # the two Fourier integrals evaluate the same nodes

    def terms(u):
        if u not in known:
            t = lam * u
            # the envelope in logs: no overflow far out
            known[u] = (0.5 * np.sum(np.arctan(t)), np.exp(-np.log(u) - 0.25 * np.sum(np.log1p(t * t))))
        return known[u]

    def phase(u):
        return terms(u)[0]

    def envelope(u):
        return terms(u)[1]

    a = min(_upper_limit(lam, 1e-3), 20.0 / np.max(np.abs(lam)))
    options = {"limit": 2000, "epsabs": TOLERANCE, "epsrel": 1e-10}
    value = integrate.quad(lambda u: np.sin(phase(u) - 0.5 * x * u) * envelope(u), 0.0, a, **options)[0]
    if x == 0.0:
        value += integrate.quad(lambda u: np.sin(phase(u)) * envelope(u), a, np.inf, **options)[0]
    else:
        omega, sign = 0.5 * abs(x), np.sign(x)
        value += integrate.quad(lambda u: np.sin(phase(u)) * envelope(u), a, np.inf, weight="cos", wvar=omega,
                                limlst=200, epsabs=TOLERANCE)[0]
        value -= sign * integrate.quad(lambda u: np.cos(phase(u)) * envelope(u), a, np.inf, weight="sin", wvar=omega,
                                       limlst=200, epsabs=TOLERANCE)[0]
    return float(np.clip(0.5 + value / np.pi, 0.0, 1.0))


def null_density(x: np.ndarray, eigenvalues, points: int = 20_000) -> np.ndarray:
    """Density of ``sum lambda_i chi^2_1`` at ``x``: Imhof's inversion integral by the trapezoid rule on at
    most ``points`` nodes; where that cannot resolve it (few eigenvalues: a slowly decaying integrand),
    central differences of :func:`tail_probability`."""
    lam = _kept(eigenvalues)
    x = np.asarray(x, dtype=float)
    upper = _upper_limit(lam, 1e-6)
    # resolve the fastest oscillation, d theta / du <= (sum |lambda| + max |x|) / 2, with 16 nodes a period
    step = 2.0 * np.pi / (8.0 * (np.sum(np.abs(lam)) + np.max(np.abs(x))))
    if upper / step > points:
        h = 1e-4 * np.sqrt(2.0 * np.sum(lam**2))
        return np.array([(tail_probability(v - h, lam) - tail_probability(v + h, lam)) / (2 * h) for v in x.ravel()])
    u = np.linspace(0.0, upper, int(max(upper / step, 1000)))
    theta0, envelope = np.empty_like(u), np.empty_like(u)
    for part in np.array_split(np.arange(u.size), max(1, u.size * lam.size // 5_000_000)):
        t = np.outer(u[part], lam)
        theta0[part] = 0.5 * np.arctan(t).sum(axis=1)
        envelope[part] = np.exp(-0.25 * np.log1p(t**2).sum(axis=1))
    values = np.cos(theta0[:, None] - 0.5 * u[:, None] * x[None, :]) * envelope[:, None]
    return np.clip(integrate.trapezoid(values, u, axis=0) / (2.0 * np.pi), 0.0, None)


def null_skewness(eigenvalues) -> float:
    """Skewness of ``sum lambda_i chi^2_1``: ``2^(3/2) sum lambda^3 / (sum lambda^2)^(3/2)``."""
    lam = np.asarray(eigenvalues, dtype=float)
    return float(2.0**1.5 * np.sum(lam**3) / np.sum(lam**2) ** 1.5)

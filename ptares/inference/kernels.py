"""Hot loops of the Gibbs sampler, as numba kernels with numpy twins.

Both densities are evaluated thousands of times per iteration on small matrices,
where the call overhead of library wrappers, not arithmetic, dominates; the kernels
do the same algebra in one compiled call.  The ``*_reference`` twins are the plain
numpy forms the tests hold the kernels to.

* :func:`white_log_likelihood`: ln p(r | white noise) of one pulsar's residuals
  ``r`` (its Fourier part already subtracted) with the timing model integrated out
  (PHYSICS.md, "Likelihood"): ``-1/2 [r^T N'^-1 r + ln|N| + ln|M^T N^-1 M| - ln|M^T M|
  + (n - m) ln 2 pi]``.
* :func:`collapsed`: ln p(r | coefficients ~ N(mean, diag variance)) up to the
  white-noise terms, by Woodbury from ``F^T N'^-1 F``, ``F^T N'^-1 r`` and
  ``r^T N'^-1 r``; and, given standard normal ``noise``, a draw of the coefficients
  from their Gaussian conditional (precision ``Sigma = F^T N'^-1 F + diag(1/variance)``,
  mean ``mean + Sigma^-1 (F^T N'^-1 r - F^T N'^-1 F mean)``).
"""

from __future__ import annotations

import math

import numba
import numpy as np

__all__ = ["white_log_likelihood", "white_log_likelihood_reference", "collapsed", "collapsed_reference", "collapsed_total"]

_LOG_2PI = math.log(2.0 * math.pi)


@numba.njit(cache=True, error_model="numpy")
def _factor(matrix):  # pragma: no cover - compiled
    """(lower Cholesky factor by LAPACK, True), or (matrix, False) where it is not positive definite."""
    try:
        return np.linalg.cholesky(matrix), True
    except Exception:  # numba raises LinAlgError for a matrix that is not positive definite
        return matrix, False


@numba.njit(cache=True, error_model="numpy")
def _forward(lower, right):  # pragma: no cover - compiled
    """``L^-1 right``."""
    size = right.size
    out = np.empty(size)
    for i in range(size):
        total = right[i]
        for k in range(i):
            total -= lower[i, k] * out[k]
        out[i] = total / lower[i, i]
    return out


@numba.njit(cache=True, error_model="numpy")
def _backward(lower, right):  # pragma: no cover - compiled
    """``L^-T right``."""
    size = right.size
    out = np.empty(size)
    for i in range(size - 1, -1, -1):
        total = right[i]
        for k in range(i + 1, size):
            total -= lower[k, i] * out[k]
        out[i] = total / lower[i, i]
    return out


@numba.njit(cache=True, error_model="numpy")
def _white_log_likelihood(errors, residual, design, scale, quadrature, log_det_mtm):  # pragma: no cover - compiled
    n, m = design.shape
    value = 0.0
    log_det = 0.0
    MNM = np.zeros((m, m))
    MNr = np.zeros(m)
    for i in range(n):
        weight = 1.0 / ((scale * errors[i]) ** 2 + quadrature * quadrature)
        log_det -= math.log(weight)
        r = residual[i]
        value += weight * r * r
        for j in range(m):
            mw = design[i, j] * weight
            MNr[j] += mw * r
            for k in range(j + 1):
                MNM[j, k] += mw * design[i, k]
    if m:
        for j in range(m):  # filled below the diagonal only
            for k in range(j):
                MNM[k, j] = MNM[j, k]
        lower, ok = _factor(MNM)
        if not ok:
            return -np.inf
        whitened = _forward(lower, MNr)
        for j in range(m):
            value -= whitened[j] * whitened[j]
            log_det += 2.0 * math.log(lower[j, j])
        log_det -= log_det_mtm
    return -0.5 * (value + log_det + (n - m) * _LOG_2PI)


def white_log_likelihood(errors, residual, design, scale: float, quadrature: float, log_det_mtm: float) -> float:
    """ln p(residual | white noise ``(scale * errors)^2 + quadrature^2``), timing model (``design``) integrated out."""
    return _white_log_likelihood(errors, residual, design, float(scale), float(quadrature), float(log_det_mtm))


def white_log_likelihood_reference(errors, residual, design, scale, quadrature, log_det_mtm) -> float:
    weights = 1.0 / ((scale * errors) ** 2 + quadrature**2)
    value = float(residual @ (weights * residual))
    log_det = -float(np.sum(np.log(weights)))
    m = design.shape[1]
    if m:
        MNM = (design.T * weights) @ design
        MNr = (design.T * weights) @ residual
        value -= float(MNr @ np.linalg.solve(MNM, MNr))
        log_det += float(np.linalg.slogdet(MNM)[1]) - log_det_mtm
    return -0.5 * (value + log_det + (residual.size - m) * _LOG_2PI)


@numba.njit(cache=True, error_model="numpy")
def _collapsed(FNF, FNr, rNr, mean, variance, noise):  # pragma: no cover - compiled
    size = variance.size
    kept = np.empty(size, dtype=np.int64)
    count = 0
    for j in range(size):
        if variance[j] > 0.0:
            kept[count] = j
            count += 1
    d = np.empty(count)
    sigma = np.zeros((count, count))
    quadratic = rNr
    has_mean = False
    for j in range(size):
        if mean[j] != 0.0:
            has_mean = True
    for a in range(count):
        i = kept[a]
        total = FNr[i]
        if has_mean:
            for j in range(size):
                total -= FNF[i, j] * mean[j]
        d[a] = total
        for b in range(a + 1):
            sigma[a, b] = FNF[i, kept[b]]
        sigma[a, a] += 1.0 / variance[i]
    if has_mean:
        for i in range(size):
            quadratic -= 2.0 * mean[i] * FNr[i]
            for j in range(size):
                quadratic += mean[i] * FNF[i, j] * mean[j]
    draw = np.empty(0)
    for a in range(count):  # filled below the diagonal only
        for b in range(a):
            sigma[b, a] = sigma[a, b]
    sigma, ok = _factor(sigma)
    if not ok:
        return -np.inf, draw
    whitened = _forward(sigma, d)
    value = -0.5 * quadratic
    for a in range(count):
        value += 0.5 * whitened[a] * whitened[a] - 0.5 * math.log(variance[kept[a]]) - math.log(sigma[a, a])
    if noise.size:
        draw = mean.copy()
        shifted = _backward(sigma, whitened + noise[:count])
        for a in range(count):
            draw[kept[a]] += shifted[a]
    return value, draw


def collapsed(FNF, FNr, rNr: float, mean, variance, noise=None):
    """``(ln p(r | a ~ N(mean, diag variance)) up to white-noise terms, draw of a | r)``; the draw (``noise``:
    standard normals, one per column) is empty without ``noise``; ``-inf`` where Sigma is not positive definite."""
    return _collapsed(FNF, FNr, float(rNr), mean, variance, np.empty(0) if noise is None else noise)


def collapsed_reference(FNF, FNr, rNr, mean, variance, noise=None):
    kept = variance > 0
    d = (FNr - FNF @ mean)[kept]
    sigma = FNF[np.ix_(kept, kept)] + np.diag(1.0 / variance[kept])
    lower = np.linalg.cholesky(sigma)
    whitened = np.linalg.solve(lower, d)
    value = (0.5 * float(whitened @ whitened) - 0.5 * float(np.sum(np.log(variance[kept])))
             - float(np.sum(np.log(np.diag(lower)))) - 0.5 * (rNr - 2.0 * float(mean @ FNr) + float(mean @ FNF @ mean)))
    if noise is None:
        return value, np.empty(0)
    draw = mean.copy()
    draw[kept] += np.linalg.solve(lower.T, whitened + noise[: int(kept.sum())])
    return value, draw


@numba.njit(cache=True, error_model="numpy")
def _collapsed_total(FNF, FNr, rNr, variance):  # pragma: no cover - compiled
    total = 0.0
    mean = np.zeros(variance.shape[1])
    for p in range(variance.shape[0]):
        total += _collapsed(FNF[p], FNr[p], rNr[p], mean, variance[p], np.empty(0))[0]
        if total == -np.inf:
            break
    return total


def collapsed_total(FNF, FNr, rNr, variance) -> float:
    """Sum over pulsars of :func:`collapsed` with zero-mean coefficients: arrays stacked over pulsars
    ((P, s, s), (P, s), (P,), (P, s)); the uncorrelated model's likelihood up to white-noise terms."""
    return _collapsed_total(FNF, FNr, np.asarray(rNr, dtype=float), variance)

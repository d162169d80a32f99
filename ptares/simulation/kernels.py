"""Hot loops: Fourier synthesis of residuals, as numba kernels with numpy twins.

A stochastic signal on the basis ``f_k = k * df`` (k = 1..K) is
``r(t) = sum_k sine[k] sin(2 pi f_k t) + cosine[k] cos(2 pi f_k t)``.
The kernel evaluates one sine and one cosine per TOA and steps through the
harmonics with the angle-addition recurrence, so its cost is ``O(N K)``
multiply-adds instead of ``O(N K)`` trigonometric calls; it runs in parallel
over TOAs.  :func:`synthesise_reference` is the plain numpy twin that the tests
hold it to.
"""

from __future__ import annotations

import math

import numba
import numpy as np

__all__ = ["synthesise", "synthesise_reference", "wave_residuals", "wave_residuals_reference"]


@numba.njit(parallel=True, cache=True)
def _synthesise(times, owner, df, sine, cosine):  # pragma: no cover - compiled
    out = np.empty(times.size)
    harmonics = sine.shape[1]
    for i in numba.prange(times.size):
        row = owner[i]
        x = 2.0 * np.pi * df * times[i]
        s1 = np.sin(x)
        c1 = np.cos(x)
        s = s1
        c = c1
        total = 0.0
        for k in range(harmonics):
            total += sine[row, k] * s + cosine[row, k] * c
            s, c = s * c1 + c * s1, c * c1 - s * s1
        out[i] = total
    return out


def synthesise(times, owner, df, sine, cosine) -> np.ndarray:
    """Fourier synthesis for many series at once.

    Parameters
    ----------
    times : (N,) float, seconds from the basis origin.
    owner : (N,) int, which row of the coefficient arrays each time belongs to.
    df : float, fundamental frequency (Hz); harmonic k (1-based) is ``k * df``.
    sine, cosine : (rows, K) float, coefficients (s).
    """
    return _synthesise(
        np.ascontiguousarray(times, dtype=np.float64),
        np.ascontiguousarray(owner, dtype=np.int64),
        float(df),
        np.ascontiguousarray(sine, dtype=np.float64),
        np.ascontiguousarray(cosine, dtype=np.float64),
    )


def synthesise_reference(times, owner, df, sine, cosine) -> np.ndarray:
    """Numpy twin of :func:`synthesise`: explicit sines and cosines of every harmonic."""
    times = np.asarray(times, dtype=float)
    owner = np.asarray(owner)
    harmonics = np.arange(1, np.shape(sine)[1] + 1)
    phase = 2.0 * np.pi * df * times[:, None] * harmonics[None, :]
    return np.sum(np.sin(phase) * sine[owner] + np.cos(phase) * cosine[owner], axis=1)


# --- Continuous waves -------------------------------------------------------
#
# A binary's residual in pulsar a is a sum of two "terms" (Earth and pulsar),
# each of the form
#     amp * y(t) * [F+ w+ sin theta(t) + Fx wx cos theta(t)],
#     theta(t) = theta0 + angular * t * h(rate * t),   y(t) = (1 - rate * t)^(1/8),
#     h(x) = (1 - (1 - x)^(5/8)) / (5 x / 8),
# which is the Peters evolution of the GW phase written about the term's own
# reference moment (rate = 0: a monochromatic wave).  See
# :mod:`ptares.simulation.signals.continuous` for how the parameters are prepared.  The
# kernel needs many sines and cosines, so it uses its own branch-light
# ``_sincos`` (Cody–Waite reduction, Taylor polynomials on |r| <= pi/4) that
# LLVM can vectorise, and evaluates (1 - x)^(1/8) with three square roots.

_PI_50 = "3.14159265358979323846264338327950288419716939937510"


def _truncate(value: float, bits: int) -> float:
    mantissa, exponent = math.frexp(value)
    return math.ldexp(math.floor(mantissa * 2**bits) / 2**bits, exponent)


def _half_pi_parts():
    """pi/2 as three floats, the first two with 33 significant bits, so n * part is exact for |n| < 2^20."""
    from decimal import Decimal, getcontext

    getcontext().prec = 50
    half_pi = Decimal(_PI_50) / 2
    first = _truncate(float(half_pi), 33)
    second = _truncate(float(half_pi - Decimal(first)), 33)
    third = float(half_pi - Decimal(first) - Decimal(second))
    return first, second, third


_HP1, _HP2, _HP3 = _half_pi_parts()
_TWO_OVER_PI = 2.0 / math.pi
_SERIES_LIMIT = 0.05  #: |rate * t| below which h(x) uses its power series
_SERIES_TERMS = 14  #: 0.05^14 < 1e-18
# coefficients d_m of h(x) = sum_m d_m x^m: d_0 = 1, d_m = d_(m-1) (m - 5/8) / (m + 1) (binomial series)
_H = [1.0]
for _m in range(1, _SERIES_TERMS):
    _H.append(_H[-1] * (_m - 5.0 / 8.0) / (_m + 1))
_H1, _H2, _H3, _H4, _H5, _H6, _H7, _H8, _H9, _H10, _H11, _H12, _H13 = _H[1:]


@numba.njit(inline="always", cache=True, error_model="numpy")
def _sincos(x):  # pragma: no cover - compiled
    """sin x and cos x to about one ulp for |x| < 1.6e6, free of branches and calls so loops vectorise."""
    n = np.floor(x * _TWO_OVER_PI + 0.5)
    r = ((x - n * _HP1) - n * _HP2) - n * _HP3
    r2 = r * r
    s = r * (1.0 + r2 * (-1.0 / 6 + r2 * (1.0 / 120 + r2 * (-1.0 / 5040 + r2 * (1.0 / 362880 + r2 * (
        -1.0 / 39916800 + r2 * (1.0 / 6227020800 + r2 * (-1.0 / 1307674368000 + r2 * (1.0 / 355687428096000)))))))))
    c = 1.0 + r2 * (-0.5 + r2 * (1.0 / 24 + r2 * (-1.0 / 720 + r2 * (1.0 / 40320 + r2 * (-1.0 / 3628800 + r2 * (
        1.0 / 479001600 + r2 * (-1.0 / 87178291200 + r2 * (1.0 / 20922789888000 + r2 * (-1.0 / 6402373705728000)))))))))
    quadrant = n - 4.0 * np.floor(0.25 * n)  # n mod 4, kept in floating point
    # arithmetic selection (no branches, so that loops vectorise): swap for odd quadrants, then signs
    odd = quadrant - 2.0 * np.floor(0.5 * quadrant)
    sine = s + odd * (c - s)
    cosine = c + odd * (s - c)
    shifted = quadrant + 1.0
    shifted -= 4.0 * np.floor(0.25 * shifted)
    sine *= 1.0 - 2.0 * np.floor(0.5 * quadrant)
    cosine *= 1.0 - 2.0 * np.floor(0.5 * shifted)
    return sine, cosine


@numba.njit(inline="always", cache=True, error_model="numpy")
def _h_series(x):  # pragma: no cover - compiled
    """h(x) = (1 - (1 - x)^(5/8)) / (5 x / 8) by its power series, for |x| < 0.05 (14 terms)."""
    h = _H13
    h = h * x + _H12
    h = h * x + _H11
    h = h * x + _H10
    h = h * x + _H9
    h = h * x + _H8
    h = h * x + _H7
    h = h * x + _H6
    h = h * x + _H5
    h = h * x + _H4
    h = h * x + _H3
    h = h * x + _H2
    h = h * x + _H1
    return h * x + 1.0


@numba.njit(cache=True, error_model="numpy")
def _add_term(out, times, theta0, angular, rate, amp, ep, ex, series):  # pragma: no cover
    """Add one Earth or pulsar term to ``out``; the three loops differ only in h and y.

    Loops run from 0 so numba knows no index is negative and LLVM vectorises them.
    """
    if rate == 0.0:
        for i in range(times.size):
            sine, cosine = _sincos(theta0 + angular * times[i])
            out[i] += amp * (ep * sine + ex * cosine)
    elif series:
        for i in range(times.size):
            x = rate * times[i]
            y = math.sqrt(math.sqrt(math.sqrt(1.0 - x)))
            sine, cosine = _sincos(theta0 + angular * times[i] * _h_series(x))
            out[i] += amp * y * (ep * sine + ex * cosine)
    else:
        for i in range(times.size):
            x = rate * times[i]
            y = math.sqrt(math.sqrt(math.sqrt(1.0 - x)))
            y2 = y * y
            h = (1.0 - y2 * y2 * y) / (0.625 * x)  # numpy error model: x = 0 gives nan, replaced below
            h = 1.0 if x == 0.0 else h
            sine, cosine = _sincos(theta0 + angular * times[i] * h)
            out[i] += amp * y * (ep * sine + ex * cosine)


@numba.njit(parallel=True, cache=True, error_model="numpy")
def _wave_residuals(times, bounds, earth, pulsar, fplus, fcross, weights):  # pragma: no cover - compiled
    out = np.zeros(times.size)
    for a in numba.prange(bounds.size - 1):
        lo, hi = bounds[a], bounds[a + 1]
        if hi == lo:
            continue
        mine = times[lo:hi]
        result = out[lo:hi]
        t_max = max(abs(mine[0]), abs(mine[-1]))
        for s in range(earth.shape[0]):
            ep = fplus[s, a] * weights[s, 0]
            ex = fcross[s, a] * weights[s, 1]
            theta0, angular, rate, amp = earth[s, 0], earth[s, 1], earth[s, 2], earth[s, 3]
            if amp != 0.0:
                _add_term(result, mine, theta0, angular, rate, amp, ep, ex, abs(rate) * t_max < _SERIES_LIMIT)
            theta0, angular, rate, amp = pulsar[s, a, 0], pulsar[s, a, 1], pulsar[s, a, 2], pulsar[s, a, 3]
            if amp != 0.0:
                _add_term(result, mine, theta0, angular, rate, -amp, ep, ex, abs(rate) * t_max < _SERIES_LIMIT)
    return out


def wave_residuals(times, bounds, earth, pulsar, fplus, fcross, weights) -> np.ndarray:
    """Summed continuous-wave residuals (s) at every TOA.

    Parameters
    ----------
    times : (N,) s from the basis origin, all pulsars concatenated.
    bounds : (P + 1,) int, pulsar a owns ``times[bounds[a]:bounds[a + 1]]``.
    earth : (S, 4) per source ``theta0, angular, rate, amp`` of the Earth term.
    pulsar : (S, P, 4) the same for each pulsar term (``amp`` 0 switches it off).
    fplus, fcross : (S, P) antenna patterns.
    weights : (S, 2) inclination weights ``(1 + cos^2 i) / 2`` and ``-cos i``.
    """
    return _wave_residuals(
        np.ascontiguousarray(times, dtype=np.float64),
        np.ascontiguousarray(bounds, dtype=np.int64),
        np.ascontiguousarray(earth, dtype=np.float64),
        np.ascontiguousarray(pulsar, dtype=np.float64),
        np.ascontiguousarray(fplus, dtype=np.float64),
        np.ascontiguousarray(fcross, dtype=np.float64),
        np.ascontiguousarray(weights, dtype=np.float64),
    )


def _term_reference(t, theta0, angular, rate, amp):
    """One term for arrays of sources (axis 0) at times ``t`` (axis 1), with numpy's accurate functions."""
    x = rate[:, None] * t[None, :]
    with np.errstate(invalid="ignore", divide="ignore"):
        h = np.where(x == 0.0, 1.0, -np.expm1(0.625 * np.log1p(-x)) / (0.625 * x))
    theta = theta0[:, None] + angular[:, None] * t[None, :] * h
    y = (1.0 - x) ** 0.125
    return amp[:, None] * y * np.sin(theta), amp[:, None] * y * np.cos(theta)


def wave_residuals_reference(times, bounds, earth, pulsar, fplus, fcross, weights) -> np.ndarray:
    """Numpy twin of :func:`wave_residuals` (same inputs)."""
    out = np.zeros(len(times))
    for a in range(len(bounds) - 1):
        t = np.asarray(times[bounds[a] : bounds[a + 1]], dtype=float)
        es, ec = _term_reference(t, *earth.T)
        ps, pc = _term_reference(t, *pulsar[:, a, :].T)
        plus = (fplus[:, a] * weights[:, 0])[:, None]
        cross = (fcross[:, a] * weights[:, 1])[:, None]
        out[bounds[a] : bounds[a + 1]] = np.sum(plus * (es - ps) + cross * (ec - pc), axis=0)
    return out

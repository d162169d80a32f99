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

import numba
import numpy as np

__all__ = ["synthesise", "synthesise_reference"]


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

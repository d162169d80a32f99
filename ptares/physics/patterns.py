"""Inter-pulsar correlation patterns of a common signal.

A pattern maps the angle between two distinct pulsars (radians) to the
correlation coefficient ``Gamma`` of the signal in them.  The Hellings–Downs
curve (Hellings & Downs 1983, ApJ 265, L39) belongs to an isotropic
gravitational-wave background (Earth terms); the monopole belongs to clock
errors and the dipole to solar-system ephemeris errors (common practice).
In :func:`correlation_matrix` the diagonal is each pulsar's autocorrelation,
which for the background includes the pulsar term and equals 1.
"""

from __future__ import annotations

import numpy as np

from ptares.physics.sky import separation_matrix

__all__ = [
    "hellings_downs",
    "monopole",
    "dipole",
    "uncorrelated",
    "PATTERNS",
    "correlation_matrix",
    "pattern_function",
]


def hellings_downs(angle) -> np.ndarray:
    """Hellings–Downs correlation for distinct pulsars separated by ``angle`` (radians).

    ``Gamma = (3/2) x ln x - x/4 + 1/2`` with ``x = (1 - cos angle) / 2``;
    1/2 at zero separation (no pulsar term), 1/4 at pi.
    """
    x = 0.5 * (1.0 - np.cos(np.asarray(angle, dtype=float)))
    x_log_x = x * np.log(np.where(x > 0.0, x, 1.0))  # x ln x -> 0 as x -> 0
    return 1.5 * x_log_x - 0.25 * x + 0.5


def monopole(angle) -> np.ndarray:
    """Monopole correlation: 1 at every separation."""
    return np.ones_like(np.asarray(angle, dtype=float))


def dipole(angle) -> np.ndarray:
    """Dipole correlation: ``cos angle``."""
    return np.cos(np.asarray(angle, dtype=float))


def uncorrelated(angle) -> np.ndarray:
    """No correlation between distinct pulsars."""
    return np.zeros_like(np.asarray(angle, dtype=float))


#: Correlation patterns by their config name.
PATTERNS = {
    "hellings-downs": hellings_downs,
    "monopole": monopole,
    "dipole": dipole,
    "uncorrelated": uncorrelated,
}


def pattern_function(name: str):
    """The pattern function registered under ``name``."""
    try:
        return PATTERNS[name]
    except KeyError:
        raise ValueError(f"unknown correlation pattern {name!r}; choose from {sorted(PATTERNS)}") from None


def correlation_matrix(positions: np.ndarray, pattern: str = "hellings-downs") -> np.ndarray:
    """Correlation matrix ``Gamma_ab`` of pulsars at unit vectors ``positions`` (N, 3).

    Off the diagonal, the pattern at each pair's separation; on it, 1 (for the
    background this is the Earth term 1/2 plus the uncorrelated pulsar term 1/2).
    """
    gamma = pattern_function(pattern)(separation_matrix(positions))
    np.fill_diagonal(gamma, 1.0)
    return gamma

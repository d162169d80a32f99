"""A Gaussian stochastic gravitational-wave background correlated across pulsars.

On the basis ``f_k = k / T`` the coefficients of pulsars a and b obey
``<a_k,a a_k,b> = <b_k,a b_k,b> = Gamma_ab S(f_k) / T`` (PHYSICS.md,
"Stochastic background").  With a bend frequency the power law is divided by
``1 + (f_bend / f)^kappa``: the turnover of :mod:`ptares.inference.spectral_models`.  They are drawn as ``L z`` with ``L L^T = Gamma``
lower triangular and ``z`` independent per pulsar, each pulsar's ``z`` from its
own stream: the first pulsars' background is unchanged when more are appended.
Patterns of low rank (monopole, dipole) have a semi-definite ``Gamma``; the
factorisation below handles zero pivots.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ptares.physics.patterns import correlation_matrix
from ptares.physics.spectra import coefficient_variance
from ptares.rng import stream
from ptares.simulation.signals.base import Context, synthesise_array

__all__ = ["GaussianBackground", "lower_factor", "from_config"]


def lower_factor(matrix: np.ndarray, tolerance: float = 1e-10) -> np.ndarray:
    """Lower-triangular ``L`` with ``L L^T = matrix`` for a positive semi-definite matrix.

    A Cholesky factorisation that sets a column to zero where its pivot falls
    below ``tolerance`` times the diagonal (the matrix is singular there).
    Raises ``ValueError`` if the matrix is not positive semi-definite.
    """
    matrix = np.asarray(matrix, dtype=float)
    n = matrix.shape[0]
    lower = np.zeros_like(matrix)
    for j in range(n):
        pivot = matrix[j, j] - lower[j, :j] @ lower[j, :j]
        if pivot < -tolerance * max(matrix[j, j], 1.0):
            raise ValueError("correlation matrix is not positive semi-definite")
        if pivot <= tolerance * max(matrix[j, j], 1.0):
            continue
        lower[j, j] = np.sqrt(pivot)
        lower[j + 1 :, j] = (matrix[j + 1 :, j] - lower[j + 1 :, :j] @ lower[j, :j]) / lower[j, j]
    return lower


@dataclass(frozen=True)
class GaussianBackground:
    amplitude: float
    spectral_index: float
    harmonics: int
    correlation: str
    name: str = "gwb"
    bend_frequency: float | None = None  #: Hz: a turnover below it (None: a pure power law)
    bend_index: float = 2.0

    def draw(self, context: Context) -> list[np.ndarray]:
        positions = np.array([p.position for p in context.pulsars])
        factor = lower_factor(correlation_matrix(positions, self.correlation))
        z = np.array([stream(context.seed, self.name, p.name).standard_normal((2, self.harmonics)) for p in context.pulsars])
        span = context.observations.span
        sd = np.sqrt(coefficient_variance(span, self.harmonics, self.amplitude, self.spectral_index,
                                          self.bend_frequency, self.bend_index))
        coefficients = np.einsum("ab,bck->cak", factor, z) * sd
        return synthesise_array(context.observations, coefficients[0], coefficients[1])

    def describe(self, context: Context) -> dict:
        return {
            "amplitude": self.amplitude,
            "spectral_index": self.spectral_index,
            "harmonics": self.harmonics,
            "correlation": self.correlation,
            "source": "gaussian",
            **({"bend_frequency": self.bend_frequency, "bend_index": self.bend_index}
               if self.bend_frequency is not None else {}),
        }


def from_config(config, pulsars):
    """The background of ``[gwb]``, if the config has one: Gaussian, or from a binary population."""
    gwb = config.gwb
    if gwb is None:
        return None
    if gwb.source == "binaries":
        from ptares.simulation.signals import population

        return population.from_config(config, pulsars)
    return GaussianBackground(gwb.amplitude, gwb.spectral_index, gwb.harmonics, gwb.correlation,
                              bend_frequency=None if gwb.bend_frequency is None else gwb.bend_frequency * 1e-9,
                              bend_index=gwb.bend_index)

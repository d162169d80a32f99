"""A background built from a finite population of circular binaries (``[gwb] source = "binaries"``).

Binaries fill the band of the Fourier basis, bin k covering
``[(k - 1/2)/T, (k + 1/2)/T]`` around ``f_k = k/T``.  Bin k holds
``N_k = max(1, round(N w_k))`` binaries with ``w_k`` proportional to
``f_k^(-11/3)``, the number per unit frequency of binaries driven by radiation
reaction (Phinney 2001), each at a frequency uniform within the bin, with a
random sky position, ``cos i`` uniform in [-1, 1], polarisation and phase
uniform.  Their amplitudes make the expected residual variance of the bin equal
to the Gaussian background's ``S(f_k)/T``: averaged over orientation, one
binary (Earth and pulsar term) contributes ``h0^2 / (30 pi^2 f^2)`` to a
pulsar's residual variance (``<F+^2> = <Fx^2> = 1/6`` over the sky,
``<((1 + cos^2 i)/2)^2> = 7/15``, ``<cos^2 i> = 1/3``), so
``h0^2 = 30 pi^2 f^2 (S(f_k)/T) X / N_k`` with ``X`` log-normal of
``loudness_spread`` dex and mean 1.  The binaries do not evolve over the
span; their pulsar terms use each pulsar's distance.  A few loud binaries at
high frequency make a realisation non-Gaussian and anisotropic.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ptares.physics.spectra import coefficient_variance
from ptares.rng import stream
from ptares.simulation.signals.base import Context
from ptares.simulation.signals.continuous import (
    Binary,
    ContinuousWaves,
    binary_residuals,
)

__all__ = ["BinaryPopulation", "bin_counts", "draw_population", "from_config"]


def bin_counts(binaries: int, harmonics: int) -> np.ndarray:
    """Binaries per frequency bin: ``max(1, round(N w_k))``, ``w_k`` proportional to ``k^(-11/3)``."""
    weights = np.arange(1, harmonics + 1) ** (-11.0 / 3.0)
    return np.maximum(1, np.rint(binaries * weights / weights.sum())).astype(int)


def draw_population(amplitude, gamma, harmonics, binaries, spread_dex, span, rng) -> list:
    """A list of :class:`Binary` realising the power law on average."""
    power = coefficient_variance(span, harmonics, amplitude, gamma)  # S(f_k)/T per bin
    sigma = spread_dex * np.log(10.0)
    population = []
    for k, count in enumerate(bin_counts(binaries, harmonics), start=1):
        frequency = (k + rng.uniform(-0.5, 0.5, count)) / span
        loudness = np.exp(sigma * rng.standard_normal(count) - 0.5 * sigma**2)
        strain = np.sqrt(30.0 * np.pi**2 * frequency**2 * power[k - 1] * loudness / count)
        ra = rng.uniform(0.0, 2.0 * np.pi, count)
        dec = np.arcsin(rng.uniform(-1.0, 1.0, count))
        inclination = np.arccos(rng.uniform(-1.0, 1.0, count))
        polarization = rng.uniform(0.0, np.pi, count)
        phase = rng.uniform(0.0, 2.0 * np.pi, count)
        for j in range(count):
            population.append(
                Binary(f"bin{k}-{j}", ra[j], dec[j], frequency[j], strain[j], inclination[j], polarization[j], phase[j])
            )
    return population


@dataclass(frozen=True)
class BinaryPopulation:
    amplitude: float
    spectral_index: float
    harmonics: int
    binaries: int
    loudness_spread: float
    name: str = "gwb"

    def population(self, context: Context) -> list:
        rng = stream(context.seed, self.name, "population")
        return draw_population(
            self.amplitude, self.spectral_index, self.harmonics, self.binaries, self.loudness_spread,
            context.observations.span, rng,
        )

    def draw(self, context: Context) -> list[np.ndarray]:
        return binary_residuals(self.population(context), context)

    def describe(self, context: Context) -> dict:
        return {
            "amplitude": self.amplitude,
            "spectral_index": self.spectral_index,
            "harmonics": self.harmonics,
            "correlation": "hellings-downs",
            "source": "binaries",
            "loudness_spread": self.loudness_spread,
            "sources": ContinuousWaves(tuple(self.population(context))).describe(context)["sources"],
        }


def from_config(config, pulsars):
    """Used by the background builder when ``[gwb] source = "binaries"``."""
    gwb = config.gwb
    return BinaryPopulation(gwb.amplitude, gwb.spectral_index, gwb.harmonics, gwb.binaries, gwb.loudness_spread)

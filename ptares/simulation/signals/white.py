"""White measurement noise: independent Gaussian errors at each TOA.

Each TOA's quoted uncertainty ``sigma`` becomes ``sqrt((scale sigma)^2 + quadrature^2)``
(PHYSICS.md, "Intrinsic noise"), with the pulsar's own ``scale`` and ``quadrature``.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ptares.rng import stream
from ptares.simulation.signals.base import Context

__all__ = ["WhiteNoise", "effective_uncertainties", "from_config"]


def effective_uncertainties(toa_errors, scale: float, quadrature: float) -> np.ndarray:
    """White-noise standard deviation (s) of each TOA."""
    return np.sqrt((scale * np.asarray(toa_errors, dtype=float)) ** 2 + quadrature**2)


@dataclass(frozen=True)
class WhiteNoise:
    name: str = "white"

    def draw(self, context: Context) -> list[np.ndarray]:
        out = []
        for pulsar, errors in zip(context.pulsars, context.observations.toa_errors):
            sigma = effective_uncertainties(errors, pulsar.white_scale, pulsar.white_quadrature)
            out.append(stream(context.seed, self.name, pulsar.name).normal(0.0, sigma))
        return out

    def describe(self, context: Context) -> dict:
        return {}


def from_config(config, pulsars):
    """White noise is always present."""
    return WhiteNoise()

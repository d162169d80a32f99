"""White measurement noise: independent Gaussian errors at each TOA, and epoch jitter.

Each TOA's quoted uncertainty ``sigma`` becomes ``sqrt((scale sigma)^2 + quadrature^2)``
(PHYSICS.md, "Intrinsic noise"), with the ``scale`` and ``quadrature`` of the TOA's observing
system (the pulsar's own without systems).  Jitter adds one Gaussian value of standard
deviation ``J`` (its system's) to every TOA of an epoch (PHYSICS.md, "Epoch jitter"; epochs
as :func:`ptares.dataset.epoch_indices` groups them).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ptares.dataset import epoch_indices, system_indices
from ptares.rng import stream
from ptares.simulation.signals.base import Context

__all__ = ["WhiteNoise", "Jitter", "effective_uncertainties", "toa_white", "from_config", "jitter_from_config"]


def effective_uncertainties(toa_errors, scale, quadrature) -> np.ndarray:
    """White-noise standard deviation (s) of each TOA (``scale`` and ``quadrature`` scalars or per TOA)."""
    return np.sqrt((scale * np.asarray(toa_errors, dtype=float)) ** 2 + quadrature**2)


def toa_white(pulsar, system, count: int):
    """Per-TOA (white scale, quadrature s, jitter s) of one pulsar (a
    :class:`~ptares.simulation.array.PulsarSetup`) whose TOAs have the observing ``system`` names (or None)."""
    if system is None or not pulsar.system_white:
        return (np.full(count, pulsar.white_scale), np.full(count, pulsar.white_quadrature),
                np.full(count, pulsar.white_jitter))
    values = np.array([values for _, *values in pulsar.system_white], dtype=float)  # (systems, 3)
    which = system_indices(system, [name for name, *_ in pulsar.system_white])
    return values[which, 0], values[which, 1], values[which, 2]


@dataclass(frozen=True)
class WhiteNoise:
    name: str = "white"

    def draw(self, context: Context) -> list[np.ndarray]:
        out = []
        for a, (pulsar, errors) in enumerate(zip(context.pulsars, context.observations.toa_errors)):
            scale, quadrature, _ = toa_white(pulsar, context.observations.systems_of(a), errors.size)
            out.append(stream(context.seed, self.name, pulsar.name).normal(0.0, effective_uncertainties(errors, scale, quadrature)))
        return out

    def describe(self, context: Context) -> dict:
        return {}


@dataclass(frozen=True)
class Jitter:
    """One Gaussian value per epoch, shared by the epoch's TOAs."""

    name: str = "jitter"

    def draw(self, context: Context) -> list[np.ndarray]:
        out = []
        for a, pulsar in enumerate(context.pulsars):
            mjd, system = context.observations.mjd[a], context.observations.systems_of(a)
            _, _, jitter = toa_white(pulsar, system, mjd.size)
            epochs = epoch_indices(mjd, system)
            values = stream(context.seed, self.name, pulsar.name).standard_normal(int(epochs.max()) + 1 if mjd.size else 0)
            out.append(jitter * values[epochs])
        return out

    def describe(self, context: Context) -> dict:
        return {}


def from_config(config, pulsars):
    """White noise is always present."""
    return WhiteNoise()


def jitter_from_config(config, pulsars):
    """Epoch jitter when any pulsar or observing system has a non-zero jitter."""
    if any(p.white_jitter > 0 or any(j > 0 for *_, j in p.system_white) for p in pulsars):
        return Jitter()
    return None

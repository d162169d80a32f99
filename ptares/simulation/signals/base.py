"""What every signal or noise component sees, and what it must provide.

A component has a ``name`` (the dataset key under ``injected/``), a
``draw(context)`` method returning one residual series (s, before the
timing-model fit) per pulsar, and ``describe(context)`` returning what the
dataset records about it.  Each draws from its own random streams
(:func:`ptares.rng.stream` with the component's name and the pulsar's), so
components and pulsars are independent of one another's draws.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Protocol

import numpy as np

from ptares.physics.spectra import coefficient_variance
from ptares.rng import stream
from ptares.simulation.array import Observations, PulsarSetup
from ptares.simulation.kernels import synthesise

__all__ = ["Context", "Component", "synthesise_array", "power_law_coefficients"]


@dataclass(frozen=True)
class Context:
    """The array as the components see it."""

    pulsars: tuple[PulsarSetup, ...]
    observations: Observations
    seed: int


class Component(Protocol):
    name: str

    def draw(self, context: Context) -> list[np.ndarray]:
        """Residuals (s) of this component for every pulsar, in array order."""
        ...

    def describe(self, context: Context) -> dict:
        """Parameters recorded in the dataset under ``/signals/<name>``.

        Scalars and strings become attributes; arrays (e.g. a table of sources) become datasets.
        """
        ...


def synthesise_array(observations: Observations, sine: np.ndarray, cosine: np.ndarray) -> list[np.ndarray]:
    """Fourier synthesis on the basis ``f_k = k / T`` for every pulsar.

    ``sine`` and ``cosine`` have shape ``(pulsars, K)``; returns per-pulsar residuals.
    """
    times = [observations.times(i) for i in range(len(observations.mjd))]
    owner = np.repeat(np.arange(len(times)), [t.size for t in times])
    flat = synthesise(np.concatenate(times), owner, 1.0 / observations.span, sine, cosine)
    return np.split(flat, np.cumsum([t.size for t in times])[:-1])


def power_law_coefficients(context: Context, name: str, harmonics: int, laws) -> np.ndarray:
    """Sine and cosine coefficients (2, pulsars, harmonics) of every pulsar's own power law on ``f_k = k / T``
    (variance ``S(f_k) / T``; PHYSICS.md): ``laws[a]`` is pulsar a's (amplitude, spectral index), or None for
    none; each pulsar's from its own stream ``(seed, name, pulsar)``."""
    span = context.observations.span
    coefficients = np.zeros((2, len(context.pulsars), harmonics))
    for a, (pulsar, law) in enumerate(zip(context.pulsars, laws)):
        if law is not None and law[0] > 0:
            sd = np.sqrt(coefficient_variance(span, harmonics, *law))
            coefficients[:, a] = sd * stream(context.seed, name, pulsar.name).standard_normal((2, harmonics))
    return coefficients

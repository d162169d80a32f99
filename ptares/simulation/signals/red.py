"""Intrinsic red (spin) noise: a power law per pulsar on the array's Fourier basis.

Sine and cosine coefficients at ``f_k = k / T`` have variance
``S(f_k) / T`` with the pulsar's own amplitude and index (PHYSICS.md,
"Intrinsic noise"; :func:`ptares.physics.spectra.coefficient_variance`).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ptares.simulation.signals.base import Context, power_law_coefficients, synthesise_array

__all__ = ["RedNoise", "from_config"]


@dataclass(frozen=True)
class RedNoise:
    harmonics: int
    name: str = "red"

    def draw(self, context: Context) -> list[np.ndarray]:
        laws = [(p.red_amplitude, p.red_spectral_index) for p in context.pulsars]
        coefficients = power_law_coefficients(context, self.name, self.harmonics, laws)
        return synthesise_array(context.observations, coefficients[0], coefficients[1])

    def describe(self, context: Context) -> dict:
        return {"harmonics": self.harmonics}


def from_config(config, pulsars):
    """Red noise when any pulsar has a non-zero amplitude."""
    if any(p.red_amplitude > 0 for p in pulsars):
        return RedNoise(harmonics=config.noise.red.harmonics)
    return None

"""Chromatic noise: dispersion-measure variations and scattering-like noise of each pulsar.

A power law on the array's Fourier basis, like red noise (coefficient variances
``S(f_k) / T`` with the pulsar's own amplitude and spectral index, stated at the
reference radio frequency), whose residual at a TOA of radio frequency ``nu`` is
scaled by ``(nu_ref / nu)^chi``: ``chi = 2`` for dispersion-measure variations, 4 for
scattering-like noise, ``nu_ref = 1400 MHz`` (PHYSICS.md, "Radio frequency and
chromatic noise").  A TOA without a recorded radio frequency counts as observed at
``nu_ref``.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ptares.inputs.config import CHROMATIC_PROCESSES
from ptares.physics.constants import REFERENCE_FREQUENCY_MHZ
from ptares.physics.spectra import chromatic_scale
from ptares.simulation.signals.base import Context, power_law_coefficients, synthesise_array

__all__ = ["ChromaticNoise", "from_config"]


@dataclass(frozen=True)
class ChromaticNoise:
    name: str  #: "dispersion" or "scattering"
    harmonics: int

    def draw(self, context: Context) -> list[np.ndarray]:
        own = [{process: values for process, *values in p.chromatic}.get(self.name) for p in context.pulsars]
        laws = [None if values is None else values[:2] for values in own]  # (amplitude, spectral index)
        indices = [0.0 if values is None else values[2] for values in own]  # chromatic index
        coefficients = power_law_coefficients(context, self.name, self.harmonics, laws)
        at_reference = synthesise_array(context.observations, coefficients[0], coefficients[1])
        return [series * chromatic_scale(context.observations.radio_frequencies(a), indices[a])
                for a, series in enumerate(at_reference)]

    def describe(self, context: Context) -> dict:
        pulsars = sum(any(process == self.name for process, *_ in p.chromatic) for p in context.pulsars)
        return {"harmonics": self.harmonics, "reference_frequency_mhz": REFERENCE_FREQUENCY_MHZ, "pulsars": pulsars}


def from_config(config, pulsars) -> list:
    """One component per chromatic process that some pulsar has with a non-zero amplitude."""
    present = {process for p in pulsars for process, *_ in p.chromatic}
    return [ChromaticNoise(process, getattr(config.noise, process).harmonics)
            for process in CHROMATIC_PROCESSES if process in present]

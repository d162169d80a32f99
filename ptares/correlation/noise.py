"""The noise model an analysis assumes: white, red and chromatic noise and a common process per pulsar.

An estimator needs each pulsar's auto-covariance.  :class:`NoiseModel` holds the
parameters that build it, one value per pulsar (white-noise scale and
quadrature in seconds, red-noise amplitude and index) plus the common process
(amplitude and index of a background shared by all pulsars, uncorrelated in this
role).  It comes from the dataset's injected truth (:func:`noise_from_dataset`),
from values in a config (:func:`noise_from_values`), or, for a noise-marginalised
analysis, from posterior draws (a list of models).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ptares.dataset import Dataset
from ptares.errors import InputError
from ptares.inputs.config import CHROMATIC_PROCESSES

__all__ = ["NoiseModel", "noise_from_dataset", "noise_from_values", "per_system_white"]


@dataclass(frozen=True)
class NoiseModel:
    """Per-pulsar noise parameters (arrays of length P) and the common process."""

    white_scale: np.ndarray
    white_quadrature: np.ndarray  #: s
    red_amplitude: np.ndarray
    red_spectral_index: np.ndarray
    red_harmonics: int
    common_amplitude: float
    common_spectral_index: float
    common_harmonics: int = 30
    #: chromatic processes, each (name, harmonics, amplitudes (P,), spectral indices (P,), chromatic indices (P,)),
    #: stated at 1400 MHz (PHYSICS.md, "Radio frequency and chromatic noise")
    chromatic: tuple = ()
    #: per pulsar, each TOA's white-noise standard deviation (s) where it is per observing system (then it
    #: replaces the pulsar's scale and quadrature); empty when none is
    toa_white: tuple = ()
    #: per pulsar, each TOA's epoch jitter (s; the jitter of its system), or None; empty when there is none
    toa_jitter: tuple = ()

    def white_sigma(self, index: int, toa_errors: np.ndarray) -> np.ndarray:
        """White-noise standard deviation (s) of each TOA of pulsar ``index``."""
        if self.toa_white and self.toa_white[index] is not None:
            return self.toa_white[index]
        return np.sqrt((self.white_scale[index] * toa_errors) ** 2 + self.white_quadrature[index] ** 2)

    def jitter(self, index: int):
        """Epoch jitter (s) of each TOA of pulsar ``index``, or None without any."""
        return self.toa_jitter[index] if self.toa_jitter else None


def per_system_white(pulsar, scales, quadratures, jitters) -> tuple:
    """``(sigma, jitter)`` of each TOA (s; each None where it is not needed) from the white-noise ``scales``,
    ``quadratures`` and ``jitters`` (s) of each of the pulsar's observing systems (in the order of
    ``pulsar.systems``; one value each without systems): sigma only where white noise is per system (else
    the pulsar's scale and quadrature serve), jitter only where some is not zero."""
    which = pulsar.system_indices()
    jitter = np.asarray(jitters, dtype=float)[which]
    jitter = jitter if np.any(jitter > 0) else None
    if pulsar.system is None:
        return None, jitter
    scale, quadrature = np.asarray(scales, dtype=float)[which], np.asarray(quadratures, dtype=float)[which]
    return np.sqrt((scale * pulsar.errors) ** 2 + quadrature**2), jitter


def _per_toa(p):
    """A pulsar's injected white noise per TOA where it is per observing system, and its jitter per TOA:
    ``(sigma or None, jitter or None)``, s (the system's own values, else the pulsar's)."""
    def injected(key, default):
        return [float(p.noise.get(f"{key}:{s}", p.noise.get(key, default))) for s in p.systems or [None]]

    return per_system_white(p, injected("white_scale", 1.0), injected("white_quadrature", 0.0),
                            injected("white_jitter", 0.0))


def noise_from_dataset(dataset: Dataset) -> NoiseModel:
    """The injected noise of a simulated dataset, with the injected background as the common process."""
    try:
        noise = [p.noise for p in dataset.pulsars]
        white_scale = np.array([n["white_scale"] for n in noise], dtype=float)
        white_quadrature = np.array([n["white_quadrature"] for n in noise], dtype=float)
        red_amplitude = np.array([n["red_amplitude"] for n in noise], dtype=float)
        red_spectral_index = np.array([n["red_spectral_index"] for n in noise], dtype=float)
    except KeyError as exc:
        raise InputError(f"has no injected noise parameter {exc} (not simulated by ptares?)", "dataset") from None
    red = dataset.signals.get("red", {})
    gwb = dataset.signals.get("gwb", {})
    chromatic = []
    for process in CHROMATIC_PROCESSES:
        amplitudes = np.array([float(n.get(f"{process}_amplitude", 0.0)) for n in noise])
        if np.any(amplitudes > 0):
            chromatic.append((process, int(dataset.signals.get(process, {}).get("harmonics", 30)), amplitudes,
                              np.array([float(n.get(f"{process}_spectral_index", 13.0 / 3.0)) for n in noise]),
                              np.array([float(n.get(f"{process}_chromatic_index", 2.0)) for n in noise])))
    per_toa = [_per_toa(p) for p in dataset.pulsars]
    return NoiseModel(
        toa_white=tuple(w for w, _ in per_toa) if any(w is not None for w, _ in per_toa) else (),
        toa_jitter=tuple(j for _, j in per_toa) if any(j is not None for _, j in per_toa) else (),
        white_scale=white_scale,
        white_quadrature=white_quadrature,
        red_amplitude=red_amplitude,
        red_spectral_index=red_spectral_index,
        red_harmonics=int(red.get("harmonics", 30)),
        common_amplitude=float(gwb.get("amplitude", 0.0)),
        common_spectral_index=float(gwb.get("spectral_index", 13.0 / 3.0)),
        common_harmonics=int(gwb.get("harmonics", 30)),
        chromatic=tuple(chromatic),
    )


def noise_from_values(
    dataset: Dataset,
    white_scale=1.0,
    white_quadrature=0.0,
    red_amplitude=0.0,
    red_spectral_index=13.0 / 3.0,
    red_harmonics=30,
    common_amplitude=0.0,
    common_spectral_index=13.0 / 3.0,
    common_harmonics=30,
    pulsars: dict | None = None,
) -> NoiseModel:
    """Noise given as values: defaults for every pulsar, ``pulsars`` maps names to per-pulsar overrides.

    ``white_quadrature`` in seconds.
    """
    count = len(dataset.pulsars)
    columns = {
        "white_scale": np.full(count, float(white_scale)),
        "white_quadrature": np.full(count, float(white_quadrature)),
        "red_amplitude": np.full(count, float(red_amplitude)),
        "red_spectral_index": np.full(count, float(red_spectral_index)),
    }
    names = dataset.names
    for name, overrides in (pulsars or {}).items():
        if name not in names:
            raise InputError(f"pulsar {name!r} is not in the dataset", "correlate.noise_values.pulsars")
        for key, value in overrides.items():
            if key not in columns:
                raise InputError(f"unknown noise parameter {key!r}", f"correlate.noise_values.pulsars.{name}")
            columns[key][names.index(name)] = float(value)
    return NoiseModel(
        red_harmonics=int(red_harmonics),
        common_amplitude=float(common_amplitude),
        common_spectral_index=float(common_spectral_index),
        common_harmonics=int(common_harmonics),
        **columns,
    )

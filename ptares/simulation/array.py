"""The pulsar array: each pulsar's position, distance, schedule and noise settings.

:func:`build_array` resolves a validated config into one :class:`PulsarSetup`
per pulsar, drawing every random quantity (isotropic positions, ranged noise
parameters) from streams named after the pulsar, and :func:`observe` turns the
setups into TOAs and their uncertainties.  Units here: angles in radians,
distances in kpc, times in MJD or days, uncertainties in seconds.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ptares.inputs.config import CHROMATIC_PROCESSES, Config, Draw
from ptares.physics.constants import REFERENCE_FREQUENCY_MHZ, YEAR
from ptares.physics.sky import unit_vector
from ptares.rng import stream
from ptares.simulation.schedule import (
    array_window,
    observation_epochs,
    toa_uncertainties,
)

__all__ = ["PulsarSetup", "Observations", "build_array", "observe"]

_US = 1e-6


@dataclass(frozen=True)
class PulsarSetup:
    """Everything ptares needs to simulate one pulsar (SI except where named)."""

    name: str
    ra: float  #: radians
    dec: float  #: radians
    distance: float  #: kpc
    distance_error: float  #: kpc
    start: float  #: MJD of the first possible epoch
    span_days: float
    cadence: float  #: days
    cadence_jitter: float  #: days
    gaps: tuple
    toa_error: float  #: s
    toa_error_scatter: float  #: dex
    white_scale: float
    white_quadrature: float  #: s
    red_amplitude: float
    red_spectral_index: float
    true_distance: float  #: kpc, the distance pulsar terms use (drawn when the config varies distances)
    #: (process, amplitude, spectral index, chromatic index) of each chromatic process with a non-zero amplitude
    chromatic: tuple = ()
    white_jitter: float = 0.0  #: s, shared by the TOAs of one epoch (without ``subbands``)
    #: per observing system, (system, white scale, white quadrature s, jitter s), in system-name order
    system_white: tuple = ()
    radio_frequency: float = REFERENCE_FREQUENCY_MHZ  #: MHz, of every TOA when there are no ``subbands``
    #: (system, radio frequency MHz, TOA error s) of each TOA of an epoch, in TOA order; empty: one TOA per epoch
    subbands: tuple = ()

    @property
    def position(self) -> np.ndarray:
        """Unit vector towards the pulsar."""
        return unit_vector(self.ra, self.dec)


@dataclass(frozen=True)
class Observations:
    """The array's TOAs: per-pulsar MJDs and uncertainties, and the common window."""

    mjd: tuple  #: per pulsar, (n_a,) MJD
    toa_errors: tuple  #: per pulsar, (n_a,) s
    start: float  #: MJD where the array's window opens (origin of the Fourier basis)
    span: float  #: s, union of the pulsars' windows (T of the basis f_k = k / T)
    frequency_mhz: tuple = ()  #: per pulsar, (n_a,) MHz or None (not recorded); empty: none recorded
    system: tuple = ()  #: per pulsar, (n_a,) observing-system names or None; empty: none recorded

    def systems_of(self, index: int):
        """Observing-system name of each TOA of pulsar ``index``, or None where none are recorded."""
        return self.system[index] if self.system else None

    def radio_frequencies(self, index: int) -> np.ndarray:
        """Radio frequency (MHz) of each TOA of pulsar ``index``; the reference frequency where none is recorded."""
        recorded = self.frequency_mhz[index] if self.frequency_mhz else None
        return np.full(self.mjd[index].size, REFERENCE_FREQUENCY_MHZ) if recorded is None else recorded

    def times(self, index: int) -> np.ndarray:
        """Seconds from the array's start for pulsar ``index``."""
        return (self.mjd[index] - self.start) * 86400.0


def _resolve(value, seed: int, name: str, field: str, scale: float = 1.0) -> float:
    """A fixed value, or a draw from the stream ``(seed, 'parameter', name, field)``."""
    if isinstance(value, Draw):
        value = value.sample(stream(seed, "parameter", name, field))
    return float(value) * scale


def _true_distance(distance: float, error: float, vary: bool, seed: int, name: str) -> float:
    """The catalogued distance, or a positive draw from N(distance, error) on the pulsar's own stream."""
    if not vary or error == 0:
        return distance
    rng = stream(seed, "distance", name)
    for _ in range(1000):
        value = rng.normal(distance, error)
        if value > 0:
            return float(value)
    return distance  # error >> distance: keep the catalogue value rather than loop forever


def _first(*values):
    return next(v for v in values if v is not None)


def build_array(config: Config, seed: int, tables=None) -> list[PulsarSetup]:
    """One resolved :class:`PulsarSetup` per pulsar of ``config``, in config order (catalogue order for tables)."""
    noise = config.noise
    if tables is not None:
        from ptares.inputs.config import RedOverride, WhiteOverride

        entries = [  # catalogue noise columns override [noise] for their pulsar
            dict(name=p.name, ra=p.ra, dec=p.dec, distance=p.distance, distance_error=p.distance_error,
                 observing=config.observing,
                 white=WhiteOverride(scale=p.noise.get("white_scale"),
                                     quadrature=p.noise["white_quadrature"] * 1e6 if "white_quadrature" in p.noise else None),
                 red=RedOverride(amplitude=p.noise.get("red_amplitude"), spectral_index=p.noise.get("red_spectral_index")))
            for p in tables.pulsars
        ]
    elif config.array.random is not None:
        spec = config.array.random
        entries = []
        for i in range(spec.count):
            name = f"{spec.prefix}{i + 1:03d}"
            u, v = stream(seed, "position", name).uniform(size=2)
            entries.append(
                dict(
                    name=name,
                    ra=2.0 * np.pi * u,
                    dec=float(np.arcsin(2.0 * v - 1.0)),  # uniform in sin(dec): isotropic
                    distance=_resolve(spec.distance, seed, name, "distance"),
                    distance_error=_resolve(spec.distance_error, seed, name, "distance_error"),
                    observing=config.observing,
                    white=None,
                    red=None,
                )
            )
    else:
        entries = [
            dict(
                name=p.name,
                ra=np.radians(p.ra),
                dec=np.radians(p.dec),
                distance=p.distance,
                distance_error=p.distance_error,
                observing=config.observing_for(p),
                white=p.white,
                red=p.red,
                dispersion=p.dispersion,
                scattering=p.scattering,
            )
            for p in config.array.pulsars
        ]

    setups = []
    for entry in entries:
        name, obs = entry["name"], entry["observing"]
        white, red = entry["white"], entry["red"]
        setups.append(
            PulsarSetup(
                name=name,
                ra=float(entry["ra"]),
                dec=float(entry["dec"]),
                distance=float(entry["distance"]),
                distance_error=float(entry["distance_error"]),
                start=obs.start,
                span_days=obs.span * YEAR / 86400.0,
                cadence=obs.cadence,
                cadence_jitter=obs.cadence_jitter,
                gaps=tuple(obs.gaps),
                toa_error=_resolve(obs.toa_error, seed, name, "toa_error", _US),
                toa_error_scatter=obs.toa_error_scatter,
                white_scale=_resolve(_first(white and white.scale, noise.white.scale), seed, name, "white_scale"),
                white_quadrature=_resolve(
                    _first(white and white.quadrature, noise.white.quadrature), seed, name, "white_quadrature", _US
                ),
                white_jitter=_resolve(_first(white and white.jitter, noise.white.jitter), seed, name, "white_jitter", _US),
                system_white=_system_white(obs, white, noise, seed, name),
                red_amplitude=_resolve(_first(red and red.amplitude, noise.red.amplitude), seed, name, "red_amplitude"),
                red_spectral_index=_resolve(_first(red and red.spectral_index, noise.red.spectral_index), seed, name, "red_spectral_index"),
                true_distance=_true_distance(
                    float(entry["distance"]), float(entry["distance_error"]), config.array.vary_distances, seed, name
                ),
                chromatic=_chromatic(noise, entry, seed, name),
                radio_frequency=obs.radio_frequency,
                subbands=_subbands(obs, seed, name),
            )
        )
    return setups


def _chromatic(noise, entry: dict, seed: int, name: str) -> tuple:
    """(process, amplitude, spectral index, chromatic index) of each of the pulsar's chromatic processes with a
    non-zero amplitude; the pulsar's own values override ``[noise.<process>]``."""
    processes = []
    for process in CHROMATIC_PROCESSES:
        default, own = getattr(noise, process), entry.get(process)
        values = [_resolve(_first(own and getattr(own, key), getattr(default, key)), seed, name, f"{process}_{key}")
                  for key in ("amplitude", "spectral_index", "chromatic_index")]
        if values[0] > 0:
            processes.append((process, *values))
    return tuple(processes)


def _system_white(obs, white, noise, seed: int, name: str) -> tuple:
    """(system, white scale, quadrature s, jitter s) of each observing system of one pulsar: the system's own
    values where it sets them (each pulsar its own draw), else the pulsar's, else ``[noise.white]``."""
    values = []
    for system in sorted(obs.systems, key=lambda s: s.name):
        own = system.white
        scale = _first(own.scale, white and white.scale, noise.white.scale)
        quadrature = _first(own.quadrature, white and white.quadrature, noise.white.quadrature)
        jitter = _first(own.jitter, white and white.jitter, noise.white.jitter)
        values.append((system.name,
                       _resolve(scale, seed, name, f"white_scale {system.name}"),
                       _resolve(quadrature, seed, name, f"white_quadrature {system.name}", _US),
                       _resolve(jitter, seed, name, f"white_jitter {system.name}", _US)))
    return tuple(values)


def _subbands(obs, seed: int, name: str) -> tuple:
    """(system, radio frequency MHz, TOA error s) of each TOA of one epoch, ordered by system name and frequency
    (the order tables are read in); each system's TOA error drawn from its own stream when drawable."""
    subbands = []
    for system in obs.systems:
        error = _resolve(_first(system.toa_error, obs.toa_error), seed, name, f"toa_error {system.name}", _US)
        subbands += [(system.name, float(f), error) for f in system.frequencies]
    return tuple(sorted(subbands, key=lambda band: (band[0], band[1])))


def observe(setups: list[PulsarSetup], seed: int, tables=None, window=None) -> Observations:
    """Draw every pulsar's epochs and TOA uncertainties from its own streams (or take them from ``tables``)."""
    if tables is not None:
        mjd = tuple(tables.mjd[p.name] for p in setups)
        first = min(m[0] for m in mjd) if window is None else window[0]
        last = max(m[-1] for m in mjd) if window is None else window[1]
        return Observations(mjd=mjd, toa_errors=tuple(tables.errors[p.name] for p in setups), start=float(first),
                            span=(float(last) - float(first)) * 86400.0,
                            frequency_mhz=tuple(tables.frequency_mhz.get(p.name) for p in setups),
                            system=tuple(tables.system.get(p.name) for p in setups))
    mjd, errors, frequencies, systems = [], [], [], []
    for p in setups:
        epochs = observation_epochs(
            p.start, p.span_days, p.cadence, p.cadence_jitter, p.gaps, stream(seed, "schedule", p.name)
        )
        if not p.subbands:  # one TOA per epoch
            mjd.append(epochs)
            errors.append(toa_uncertainties(epochs.size, p.toa_error, p.toa_error_scatter,
                                            stream(seed, "toa_errors", p.name)))
            frequencies.append(np.full(epochs.size, p.radio_frequency))
            systems.append(None)
            continue
        bands = len(p.subbands)
        names, radio, nominal = zip(*p.subbands)
        mjd.append(np.repeat(epochs, bands))
        scatter = toa_uncertainties(epochs.size * bands, 1.0, p.toa_error_scatter, stream(seed, "toa_errors", p.name))
        errors.append(scatter * np.tile(nominal, epochs.size))
        frequencies.append(np.tile(np.array(radio, dtype=float), epochs.size))
        systems.append(np.tile(np.array(names, dtype=str), epochs.size))
    start, span_days = array_window([p.start for p in setups], [p.start + p.span_days for p in setups])
    return Observations(mjd=tuple(mjd), toa_errors=tuple(errors), start=start, span=span_days * 86400.0,
                        frequency_mhz=tuple(frequencies), system=tuple(systems))

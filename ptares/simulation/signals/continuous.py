"""Continuous waves from circular supermassive black-hole binaries (``[[binary]]``).

Residuals follow from the redshift (PHYSICS.md; Detweiler 1979; Ellis, Siemens &
Creighton 2012)
``z(t) = F+ [h+(t) - h+(t_p)] + Fx [hx(t) - hx(t_p)]``,
with ``h+ = h0 (1 + cos^2 i)/2 cos 2Phi``, ``hx = h0 cos i sin 2Phi`` and the
pulsar term at ``t_p = t - L (1 - s.p) / c``.  Our sign convention: the residual
is ``r(t) = integral_0^t z dt'``.  Integrating over a wave whose frequency
changes slowly (``df/dt << f^2``) gives, up to a constant that the timing
model's offset absorbs,
``r+(t) = a(t) (1 + cos^2 i)/2 sin 2Phi(t)``, ``rx(t) = -a(t) cos i cos 2Phi(t)``,
``a = h0 / (2 pi f)``, evaluated at the Earth and at the pulsar (where the
binary is seen earlier, at a lower frequency).  Phase and frequency follow
Peters (1964); see :mod:`ptares.physics.binaries`.  Time ``t`` runs from the array's
first epoch, where the configured frequency and phase hold.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ptares.physics.binaries import strain_amplitude, time_to_coalescence
from ptares.physics.constants import KPC, M_SUN
from ptares.physics.sky import pulsar_term_delays, wave_patterns
from ptares.simulation.kernels import wave_residuals
from ptares.simulation.signals.base import Context

__all__ = ["Binary", "ContinuousWaves", "PulsarLayout", "prepare_terms", "binary_residuals", "from_config"]

_MPC = 1e3 * KPC


@dataclass(frozen=True)
class Binary:
    """One circular binary, SI units and radians; frequency and phase hold at t = 0."""

    name: str
    ra: float
    dec: float
    frequency: float  #: GW frequency, Hz
    strain: float  #: h0 at t = 0
    inclination: float
    polarization: float
    phase: float  #: orbital phase at t = 0
    chirp_mass: float = 0.0  #: kg; 0 when unknown (then the binary cannot evolve)
    frequency_evolution: bool = False
    pulsar_term: bool = True


def _as_arrays(binaries):
    fields = ("ra", "dec", "frequency", "strain", "inclination", "polarization", "phase", "chirp_mass")
    return {f: np.array([getattr(b, f) for b in binaries], dtype=float) for f in fields}


def prepare_terms(binaries, positions, distances):
    """Kernel inputs for ``binaries`` seen by pulsars at unit vectors ``positions`` and ``distances`` (kpc).

    Returns ``(earth, pulsar, fplus, fcross, weights)`` as documented in
    :func:`ptares.simulation.kernels.wave_residuals`.
    """
    b = _as_arrays(binaries)
    evolving = np.array([x.frequency_evolution for x in binaries], dtype=bool)
    with_pulsar = np.array([x.pulsar_term for x in binaries], dtype=bool)
    omega = np.pi * b["frequency"]  # orbital angular frequency
    rate = np.zeros(len(binaries))
    if evolving.any():
        rate[evolving] = 1.0 / time_to_coalescence(b["chirp_mass"][evolving], b["frequency"][evolving])
    amplitude = b["strain"] / (2.0 * np.pi * b["frequency"])
    earth = np.column_stack([np.mod(2.0 * b["phase"], 2.0 * np.pi), 2.0 * omega, rate, amplitude])

    fplus, fcross = wave_patterns(positions, b["ra"], b["dec"], b["polarization"])  # (S, P), zero behind a source

    delay = pulsar_term_delays(positions, np.asarray(distances, dtype=float) * KPC, b["ra"], b["dec"])  # (S, P) s
    u = 1.0 + rate[:, None] * delay
    # theta(-delay) = theta0 + (16 omega0 / 5 rate) (1 - u^(5/8)), written stably; the limit rate -> 0 is -2 omega0 delay
    with np.errstate(invalid="ignore", divide="ignore"):
        step = np.where(
            rate[:, None] > 0,
            -16.0 * omega[:, None] / (5.0 * rate[:, None]) * np.expm1(0.625 * np.log1p(rate[:, None] * delay)),
            -2.0 * omega[:, None] * delay,
        )
    pulsar = np.empty(fplus.shape + (4,))
    pulsar[..., 0] = np.mod(earth[:, 0:1] + step, 2.0 * np.pi)
    pulsar[..., 1] = earth[:, 1:2] * u ** (-3.0 / 8.0)
    pulsar[..., 2] = rate[:, None] / u
    pulsar[..., 3] = np.where(with_pulsar[:, None], amplitude[:, None] * u ** 0.125, 0.0)
    cos_i = np.cos(b["inclination"])
    weights = np.column_stack([0.5 * (1.0 + cos_i**2), -cos_i])
    return earth, pulsar, fplus, fcross, weights


@dataclass(frozen=True)
class PulsarLayout:
    """Where and when pulsars are observed, in the form the continuous-wave kernel takes."""

    positions: np.ndarray  #: (P, 3) unit vectors
    distances: np.ndarray  #: (P,) kpc, the ones pulsar terms use
    times: np.ndarray  #: all TOAs concatenated, s from the basis origin
    bounds: np.ndarray  #: (P + 1,) pulsar a owns times[bounds[a]:bounds[a + 1]]

    @classmethod
    def of(cls, positions, distances, times) -> "PulsarLayout":
        bounds = np.concatenate([[0], np.cumsum([t.size for t in times])])
        return cls(np.asarray(positions, dtype=float), np.asarray(distances, dtype=float), np.concatenate(times), bounds)

    def residuals(self, binaries) -> list[np.ndarray]:
        """Summed residuals of ``binaries`` in every pulsar."""
        terms = prepare_terms(binaries, self.positions, self.distances)
        return np.split(wave_residuals(self.times, self.bounds, *terms), self.bounds[1:-1])


def binary_residuals(binaries, context: Context) -> list[np.ndarray]:
    """Summed residuals of ``binaries`` in every pulsar of ``context``."""
    observations = context.observations
    layout = PulsarLayout.of(
        [p.position for p in context.pulsars],
        [p.true_distance for p in context.pulsars],
        [observations.times(i) for i in range(len(context.pulsars))],
    )
    return layout.residuals(binaries)


@dataclass(frozen=True)
class ContinuousWaves:
    binaries: tuple
    name: str = "binary"

    def draw(self, context: Context) -> list[np.ndarray]:
        return binary_residuals(self.binaries, context)

    def describe(self, context: Context) -> dict:
        table = np.array(
            [
                (b.name, b.ra, b.dec, b.frequency, b.strain, b.inclination, b.polarization, b.phase, b.chirp_mass, b.frequency_evolution, b.pulsar_term)
                for b in self.binaries
            ],
            dtype=[
                ("name", "S64"), ("ra", "f8"), ("dec", "f8"), ("frequency", "f8"), ("strain", "f8"),
                ("inclination", "f8"), ("polarization", "f8"), ("phase", "f8"), ("chirp_mass", "f8"),
                ("frequency_evolution", "?"), ("pulsar_term", "?"),
            ],
        )
        return {"count": len(self.binaries), "sources": table}


def from_config(config, pulsars):
    """The ``[[binary]]`` sources of the config, if any."""
    if not config.binary:
        return None
    binaries = []
    for i, source in enumerate(config.binary):
        f = source.wave_frequency_hz
        mass = source.chirp_mass * M_SUN if source.chirp_mass is not None else 0.0
        h0 = source.strain if source.strain is not None else float(strain_amplitude(mass, f, source.distance * _MPC))
        binaries.append(
            Binary(
                name=config.source_name(i),
                ra=float(np.radians(source.ra)),
                dec=float(np.radians(source.dec)),
                frequency=f,
                strain=h0,
                inclination=source.inclination,
                polarization=source.polarization,
                phase=source.phase,
                chirp_mass=mass,
                frequency_evolution=source.frequency_evolution,
                pulsar_term=source.pulsar_term,
            )
        )
    return ContinuousWaves(tuple(binaries))

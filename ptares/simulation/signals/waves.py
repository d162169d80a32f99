"""Plane waves of any profile (``[[wave]]``): sine-Gaussian bursts, memory steps and tabulated waveforms.

Residuals follow :func:`ptares.physics.waveforms.plane_wave_residuals`: the redshift of the wave's
``h+``, ``hx`` at the Earth and, when asked, at the pulsar at the retarded time, integrated from
the array's first epoch.  Bursts and memory steps use their closed-form antiderivatives; a
table is interpolated by cubic splines, and the dataset records the estimated largest error
that interpolation leaves in any residual (``interpolation_error``, s; a warning when it is
above a hundredth of the wave's residual scatter).
"""

from __future__ import annotations

import warnings
from dataclasses import dataclass, field
from typing import Optional

import numpy as np

from ptares.errors import InputError, PhysicsWarning
from ptares.inputs.tables import WaveTable, read_wave_table
from ptares.physics.constants import DAY, KPC
from ptares.physics.waveforms import (
    MemoryStep,
    OutsideTable,
    SineGaussian,
    TabulatedProfile,
    plane_wave_residuals,
)
from ptares.physics.sky import pulsar_term_delays
from ptares.simulation.signals.base import Context

__all__ = ["Wave", "PlaneWaves", "from_config", "wave_residuals"]

#: Interpolation error, as a share of the wave's residual scatter, above which a table draws a warning.
COARSE_TABLE = 0.01
#: Largest strain a table may reach after its ``strain_scale`` (as the config's amplitudes: residuals beyond a
#: second are surely a typo).
MAX_STRAIN = 1e-9
#: A burst this many envelope widths away from the TOAs leaves nothing in them (e^-32 of its peak).
FAR_WIDTHS = 8.0


@dataclass(frozen=True)
class Wave:
    """One ``[[wave]]`` in SI units and radians; ``epoch`` stays an MJD (NaN where a table gives MJDs)."""

    name: str
    shape: str
    ra: float
    dec: float
    polarization: float
    pulsar_term: bool
    where: str  #: the config path of this wave, for messages (``wave[0] (flare)``)
    epoch: float = float("nan")
    amplitude: float = float("nan")
    width: float = float("nan")  #: s
    frequency: float = float("nan")  #: Hz
    phase: float = 0.0
    cross_fraction: float = 0.0
    rise_time: float = 0.0  #: s
    file: str = ""
    hold: bool = False
    strain_scale: float = 1.0
    table: Optional[WaveTable] = field(default=None, compare=False, repr=False)

    def profile(self, start: float):
        """The profile with times in seconds from ``start`` (MJD, the array's first epoch)."""
        origin = (self.epoch - start) * DAY
        if self.shape == "sine_gaussian":
            return SineGaussian(self.amplitude, origin, self.width, self.frequency, self.phase, self.cross_fraction)
        if self.shape == "memory":
            return MemoryStep(self.amplitude, origin, self.rise_time)
        times = origin + self.table.times if self.table.relative else (self.table.times - start) * DAY
        return TabulatedProfile(times, self.strain_scale * self.table.plus, self.strain_scale * self.table.cross,
                                hold=self.hold)


def wave_residuals(wave: Wave, context: Context, profile=None) -> list:
    """Residuals (s) of ``wave`` in every pulsar of ``context`` (``profile``: in place of the wave's own)."""
    observations = context.observations
    profile = wave.profile(observations.start) if profile is None else profile
    positions = np.array([p.position for p in context.pulsars])
    distances = np.array([p.true_distance for p in context.pulsars]) * KPC
    times = [observations.times(i) for i in range(len(context.pulsars))]
    try:
        return plane_wave_residuals(profile, times, positions, distances, wave.ra, wave.dec, wave.polarization,
                                    wave.pulsar_term)
    except OutsideTable:
        raise InputError(_coverage_fault(wave, profile, times, positions, distances, observations.start),
                         f"{wave.where}.file") from None


def _coverage_fault(wave, profile, times, positions, distances, start) -> str:
    """What a table too short for the array says: the MJDs it covers and those the residuals need."""
    first, last = (start + t / DAY for t in profile.extent)
    earliest = min(t.min() for t in times if t.size)
    latest = max(t.max() for t in times if t.size)
    words = (f"{wave.file} covers MJD {first:.6g} to {last:.6g}, but the TOAs need MJD {start + min(earliest, 0.0) / DAY:.6g} "
             f"to {start + latest / DAY:.6g}")
    if wave.pulsar_term:
        delays = pulsar_term_delays(positions, distances, wave.ra, wave.dec)
        back = start + (min(earliest, 0.0) - delays.max()) / DAY
        words += f", and the pulsar terms MJD {back:.6g} onwards (or set pulsar_term = false)"
    return words + '; give a longer table, or beyond_table = "hold" for a wave that is settled at both ends'


def _warn_if_outside(wave: Wave, context: Context) -> None:
    """A warning when a burst or memory step leaves no Earth-term residual in the TOAs: a step after the last TOA,
    a burst more than :data:`FAR_WIDTHS` widths before the first or after the last."""
    if wave.shape == "table":
        return
    observations = context.observations
    last = max((observations.mjd[i].max() for i in range(len(context.pulsars)) if observations.mjd[i].size),
               default=observations.start)
    reach = FAR_WIDTHS * wave.width / DAY if wave.shape == "sine_gaussian" else 0.0
    after = wave.epoch - reach > last
    before = wave.shape == "sine_gaussian" and wave.epoch + reach < observations.start
    if after or before:
        where = "after the last TOA" if after else "before the first epoch"
        warnings.warn(f"{wave.where}.epoch: the {wave.shape.replace('_', '-')} at MJD {wave.epoch:.6g} lies {where} "
                      f"(MJD {observations.start:.6g} to {last:.6g}); its Earth term leaves nothing in the residuals",
                      PhysicsWarning, stacklevel=3)


@dataclass(frozen=True)
class PlaneWaves:
    waves: tuple
    name: str = "wave"

    def draw(self, context: Context) -> list[np.ndarray]:
        total = [np.zeros(context.observations.times(i).size) for i in range(len(context.pulsars))]
        for wave in self.waves:
            _warn_if_outside(wave, context)
            for a, r in enumerate(wave_residuals(wave, context)):
                total[a] += r
        return total

    def interpolation_error(self, wave: Wave, context: Context) -> float:
        """Estimated largest interpolation error (s) of a table's residuals (NaN for a closed form), with a
        warning when it is above :data:`COARSE_TABLE` of the residual scatter."""
        if wave.shape != "table":
            return float("nan")
        profile = wave.profile(context.observations.start)
        fine = wave_residuals(wave, context, profile)
        error = profile.error_estimate(lambda p: wave_residuals(wave, context, p), fine)
        scatter = max((float(np.std(r)) for r in fine if r.size), default=0.0)
        if scatter > 0 and error > COARSE_TABLE * scatter:
            warnings.warn(f"{wave.where}.file: interpolating the table leaves errors up to {error:.2g} s, "
                          f"{error / scatter:.0%} of the wave's residual scatter; sample the profile more finely",
                          PhysicsWarning, stacklevel=2)
        return error

    def describe(self, context: Context) -> dict:
        rows = [(w.name, w.shape, w.ra, w.dec, w.polarization, w.epoch, w.amplitude, w.width, w.frequency, w.phase,
                 w.cross_fraction, w.rise_time, w.pulsar_term, w.file, w.strain_scale, self.interpolation_error(w, context))
                for w in self.waves]
        table = np.array(rows, dtype=[
            ("name", "S64"), ("shape", "S16"), ("ra", "f8"), ("dec", "f8"), ("polarization", "f8"), ("epoch", "f8"),
            ("amplitude", "f8"), ("width", "f8"), ("frequency", "f8"), ("phase", "f8"), ("cross_fraction", "f8"),
            ("rise_time", "f8"), ("pulsar_term", "?"), ("file", "S256"), ("strain_scale", "f8"),
            ("interpolation_error", "f8"),
        ])
        return {"count": len(self.waves), "sources": table}


def from_config(config, pulsars):
    """The ``[[wave]]`` entries of the config, if any (tables are read here, so their faults come first)."""
    if not config.wave:
        return None
    waves = []
    for i, entry in enumerate(config.wave):
        where = f"wave[{i}] ({config.wave_name(i)})"
        values = dict(name=config.wave_name(i), shape=entry.shape, ra=float(np.radians(entry.ra)),
                      dec=float(np.radians(entry.dec)), polarization=entry.polarization, pulsar_term=entry.pulsar_term,
                      where=where)
        if entry.epoch is not None:
            values["epoch"] = entry.epoch
        if entry.shape == "sine_gaussian":
            values.update(amplitude=entry.amplitude, width=entry.width * DAY, frequency=entry.frequency * 1e-9,
                          phase=entry.phase or 0.0, cross_fraction=entry.cross_fraction or 0.0)
        elif entry.shape == "memory":
            values.update(amplitude=entry.amplitude, rise_time=(entry.rise_time or 0.0) * DAY)
        else:
            path = config.resolve(entry.file)
            table = read_wave_table(path)
            if table.relative and entry.epoch is None:
                raise InputError("the table's times are durations (time_s, time_d or time_yr): give 'epoch', the MJD "
                                 "they count from, or an mjd column", f"{where}.epoch")
            if not table.relative and entry.epoch is not None:
                raise InputError("the table's times are MJDs (column mjd): drop 'epoch', or give durations (time_s, "
                                 "time_d, time_yr) counted from it", f"{where}.epoch")
            peak = (entry.strain_scale or 1.0) * float(np.max(np.abs(np.concatenate([table.plus, table.cross]))))
            if peak > MAX_STRAIN:
                raise InputError(f"scales the table's largest strain to {peak:.3g}, above {MAX_STRAIN:g} (residuals "
                                 "beyond a second): surely a typo", f"{where}.strain_scale")
            values.update(file=str(entry.file), hold=entry.beyond_table == "hold", strain_scale=entry.strain_scale or 1.0,
                          table=table)
        waves.append(Wave(**values))
    return PlaneWaves(tuple(waves))

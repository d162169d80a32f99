"""The TOML run configuration, validated into immutable pydantic models.

Each quantity is a float in the default unit named in its field's docstring
(and in the README); the file may give a plain number in that unit or a string
with any convertible unit (``"15 yr"``, ``"200 ns"``).  Values marked
*drawable* may instead be a table ``{uniform = [low, high]}`` or
``{log_uniform = [low, high]}``: each pulsar then draws its own value from its
own random stream.  Unknown keys are errors.  :func:`load_config` turns every
fault into one :class:`~ptares.errors.InputError` naming the key.
"""

from __future__ import annotations

import copy
import difflib
import math
import re
import sys
import warnings
from collections.abc import Mapping
from pathlib import Path
from typing import Annotated, Any, Literal, Optional, Union, get_args, get_origin

import numpy as np
import tomli_w
from pydantic import (
    AfterValidator,
    BaseModel,
    BeforeValidator,
    ConfigDict,
    Field,
    PrivateAttr,
    Strict,
    ValidationError,
    field_validator,
    model_validator,
)

from ptares.errors import InputError, PhysicsWarning, regular_file
from ptares.physics.constants import REFERENCE_FREQUENCY_MHZ
from ptares.limits import FILE_LIMIT, MAX_TOAS, MAX_TOTAL_TOAS, NAME_PATTERN, NESTING_LIMIT
from ptares.inputs.units import parse_dec, parse_number, parse_ra, to_unit
from ptares.version import renamed

if sys.version_info >= (3, 11):
    import tomllib
else:  # pragma: no cover
    import tomli as tomllib

__all__ = [
    "Config",
    "ContinuousWave",
    "Draw",
    "PlaneWave",
    "load_config",
    "parse_config",
    "TIMING_TERMS",
    "CORRELATIONS",
]

TIMING_TERMS = ("offset", "spin_frequency", "spin_down", "yearly")
CORRELATIONS = ("hellings-downs", "monopole", "dipole", "uncorrelated")


class Draw(BaseModel):
    """A per-pulsar random value: uniform or log-uniform between ``low`` and ``high``."""

    model_config = ConfigDict(extra="forbid", frozen=True)
    kind: Literal["uniform", "log_uniform"]
    low: float
    high: float

    def sample(self, rng: np.random.Generator) -> float:
        """One value from ``rng``."""
        if self.kind == "uniform":
            return float(rng.uniform(self.low, self.high))
        return float(math.exp(rng.uniform(math.log(self.low), math.log(self.high))))


def _quantity(unit: str | None):
    """Before-validator reading a number, a unit string or an astropy Quantity into ``unit``."""
    return (lambda v: to_unit(v, unit)) if unit else parse_number


def _bounds_list(bounds: Any):
    """Draw bounds as a list: a tuple, or an astropy Quantity of two values (``[1, 3] * u.us``), becomes one."""
    if isinstance(bounds, tuple):
        return list(bounds)
    if getattr(bounds, "unit", None) is not None and getattr(bounds, "shape", None) == (2,):
        return [bounds[0], bounds[1]]
    return bounds


def _drawable(unit: str | None):
    """Before-validator for a value that is a fixed quantity (number, unit string, astropy Quantity)
    or a :class:`Draw` table whose bounds are such quantities."""
    read = _quantity(unit)

    def parse(value: Any):
        if not isinstance(value, dict):
            return read(value)
        if len(value) != 1 or next(iter(value)) not in ("uniform", "log_uniform"):
            raise ValueError("a drawn value is a table {uniform = [low, high]} or {log_uniform = [low, high]}")
        kind, bounds = next(iter(value.items()))
        bounds = _bounds_list(bounds)
        if not isinstance(bounds, list) or len(bounds) != 2:
            raise ValueError(f"{kind} needs a list of two bounds [low, high]")
        low, high = (read(b) for b in bounds)
        if not low < high:
            raise ValueError(f"{kind} bounds need low < high, got [{low}, {high}]")
        if kind == "log_uniform" and low <= 0:
            raise ValueError("log_uniform bounds must be positive")
        return Draw(kind=kind, low=low, high=high)

    return parse


def _at_least(bound: float, strict: bool = False):
    """After-validator: a value, or both bounds of a draw, >= (or >) ``bound``."""
    word = "positive" if (strict and bound == 0) else ("non-negative" if bound == 0 else f">= {bound}")

    def check(value):
        low = value.low if isinstance(value, Draw) else value
        if low < bound or (strict and low == bound):
            raise ValueError(f"must be {word}, got {low}")
        return value

    return check


def Quantity(unit: str | None, *extra):
    """Annotated float read in ``unit`` (``None`` for dimensionless)."""
    return Annotated[(float, BeforeValidator(_quantity(unit)), *extra)]


def Drawable(unit: str | None, *extra):
    """Annotated fixed-or-drawn value read in ``unit``."""
    return Annotated[(Union[float, Draw], BeforeValidator(_drawable(unit)), *extra)]


def _at_most(bound: float):
    """After-validator: a value, or both bounds of a draw, <= ``bound``."""

    def check(value):
        high = value.high if isinstance(value, Draw) else value
        if high > bound:
            raise ValueError(f"must be at most {bound:g}, got {high:g}")
        return value

    return check


def _listed_once(what: str):
    """A validator refusing a list in which an entry appears twice."""

    def check(values):
        if len(set(values)) != len(values):
            raise ValueError(f"{what} is listed twice")
        return values

    return AfterValidator(check)


def _safe_name(name: str) -> str:
    """A name usable as an HDF5 group and a file-name part: letters, digits and ``_ + - .``."""
    if not NAME_PATTERN.fullmatch(name):
        raise ValueError(
            f"name {name!r} must be 1-64 characters of letters, digits, '_', '+', '-', '.', "
            "starting with a letter or digit"
        )
    return name


SafeName = Annotated[str, AfterValidator(_safe_name)]
MAX_HARMONICS = 10_000
MJD_RANGE = (15_000.0, 100_000.0)  #: 1899 to 2132
MaxAmplitude = AfterValidator(_at_most(1e-9))  # beyond this residuals exceed a second: surely a typo
SpectralIndex = AfterValidator(lambda v: _at_least(-10.0)(_at_most(10.0)(v)))
StartRange = AfterValidator(lambda v: _at_least(MJD_RANGE[0])(_at_most(MJD_RANGE[1])(v)))
Count = Annotated[int, Strict(), BeforeValidator(lambda v: int(v) if isinstance(v, np.integer) else v)]  #: no floats; numpy ints are fine
Positive = AfterValidator(_at_least(0.0, strict=True))
NonNegative = AfterValidator(_at_least(0.0))
RightAscension = Annotated[float, BeforeValidator(parse_ra)]
Declination = Annotated[float, BeforeValidator(parse_dec)]
Gap = tuple[Quantity("d"), Quantity("d")]


class _Section(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True)


class RunSection(_Section):
    """``[run]``: ``name`` labels outputs; ``seed`` (integer >= 0) makes the run reproducible.

    Without a seed a fresh one is drawn and recorded in the dataset.
    """

    name: str = "ptares-run"
    seed: Optional[Count] = Field(default=None, ge=0, le=2**63 - 1)


class WhiteNoise(_Section):
    """``[noise.white]``: TOA errors become ``(scale * error)^2 + quadrature^2``, and TOAs of one epoch
    (one observing system, one observation) share a further ``jitter`` (PHYSICS.md, "Epoch jitter").

    ``scale`` dimensionless (default 1), ``quadrature`` and ``jitter`` in microseconds (default 0); all
    drawable.  An observing system may set its own (``[observing] systems``).
    """

    scale: Drawable(None, Positive) = 1.0
    quadrature: Drawable("us", NonNegative) = 0.0
    jitter: Drawable("us", NonNegative) = 0.0


class RedNoise(_Section):
    """``[noise.red]``: intrinsic power-law red noise of each pulsar (zero amplitude: none).

    ``amplitude`` (dimensionless, at f = 1/yr) and ``spectral_index`` are drawable;
    ``harmonics`` is the number of Fourier frequencies k/T.
    """

    amplitude: Drawable(None, NonNegative, MaxAmplitude) = 0.0
    spectral_index: Drawable(None, SpectralIndex) = 13.0 / 3.0
    harmonics: Count = Field(default=30, ge=1, le=MAX_HARMONICS)


ChromaticIndex = AfterValidator(lambda v: _at_least(0.0)(_at_most(8.0)(v)))


class DispersionNoise(RedNoise):
    """``[noise.dispersion]``: dispersion-measure variations of each pulsar (zero amplitude: none).

    A power law stated at the reference radio frequency (1400 MHz) like ``[noise.red]``
    (``amplitude``, ``spectral_index``, drawable; ``harmonics``), whose residual at
    radio frequency nu is scaled by ``(1400 MHz / nu)^chromatic_index`` (drawable,
    default 2: the dispersive delay's nu^-2; PHYSICS.md, "Radio frequency").
    """

    chromatic_index: Drawable(None, ChromaticIndex) = 2.0


class ScatteringNoise(DispersionNoise):
    """``[noise.scattering]``: scattering-like chromatic noise, as ``[noise.dispersion]`` with
    ``chromatic_index`` 4 by default."""

    chromatic_index: Drawable(None, ChromaticIndex) = 4.0


#: The chromatic processes of ``[noise]``, by name.
CHROMATIC_PROCESSES = ("dispersion", "scattering")


class NoiseSection(_Section):
    white: WhiteNoise = WhiteNoise()
    red: RedNoise = RedNoise()
    dispersion: DispersionNoise = DispersionNoise()
    scattering: ScatteringNoise = ScatteringNoise()


class WhiteOverride(_Section):
    scale: Optional[Drawable(None, Positive)] = None
    quadrature: Optional[Drawable("us", NonNegative)] = None
    jitter: Optional[Drawable("us", NonNegative)] = None


class RedOverride(_Section):
    amplitude: Optional[Drawable(None, NonNegative, MaxAmplitude)] = None
    spectral_index: Optional[Drawable(None, SpectralIndex)] = None


class ChromaticOverride(RedOverride):
    chromatic_index: Optional[Drawable(None, ChromaticIndex)] = None


#: Most sub-bands of one observing system (TOAs per system and epoch).
MAX_SUBBANDS = 4096


class ObservingSystem(_Section):
    """One entry of ``[observing] systems``: a receiver and backend that observes at every epoch.

    ``name``; ``frequencies`` the radio frequency of each sub-band, MHz (one TOA per
    sub-band and epoch, all at the epoch's MJD); ``toa_error`` microseconds
    (drawable; default the schedule's ``toa_error``); ``white`` this system's white noise
    (``scale``, ``quadrature``, ``jitter``; drawable, each pulsar its own draw; default the
    pulsar's).
    """

    name: SafeName
    frequencies: tuple[Quantity("MHz", Positive), ...]
    toa_error: Optional[Drawable("us", Positive)] = None
    white: WhiteOverride = WhiteOverride()

    @field_validator("frequencies")
    @classmethod
    def _distinct(cls, frequencies):
        if not frequencies:
            raise ValueError("lists no sub-band; give at least one frequency")
        if len(frequencies) > MAX_SUBBANDS:
            raise ValueError(f"{len(frequencies)} sub-bands, more than ptares handles per system ({MAX_SUBBANDS})")
        if len(set(frequencies)) != len(frequencies):
            raise ValueError("a frequency is listed twice (one TOA per sub-band and epoch)")
        return frequencies


def _distinct_systems(systems):
    names = [s.name for s in systems]
    for name in names:
        if names.count(name) > 1:
            raise ValueError(f"system {name!r} is listed twice")
    return systems


Systems = Annotated[tuple[ObservingSystem, ...], AfterValidator(_distinct_systems)]


class Observing(_Section):
    """``[observing]``: the schedule every pulsar follows unless it overrides a key.

    ``start`` MJD; ``span`` years; ``cadence`` and ``cadence_jitter`` (standard
    deviation of each epoch's offset) days; ``toa_error`` microseconds
    (drawable); ``toa_error_scatter`` dex of log-normal scatter of each TOA's
    error about it; ``gaps`` a list of ``[start, end]`` MJD ranges with no TOAs.
    ``radio_frequency`` MHz, of every TOA when no ``systems`` are given; ``systems``
    the observing systems (:class:`ObservingSystem`), each observing every epoch in its
    sub-bands.
    """

    start: Quantity("d", StartRange) = 53005.0
    span: Quantity("yr", Positive) = 10.0
    cadence: Quantity("d", Positive) = 14.0
    cadence_jitter: Quantity("d", NonNegative) = 0.0
    toa_error: Drawable("us", Positive) = 1.0
    toa_error_scatter: Quantity("dex", NonNegative, AfterValidator(_at_most(2.0))) = 0.0
    gaps: tuple[Gap, ...] = ()
    radio_frequency: Quantity("MHz", Positive) = REFERENCE_FREQUENCY_MHZ
    systems: Systems = ()

    @property
    def toas_per_epoch(self) -> int:
        """TOAs of one epoch: one per sub-band of every system (one without systems)."""
        return sum(len(s.frequencies) for s in self.systems) or 1

    @field_validator("gaps")
    @classmethod
    def _ordered_gaps(cls, gaps):
        for start, end in gaps:
            if not start < end:
                raise ValueError(f"gap [{start}, {end}] must have start < end")
        return gaps


_OBSERVING_KEYS = ("start", "span", "cadence", "cadence_jitter", "toa_error", "toa_error_scatter", "gaps",
                   "radio_frequency", "systems")


class PulsarEntry(_Section):
    """One pulsar of ``[array] pulsars``.

    ``ra`` (degrees, or sexagesimal hours as a string) and ``dec`` (degrees, or
    sexagesimal degrees); ``distance`` and ``distance_error`` in kpc.  Any
    ``[observing]`` key given here overrides the default for this pulsar, and
    ``white``/``red`` tables override ``[noise.white]``/``[noise.red]``.
    """

    name: SafeName
    ra: RightAscension
    dec: Declination
    distance: Quantity("kpc", Positive) = 1.0
    distance_error: Quantity("kpc", NonNegative) = 0.0
    start: Optional[Quantity("d", StartRange)] = None
    span: Optional[Quantity("yr", Positive)] = None
    cadence: Optional[Quantity("d", Positive)] = None
    cadence_jitter: Optional[Quantity("d", NonNegative)] = None
    toa_error: Optional[Drawable("us", Positive)] = None
    toa_error_scatter: Optional[Quantity("dex", NonNegative, AfterValidator(_at_most(2.0)))] = None
    gaps: Optional[tuple[Gap, ...]] = None
    radio_frequency: Optional[Quantity("MHz", Positive)] = None
    systems: Optional[Systems] = None
    white: WhiteOverride = WhiteOverride()
    red: RedOverride = RedOverride()
    dispersion: ChromaticOverride = ChromaticOverride()
    scattering: ChromaticOverride = ChromaticOverride()


class RandomArray(_Section):
    """``[array] random``: ``count`` pulsars placed isotropically on the sky.

    Named ``<prefix>001``...; ``distance`` and ``distance_error`` in kpc, drawable.
    """

    count: Count = Field(ge=1, le=100_000)
    prefix: SafeName = "RP"
    distance: Drawable("kpc", Positive) = 1.0
    distance_error: Drawable("kpc", NonNegative) = 0.0


class ArraySection(_Section):
    """``[array]``: a list of ``pulsars``, a ``random`` array, or plain tables.

    ``table`` (TOAs) and ``catalogue`` (pulsars) are CSV files, relative to the
    config file (see :mod:`ptares.inputs.tables`); ``mode = "schedule"`` takes only
    their epochs and errors, ``"inject"`` keeps their residuals and adds the
    configured signals.  ``window`` = [first MJD, last MJD] sets the span T of
    the Fourier basis (default: the TOAs' extent).  ``signals`` names a JSON
    file of injected-signal parameters that ``ptares import`` restores (written
    by ``ptares export``).

    ``vary_distances``: draw each pulsar's true distance (used by pulsar terms)
    from a normal distribution of the catalogued ``distance`` and ``distance_error``.
    """

    pulsars: Optional[tuple[PulsarEntry, ...]] = None
    random: Optional[RandomArray] = None
    table: Optional[str] = None
    catalogue: Optional[str] = None
    mode: Literal["schedule", "inject"] = "schedule"
    window: Optional[tuple[Quantity("d"), Quantity("d")]] = None
    signals: Optional[str] = None
    vary_distances: bool = False

    @model_validator(mode="after")
    def _one_kind(self):
        kinds = [k for k in ("pulsars", "random", "table") if getattr(self, k) is not None]
        if len(kinds) != 1:
            raise ValueError("give exactly one of 'pulsars', 'random' or 'table' (with 'catalogue')")
        if (self.table is None) != (self.catalogue is None):
            raise ValueError("'table' and 'catalogue' go together")
        if self.window is not None and not self.window[0] < self.window[1]:
            raise ValueError("window needs [first MJD, last MJD] with first < last")
        if self.pulsars is not None:
            if not self.pulsars:
                raise ValueError("the array has no pulsars")
            names = [p.name for p in self.pulsars]
            repeated = sorted({n for n in names if names.count(n) > 1})
            if repeated:
                raise ValueError(f"pulsar names repeat: {', '.join(repeated)}")
        return self


class TimingModel(_Section):
    """``[timing_model]``: the terms fitted out of each pulsar's residuals."""

    fit: Annotated[tuple[Literal[TIMING_TERMS], ...], _listed_once("a term")] = ("offset", "spin_frequency", "spin_down")


class Background(_Section):
    """``[gwb]``: a stochastic background with a power-law spectrum.

    ``amplitude`` of the characteristic strain at f = 1/yr; ``spectral_index`` the
    residual spectral index (13/3 for circular binaries); ``harmonics`` the
    number of Fourier frequencies k/T; ``correlation`` the inter-pulsar pattern.
    ``source = "binaries"`` builds it from about ``binaries`` circular binaries
    across the band instead of Gaussian Fourier coefficients;
    ``loudness_spread`` (dex) scatters their amplitudes log-normally.
    ``bend_frequency`` (nHz) turns a Gaussian background's power law over below it,
    dividing it by ``1 + (bend_frequency / f)^bend_index`` (:func:`ptares.physics.spectra.turnover`).
    """

    amplitude: Quantity(None, NonNegative, MaxAmplitude)
    spectral_index: Quantity(None, SpectralIndex) = 13.0 / 3.0
    harmonics: Count = Field(default=30, ge=1, le=MAX_HARMONICS)
    correlation: Literal[CORRELATIONS] = "hellings-downs"
    source: Literal["gaussian", "binaries"] = "gaussian"
    binaries: Count = Field(default=1000, ge=1, le=1_000_000)
    loudness_spread: Quantity("dex", NonNegative) = 0.0
    bend_frequency: Optional[Quantity("nHz", Positive)] = None
    bend_index: Quantity(None, NonNegative, AfterValidator(_at_most(8.0))) = 2.0

    @model_validator(mode="after")
    def _binaries_are_hellings_downs(self):
        if self.source == "binaries" and self.correlation != "hellings-downs":
            raise ValueError("a background of binaries has the hellings-downs correlation; drop 'correlation'")
        if self.source == "binaries" and self.bend_frequency is not None:
            raise ValueError("bend_frequency shapes a Gaussian background; a background of binaries has its own spectrum")
        return self


class ContinuousWave(_Section):
    """One ``[[binary]]`` source: a circular supermassive black-hole binary.

    ``chirp_mass`` in solar masses; ``distance`` (luminosity) in Mpc, or the
    strain amplitude ``strain`` (h0) instead; ``frequency`` (GW, twice the
    orbital) or ``orbital_frequency`` in nHz, at the array's first epoch;
    ``ra``/``dec`` as for pulsars; ``inclination`` (in [0, pi]),
    ``polarization`` and ``phase`` (orbital phase at the first epoch) in
    radians; ``frequency_evolution`` switches radiation-reaction evolution, ``pulsar_term``
    the pulsar term.
    """

    name: Optional[SafeName] = None
    chirp_mass: Optional[Quantity("solMass", Positive)] = None
    distance: Optional[Quantity("Mpc", Positive)] = None
    strain: Optional[Quantity(None, Positive, MaxAmplitude)] = None
    frequency: Optional[Quantity("nHz", Positive)] = None
    orbital_frequency: Optional[Quantity("nHz", Positive)] = None
    ra: RightAscension
    dec: Declination
    inclination: Quantity("rad") = 0.0
    polarization: Quantity("rad") = 0.0
    phase: Quantity("rad") = 0.0
    frequency_evolution: bool = True
    pulsar_term: bool = True

    @field_validator("inclination")
    @classmethod
    def _inclination_range(cls, value):
        if not 0.0 <= value <= math.pi:
            raise ValueError(f"inclination {value} rad is outside [0, pi]")
        return value

    @model_validator(mode="after")
    def _complete(self):
        if (self.frequency is None) == (self.orbital_frequency is None):
            raise ValueError("give either 'frequency' (GW) or 'orbital_frequency', not both or neither")
        if (self.distance is None) == (self.strain is None):
            raise ValueError("give either 'distance' or 'strain', not both or neither")
        if self.chirp_mass is None and (self.distance is not None or self.frequency_evolution):
            need = "'distance'" if self.distance is not None else "'frequency_evolution = true'"
            raise ValueError(f"'chirp_mass' is needed with {need}")
        return self

    @property
    def wave_frequency_hz(self) -> float:
        """GW frequency in Hz (twice the orbital frequency)."""
        return (self.frequency if self.frequency is not None else 2.0 * self.orbital_frequency) * 1e-9


#: Shapes of a ``[[wave]]`` and the keys each needs (``required``) and may take (``optional``) besides the
#: keys every wave has (name, shape, ra, dec, polarization, pulsar_term).
WAVE_SHAPES = {
    "sine_gaussian": {"required": ("epoch", "amplitude", "width", "frequency"), "optional": ("phase", "cross_fraction")},
    "memory": {"required": ("epoch", "amplitude"), "optional": ("rise_time",)},
    "table": {"required": ("file",), "optional": ("epoch", "beyond_table", "strain_scale")},
}
_WAVE_KEYS = ("epoch", "amplitude", "width", "frequency", "phase", "cross_fraction", "rise_time", "file", "beyond_table",
              "strain_scale")


class PlaneWave(_Section):
    """One ``[[wave]]``: a plane gravitational wave of any profile from direction ``ra``/``dec``
    (as for pulsars) with polarisation angle ``polarization`` (rad); ``pulsar_term`` adds the
    pulsar term at the retarded time (catalogue distances are not used: the true ones are).

    ``shape`` ``"sine_gaussian"``: a burst of strain ``amplitude`` centred at ``epoch`` (MJD),
    Gaussian envelope of standard deviation ``width`` (days), ``frequency`` (nHz), ``phase``
    (rad) at the centre and ``cross_fraction`` (the cross polarisation's share, in [-1, 1]).
    ``"memory"``: a memory step of strain ``amplitude`` at ``epoch`` (MJD) rising over
    ``rise_time`` (days; 0: sharp).  ``"table"``: ``h+``, ``hx`` from the CSV ``file`` (relative
    to the config's folder; README: Waves of any shape), times in MJD or, with a unit, from
    ``epoch``; ``strain_scale`` multiplies both; ``beyond_table`` ``"error"`` (default) refuses
    times outside the table, ``"hold"`` keeps its end values there.
    """

    name: Optional[SafeName] = None
    shape: Literal["sine_gaussian", "memory", "table"]
    ra: RightAscension
    dec: Declination
    polarization: Quantity("rad") = 0.0
    pulsar_term: bool = True
    epoch: Optional[Quantity("d", StartRange)] = None
    amplitude: Optional[Quantity(None, Positive, MaxAmplitude)] = None
    width: Optional[Quantity("d", Positive)] = None
    frequency: Optional[Quantity("nHz", NonNegative)] = None
    phase: Optional[Quantity("rad")] = None
    cross_fraction: Optional[Quantity(None, AfterValidator(lambda v: _at_least(-1.0)(_at_most(1.0)(v))))] = None
    rise_time: Optional[Quantity("d", NonNegative)] = None
    file: Optional[str] = None
    beyond_table: Optional[Literal["error", "hold"]] = None
    strain_scale: Optional[Quantity(None, Positive)] = None

    @model_validator(mode="after")
    def _keys_of_shape(self):
        wanted = WAVE_SHAPES[self.shape]
        missing = [k for k in wanted["required"] if getattr(self, k) is None]
        if missing:
            raise ValueError(f"a {self.shape} wave needs {', '.join(repr(k) for k in missing)}")
        unused = [k for k in _WAVE_KEYS if getattr(self, k) is not None and k not in wanted["required"] + wanted["optional"]]
        if unused:
            raise ValueError(f"{', '.join(repr(k) for k in unused)} {'is' if len(unused) == 1 else 'are'} not used by "
                             f"a {self.shape} wave (it takes {', '.join(wanted['required'] + wanted['optional'])})")
        return self


class PulsarNoise(_Section):
    """Per-pulsar overrides in ``[correlate.noise_values.pulsars.<name>]`` (quadrature in microseconds)."""

    white_scale: Optional[Quantity(None, Positive)] = None
    white_quadrature: Optional[Quantity("us", NonNegative)] = None
    red_amplitude: Optional[Quantity(None, NonNegative, MaxAmplitude)] = None
    red_spectral_index: Optional[Quantity(None, SpectralIndex)] = None

    def given(self) -> dict:
        return {k: v for k, v in self.model_dump().items() if v is not None}


class CorrelateNoise(_Section):
    """``[correlate.noise_values]``: noise values when ``noise = "values"`` (quadrature in microseconds).

    ``pulsars`` maps pulsar names to tables overriding any of the per-pulsar keys.
    """

    white_scale: Quantity(None, Positive) = 1.0
    white_quadrature: Quantity("us", NonNegative) = 0.0
    red_amplitude: Quantity(None, NonNegative, MaxAmplitude) = 0.0
    red_spectral_index: Quantity(None, SpectralIndex) = 13.0 / 3.0
    red_harmonics: Count = Field(default=30, ge=1, le=MAX_HARMONICS)
    common_amplitude: Quantity(None, NonNegative, MaxAmplitude) = 0.0
    common_spectral_index: Quantity(None, SpectralIndex) = 13.0 / 3.0
    common_harmonics: Count = Field(default=30, ge=1, le=MAX_HARMONICS)
    pulsars: dict[str, "PulsarNoise"] = {}


class CorrelateSection(_Section):
    """``[correlate]``: settings of ``ptares correlate``.

    ``spectral_index`` and ``harmonics`` shape the template (default: the injected
    background's, else 13/3 and 30); ``noise`` is ``"injected"`` (the dataset's
    truth), ``"values"`` (``[correlate.noise_values]``) or ``"posterior"``
    (``draws`` samples of a ``ptares fit`` whose ``chains.h5`` is ``chains``: the
    noise-marginalised statistic); ``bins`` angular bins;
    ``scrambles`` and ``phase_shifts`` null trials (0 for none) with
    ``scramble_threshold`` the largest match a kept scramble may have;
    ``fit_trials`` simulations that calibrate the fit-quality p-value; ``seed``
    for the nulls and those simulations; ``estimator`` the optimal statistic's pair
    weights: ``"weak-signal"`` (noise-only variances) or ``"pair-covariant"``
    (generalised least squares with the pair-pair covariance at the estimated amplitude).
    """

    spectral_index: Optional[Quantity(None, SpectralIndex)] = None
    harmonics: Optional[Count] = Field(default=None, ge=1, le=MAX_HARMONICS)
    noise: Literal["injected", "values", "posterior"] = "injected"
    chains: Optional[str] = None
    draws: Count = Field(default=50, ge=1, le=100_000)
    bins: Count = Field(default=8, ge=2, le=90)
    scrambles: Count = Field(default=100, ge=0, le=100_000)
    phase_shifts: Count = Field(default=100, ge=0, le=100_000)
    scramble_threshold: Quantity(None, Positive, AfterValidator(_at_most(1.0))) = 0.1
    fit_trials: Count = Field(default=500, ge=0, le=1_000_000)
    seed: Count = Field(default=0, ge=0, le=2**63 - 1)
    overlays: bool = False
    estimator: Literal["weak-signal", "pair-covariant"] = "weak-signal"
    noise_values: CorrelateNoise = CorrelateNoise()

    @model_validator(mode="after")
    def _chains_for_posterior(self):
        if self.noise == "posterior" and not self.chains:
            raise ValueError("noise = 'posterior' needs 'chains', the chains.h5 of a ptares fit")
        return self


class Prior(BaseModel):
    """A prior: exactly one of ``uniform = [low, high]``, ``log_uniform = [low, high]``
    (density 1/x), ``uniform_in_value = [low, high]`` (for an lg parameter: uniform in 10^x) or
    ``normal = [mean, sd]`` (optionally truncated to ``bounds = [low, high]``)."""

    model_config = ConfigDict(extra="forbid", frozen=True)
    uniform: Optional[tuple[float, float]] = None
    log_uniform: Optional[tuple[float, float]] = None
    uniform_in_value: Optional[tuple[float, float]] = None
    normal: Optional[tuple[float, float]] = None
    bounds: Optional[tuple[float, float]] = None

    @model_validator(mode="after")
    def _one_kind(self):
        given = [k for k in ("uniform", "log_uniform", "uniform_in_value", "normal") if getattr(self, k) is not None]
        if len(given) != 1:
            raise ValueError("a prior is exactly one of uniform, log_uniform, uniform_in_value or normal")
        kind = given[0]
        first, second = getattr(self, kind)
        if kind == "normal":
            if second <= 0:
                raise ValueError(f"normal prior needs a positive sd, got {second}")
            if self.bounds is not None and not self.bounds[0] < self.bounds[1]:
                raise ValueError(f"bounds need lower < upper, got {list(self.bounds)}")
        else:
            if self.bounds is not None:
                raise ValueError("'bounds' goes with a normal prior only")
            if not first < second:
                raise ValueError(f"{kind} prior needs lower < upper, got [{first}, {second}]")
            if kind == "log_uniform" and first <= 0:
                raise ValueError("log_uniform bounds must be positive")
        return self


#: Quantities of the continuous-wave (one binary) fit model; parameter names add ``binary_``
#: (see :mod:`ptares.inference.parameters`): lg of the strain h0, orbital phase at the first
#: epoch (rad), cos of the inclination, polarisation angle (rad), right ascension (rad), sin of
#: the declination, lg of the GW frequency (Hz).
_BINARY_ANGLES = ("orbital_phase", "polarization_angle", "right_ascension")  #: radians
#: Per-pulsar noise quantities of a fit (named as in :mod:`ptares.inference.parameters`).
NOISE_QUANTITIES = ("white_scale", "white_lg_quadrature", "red_lg_amplitude", "red_spectral_index")
#: Per-pulsar quantities of the chromatic processes, in CHROMATIC_PROCESSES order.
CHROMATIC_QUANTITIES = ("dispersion_lg_amplitude", "dispersion_spectral_index", "scattering_lg_amplitude",
                        "scattering_spectral_index")
BINARY_QUANTITIES = ("lg_strain", "orbital_phase", "inclination_cosine", "polarization_angle", "right_ascension",
                     "declination_sine", "lg_frequency")
#: Quantities of the memory-step fit model; parameter names add ``memory_``: lg of the strain step, its
#: epoch (MJD), polarisation angle (rad), right ascension (rad) and sin of the declination.
MEMORY_QUANTITIES = ("lg_strain", "epoch", "polarization_angle", "right_ascension", "declination_sine")
_MEMORY_ANGLES = ("polarization_angle", "right_ascension")  #: radians


class FitSection(_Section):
    """``[fit]``: the model ``ptares fit`` samples and how.

    ``common``: the common process, ``"uncorrelated"``, ``"hellings-downs"``,
    ``"monopole"``, ``"dipole"`` or ``"none"``, on ``harmonics`` frequencies; ``red``: each pulsar's red noise
    ``"free"``, ``"injected"`` (fixed at the dataset's truth) or ``"none"``, on
    ``red_harmonics`` frequencies; ``white``: ``"injected"`` or ``"free"``;
    ``binary``: fit a continuous wave from one binary, with the quantities in
    ``binary_free`` free and the rest from ``binary_values`` (else the dataset's
    first injected source).  ``memory``: fit a sharp memory step seen at the Earth, with the quantities in
    ``memory_free`` (strain and epoch by default) free and the rest from ``memory_values`` (else the dataset's
    first injected memory step).  ``fixed`` pins any parameter to a value; ``priors``
    replaces default priors (keys are parameter names, or a per-pulsar quantity
    without ``@pulsar``, e.g. ``red_lg_amplitude``, for every pulsar; see
    :mod:`ptares.inference.parameters`).  ``sampler``: ``"ensemble"`` (emcee),
    ``"gibbs"`` (blocked Gibbs, for large noise models) or ``"auto"`` (Gibbs above
    20 free parameters without a continuous wave); ``walkers`` of the ensemble (0:
    automatic), ``gibbs_chains`` independent Gibbs chains; stop at ``max_steps`` or
    when the chain is longer than ``autocorr_factor`` autocorrelation times, every
    parameter has ``effective_samples`` effective draws and (Gibbs) every split
    R-hat is below 1.01; ``thin``, ``burn`` (default two autocorrelation times, and
    the Gibbs sampler's adaptation), ``start`` (ensemble) at draws from the prior or
    near the maximum posterior, ``seed``, ``workers`` (processes: for the ensemble's
    likelihood calls, or running Gibbs chains side by side; 1: none).
    ``pulsars`` limits the fit to those pulsars.  ``pulsar_noise`` names the
    ``pulsar_noise.json`` of a per-pulsar noise stage (``ptares noise``; relative
    to the config's folder); its results ``"fix"`` the free noise parameters of
    the quantities in ``pulsar_noise_quantities`` (white noise by default) at
    their medians or set their ``"prior"`` (``pulsar_noise_use``).
    """

    common: Literal["uncorrelated", "hellings-downs", "monopole", "dipole", "none"] = "uncorrelated"
    common_spectrum: Literal["power_law", "turnover", "free"] = "power_law"
    spectral_models: Annotated[tuple[Literal["power_law", "turnover"], ...], _listed_once("a model")] = ("power_law",)
    harmonics: Optional[Count] = Field(default=None, ge=1, le=MAX_HARMONICS)
    red: Optional[Literal["free", "injected", "none"]] = None
    red_harmonics: Count = Field(default=30, ge=1, le=MAX_HARMONICS)
    red_spectrum: Literal["power_law", "free"] = "power_law"
    white: Literal["injected", "free"] = "injected"
    jitter: Optional[Literal["free", "injected", "none"]] = None
    dispersion: Optional[Literal["free", "injected", "none"]] = None
    scattering: Optional[Literal["free", "injected", "none"]] = None
    chromatic_harmonics: Count = Field(default=30, ge=1, le=MAX_HARMONICS)
    chromatic_indices: dict[Literal[CHROMATIC_PROCESSES], Quantity(None, ChromaticIndex)] = {}
    binary: bool = False
    binary_free: Annotated[tuple[Literal[BINARY_QUANTITIES], ...], _listed_once("a quantity")] = (
        "lg_strain", "orbital_phase", "inclination_cosine", "polarization_angle")
    binary_values: dict[Literal[BINARY_QUANTITIES], float] = {}
    binary_pulsar_term: bool = False
    memory: bool = False
    memory_free: Annotated[tuple[Literal[MEMORY_QUANTITIES], ...], _listed_once("a quantity")] = ("lg_strain", "epoch")
    memory_values: dict[Literal[MEMORY_QUANTITIES], float] = {}

    @field_validator("binary_values", mode="before")
    @classmethod
    def _angles_in_radians(cls, values):
        """Angles may be astropy Quantities in any angle unit; they are kept in radians."""
        if not isinstance(values, dict):
            return values
        return {k: to_unit(v, "rad" if k in _BINARY_ANGLES else "") if not isinstance(v, (int, float)) else v
                for k, v in values.items()}

    @field_validator("memory_values", mode="before")
    @classmethod
    def _memory_units(cls, values):
        """Angles in any angle unit (kept in radians), the epoch an MJD."""
        if not isinstance(values, dict):
            return values
        units = {"epoch": "d", **{k: "rad" for k in _MEMORY_ANGLES}}
        return {k: to_unit(v, units.get(k, "")) if not isinstance(v, (int, float)) else v for k, v in values.items()}

    fixed: dict[str, float] = {}
    priors: dict[str, Prior] = {}
    pulsar_noise: Optional[str] = None
    pulsar_noise_use: Literal["fix", "prior"] = "fix"
    pulsar_noise_quantities: Annotated[tuple[Literal[NOISE_QUANTITIES + ("white_lg_jitter",) + CHROMATIC_QUANTITIES], ...],
                                       _listed_once("a quantity")] = (
        "white_scale", "white_lg_quadrature")
    pulsars: Optional[tuple[str, ...]] = None
    sampler: Literal["auto", "ensemble", "gibbs"] = "auto"
    walkers: Count = Field(default=0, ge=0, le=10_000)
    gibbs_chains: Count = Field(default=2, ge=1, le=64)
    max_steps: Count = Field(default=20_000, ge=10, le=10_000_000)
    autocorr_factor: Quantity(None, Positive) = 50.0
    effective_samples: Count = Field(default=400, ge=0, le=10_000_000)
    thin: Count = Field(default=1, ge=1)
    burn: Optional[Count] = Field(default=None, ge=0)
    start: Literal["prior", "map"] = "prior"
    seed: Count = Field(default=0, ge=0, le=2**63 - 1)
    workers: Count = Field(default=1, ge=1, le=256)


class CompareSection(_Section):
    """``[compare]``: settings of ``ptares compare``.

    The uncorrelated model is fitted with ``[fit]`` (its ``common`` is set to
    ``"uncorrelated"``); up to ``samples`` of its posterior draws, thinned to one per
    autocorrelation time, are reweighted by the likelihood of each of ``patterns``.
    Fewer than ``min_effective_samples`` effective samples after reweighting is
    reported as unreliable.  ``direct_fit``: fit a pattern's model directly and take the
    Bayes factor by bridge sampling between both posteriors, when its reweighting is
    unreliable (``"auto"``), for every pattern (``"always"``) or never (``"never"``).
    ``workers`` local processes evaluate the likelihoods.
    """

    patterns: Annotated[tuple[Literal["hellings-downs", "monopole", "dipole"], ...], _listed_once("a pattern")] = (
        "hellings-downs",)
    samples: Count = Field(default=2000, ge=10, le=1_000_000)
    min_effective_samples: Count = Field(default=100, ge=1, le=1_000_000)
    direct_fit: Literal["auto", "always", "never"] = "auto"
    workers: Count = Field(default=1, ge=1, le=256)

    @field_validator("patterns")
    @classmethod
    def _some_pattern(cls, patterns):
        if not patterns:
            raise ValueError("name at least one pattern")
        return patterns

    @model_validator(mode="after")
    def _enough_draws(self):
        if self.samples < self.min_effective_samples:
            raise ValueError(f"samples ({self.samples}) must be at least min_effective_samples "
                             f"({self.min_effective_samples}): fewer draws can never be reliable")
        return self


class SweepDask(_Section):
    """``[sweep.dask]``: run on a Dask cluster at ``scheduler`` (an address such as ``tcp://host:8786``)."""

    scheduler: str


class SweepSection(_Section):
    """``[sweep]``: an injection-recovery campaign over this config.

    ``axes`` maps dotted config keys (``gwb.amplitude``, ``array.random.count``)
    to lists of values; ``grid = true`` runs every combination, ``false`` zips
    lists of equal length.  Each combination runs ``realisations`` times with
    seeds derived from ``seed`` and the task's index.  ``stages`` says what each
    task runs (``compare`` adds the Bayes factor of ``ptares compare``);
    ``false_alarm`` is the false-alarm probability of the detection threshold set
    from the tasks without a background; ``detection`` the statistic that detects,
    the optimal statistic's ``"snr"`` or the ``"bayes_factor"`` (with fewer than
    five no-signal tasks: ``ln B > ln_bayes_threshold``).  ``base`` names another
    config file whose tables this file's tables override.
    """

    axes: dict[str, list] = {}
    grid: bool = True
    realisations: Count = Field(default=10, ge=1, le=1_000_000)
    stages: tuple[Literal["simulate", "correlate", "fit", "compare"], ...] = ("simulate", "correlate")
    seed: Count = Field(default=0, ge=0, le=2**63 - 1)
    false_alarm: Quantity(None, Positive, AfterValidator(_at_most(0.5))) = 0.05
    detection: Literal["snr", "bayes_factor"] = "snr"
    ln_bayes_threshold: float = Field(default=3.0, ge=-1e3, le=1e3)
    base: Optional[str] = None
    dask: Optional[SweepDask] = None

    @model_validator(mode="after")
    def _shape(self):
        if "simulate" not in self.stages:
            raise ValueError("every task simulates its data: 'simulate' must be among the stages")
        needed = {"snr": "correlate", "bayes_factor": "compare"}[self.detection]
        if needed not in self.stages:
            raise ValueError(f"detection = {self.detection!r} needs the {needed!r} stage")
        for key, values in self.axes.items():
            if not isinstance(values, list) or not values:
                raise ValueError(f"axis {key!r} needs a non-empty list of values")
        if not self.grid and len({len(v) for v in self.axes.values()}) > 1:
            raise ValueError("with grid = false every axis needs the same number of values")
        return self


class SensitivitySection(_Section):
    """``[sensitivity]``: settings of ``ptares sensitivity``.

    ``amplitudes``: the background amplitudes of the S/N and detection-probability curves
    (default 20 from 1e-16 to 1e-13); ``amplitude`` the background drawn over the curves and
    used against observing time (default: the injected one, else 2.4e-15); ``spectral_index``
    and ``harmonics`` its spectrum and Fourier frequencies (default: the injected background's,
    else 13/3 and 30); ``years`` the observing spans of the S/N-against-time curve (default
    eight up to the array's span); ``false_alarm`` the false-alarm probability of detection;
    ``power_law_snr`` the S/N of the power-law-integrated curve; ``wave_snr`` the S/N a
    continuous wave needs; ``wave_frequency`` (nHz) the frequency of the sky map (default: the
    first binary's, else 10 nHz); ``pulsar_term`` whether continuous waves have one;
    ``curve_points`` frequencies of the curves; ``map_step`` (deg) the sky map's grid step.
    """

    amplitudes: Optional[tuple[Quantity(None, Positive, MaxAmplitude), ...]] = Field(default=None, min_length=1,
                                                                                     max_length=1000)
    amplitude: Optional[Quantity(None, Positive, MaxAmplitude)] = None
    spectral_index: Optional[Quantity(None, SpectralIndex)] = None
    harmonics: Optional[Count] = Field(default=None, ge=1, le=MAX_HARMONICS)
    years: Optional[tuple[Quantity("yr", Positive), ...]] = Field(default=None, min_length=1, max_length=1000)
    false_alarm: Quantity(None, Positive, AfterValidator(_at_most(0.5))) = 1e-3
    power_law_snr: Quantity(None, Positive) = 1.0
    wave_snr: Quantity(None, Positive) = 5.0
    wave_frequency: Optional[Quantity("nHz", Positive)] = None
    pulsar_term: bool = True
    curve_points: Count = Field(default=200, ge=10, le=5000)
    map_step: Quantity("deg", Positive, AfterValidator(_at_most(30.0))) = 5.0


class Config(_Section):
    """A whole validated run configuration."""

    run: RunSection = RunSection()
    array: ArraySection
    observing: Observing = Observing()
    noise: NoiseSection = NoiseSection()
    timing_model: TimingModel = TimingModel()
    gwb: Optional[Background] = None
    binary: tuple[ContinuousWave, ...] = ()
    wave: tuple[PlaneWave, ...] = ()
    correlate: CorrelateSection = CorrelateSection()
    fit: FitSection = FitSection()
    compare: CompareSection = CompareSection()
    sweep: Optional[SweepSection] = None
    sensitivity: SensitivitySection = SensitivitySection()

    _text: str = PrivateAttr(default="")
    _path: Optional[Path] = PrivateAttr(default=None)

    @model_validator(mode="after")
    def _consistent(self):
        # InputError is not wrapped by pydantic: it reaches the caller with its field path
        _check_schedules(self)
        _check_sources(self)
        _check_waves(self)
        return self

    @property
    def source_text(self) -> str:
        """The TOML text this config was read from."""
        return self._text

    @property
    def source_path(self) -> Optional[Path]:
        """The file this config was read from, if any."""
        return self._path

    def observing_for(self, pulsar: PulsarEntry) -> Observing:
        """The ``[observing]`` settings with ``pulsar``'s overrides applied."""
        overrides = {k: getattr(pulsar, k) for k in _OBSERVING_KEYS if getattr(pulsar, k) is not None}
        return self.observing.model_copy(update=overrides)

    def schedules(self) -> list[Observing]:
        """Each pulsar's observing settings (one entry for a random array: all share it)."""
        if self.array.pulsars is None:
            return [self.observing]
        return [self.observing_for(p) for p in self.array.pulsars]

    def resolve(self, relative: str) -> Path:
        """A path from the config, relative to the config file's folder."""
        path = Path(relative)
        if path.is_absolute() or self._path is None:
            return path
        return self._path.parent / path

    def source_name(self, index: int) -> str:
        """The name of ``[[binary]]`` source ``index``: its own, or ``binary<index + 1>``."""
        return self.binary[index].name or f"binary{index + 1}"

    def wave_name(self, index: int) -> str:
        """The name of ``[[wave]]`` ``index``: its own, or ``wave<index + 1>``."""
        return self.wave[index].name or f"wave{index + 1}"


def _location(loc: tuple, raw: dict) -> str:
    """``('array', 'pulsars', 2, 'dec')`` -> ``array.pulsars[2] (NAME).dec``."""
    text = ""
    node: Any = raw
    for part in loc:
        if part == "[key]":  # pydantic's marker for a dict key that failed: the key is already named
            continue
        if isinstance(part, int):
            text += f"[{part}]"
            try:
                node = node[part]
                if isinstance(node, dict) and "name" in node:
                    text += f" ({node['name']})"
            except (IndexError, KeyError, TypeError):
                node = None
        else:
            text += ("." if text else "") + str(part)
            node = node.get(part) if isinstance(node, dict) else None
    return text


def _models_in(annotation) -> tuple:
    """``(models, keyed)``: the pydantic models inside a type annotation, and whether they sit in a dict."""
    if isinstance(annotation, type) and issubclass(annotation, BaseModel):
        return [annotation], False
    models, keyed = [], get_origin(annotation) is dict
    for argument in get_args(annotation):
        found, inner = _models_in(argument)
        models += found
        keyed = keyed or inner
    return models, keyed


def _keys_at(path: tuple) -> set:
    """The keys the config takes in the table at ``path`` (e.g. ``('gwb',)``); empty if unknown."""
    models, keyed = [Config], False
    for part in path:
        if isinstance(part, int):
            continue
        if keyed:  # a dict's key (a pulsar's name), not a field
            keyed = False
            continue
        found = [_models_in(m.model_fields[part].annotation) for m in models if part in m.model_fields]
        models = [model for group, _ in found for model in group]
        keyed = any(inner for _, inner in found)
    return set().union(*(m.model_fields for m in models)) if models else set()


def message_for(error: dict, loc: tuple = (), location: str = "") -> str:
    """The words of one pydantic error, with a hint for a renamed key."""
    kind = error["type"]
    if kind == "extra_forbidden":
        key = str(loc[-1]) if loc else ""
        hit = renamed(key) if key else None
        if hit and hit[0] in _keys_at(loc[:-1]):
            new, what = hit
            parent = re.sub(r" \([^)]*\)", "", location.rpartition(".")[0])
            return f"unknown key; {what} is now '{parent + '.' if parent else ''}{new}'"
        close = difflib.get_close_matches(key, sorted(_keys_at(loc[:-1])), n=1, cutoff=0.75) if key else []
        return f"unknown key; did you mean '{close[0]}'?" if close else "unknown key"
    if kind == "missing":
        return "required key is missing"
    message = error["msg"]
    for prefix in ("Value error, ", "Assertion failed, "):
        if message.startswith(prefix):
            message = message[len(prefix):]
    return message


def _nominal_epochs(obs: Observing):
    """Epochs a schedule has before jitter, outside its gaps (a float, maybe infinite, when beyond :data:`MAX_TOAS`)."""
    span_days = obs.span * 365.25
    ratio = span_days / obs.cadence
    if not ratio < MAX_TOAS:  # too many (or infinitely many): counted without ever building the epochs
        return ratio + 1.0
    count = int(math.floor(ratio)) + 1
    epochs = obs.start + obs.cadence * np.arange(count)
    keep = np.ones(count, dtype=bool)
    for gap_start, gap_end in obs.gaps:
        keep &= ~((epochs >= gap_start) & (epochs <= gap_end))
    return int(keep.sum())


def _check_schedules(config: Config) -> None:
    """Cross-field checks of every pulsar's schedule, naming the offending key."""
    from ptares.physics.timing_model import column_names

    columns = len(column_names(config.timing_model.fit))
    if config.array.table is not None:
        return  # the tables are checked when they are read
    entries = config.array.pulsars or (None,)
    total = 0
    for i, pulsar in enumerate(entries):
        obs = config.observing if pulsar is None else config.observing_for(pulsar)

        def where(key):  # the pulsar's own key if it overrides it, else the [observing] default
            if pulsar is not None and getattr(pulsar, key) is not None:
                return f"array.pulsars[{i}] ({pulsar.name}).{key}"
            return f"observing.{key}"

        if obs.span * 365.25 <= obs.cadence:
            raise InputError(f"span ({obs.span} yr) is not longer than the cadence ({obs.cadence} d)", where("span"))
        count = _nominal_epochs(obs)
        count = count * obs.toas_per_epoch  # every sub-band of every system at every epoch
        if count > MAX_TOAS:
            many = "an unbounded number of" if math.isinf(count) else f"{count:.4g}"
            raise InputError(f"{many} TOAs per pulsar is more than ptares handles ({MAX_TOAS})", where("cadence"))
        total += count * (config.array.random.count if pulsar is None and config.array.random else 1)
        if total > MAX_TOTAL_TOAS:
            raise InputError(f"the array would have {total:.4g} TOAs in all, more than ptares handles ({MAX_TOTAL_TOAS})",
                             "array.random.count" if pulsar is None else where("cadence"))
        if obs.cadence_jitter > obs.cadence:
            raise InputError(
                f"cadence_jitter ({obs.cadence_jitter} d) is larger than the cadence ({obs.cadence} d)", where("cadence_jitter")
            )
        if count <= columns:
            name = "" if pulsar is None else f" for {pulsar.name}"
            raise InputError(
                f"leaves {count} TOAs{name}, not more than the {columns} timing-model columns",
                where("gaps" if obs.gaps else "span"),
            )


def _check_waves(config: Config) -> None:
    """``[[wave]]`` names are unique, and a burst's frequency is below the cadence's Nyquist frequency."""
    from ptares.physics.constants import DAY

    names = [config.wave_name(i) for i in range(len(config.wave))]
    for i, wave in enumerate(config.wave):
        path = f"wave[{i}] ({names[i]})"
        if names.count(names[i]) > 1:
            raise InputError("wave names must be unique", f"{path}.name")
        if wave.shape == "sine_gaussian" and config.array.table is None:
            nyquist = 1.0 / (2.0 * min(s.cadence for s in config.schedules()) * DAY)
            if wave.frequency * 1e-9 > nyquist:
                raise InputError(f"frequency {wave.frequency:.4g} nHz is above the cadence's Nyquist frequency "
                                 f"{nyquist * 1e9:.4g} nHz", f"{path}.frequency")


def _check_sources(config: Config) -> None:
    """Continuous-wave sources against the array's span and cadence (errors), and unusual physics (warnings)."""
    from ptares.physics.binaries import time_to_coalescence
    from ptares.physics.constants import DAY, KPC, M_SUN, YEAR

    if config.array.table is not None and config.binary:
        return  # epochs come from the table: checked when the table is read
    schedules = config.schedules()
    first = min(s.start for s in schedules)
    span = max(s.start + s.span * YEAR / DAY for s in schedules) - first  # days
    nyquist = 1.0 / (2.0 * min(s.cadence for s in schedules) * DAY)
    names = [config.source_name(i) for i in range(len(config.binary))]
    for i, source in enumerate(config.binary):
        path = f"binary[{i}] ({config.source_name(i)})"
        if names.count(names[i]) > 1:
            raise InputError("source names must be unique", f"{path}.name")
        key = "frequency" if source.frequency is not None else "orbital_frequency"
        f = source.wave_frequency_hz
        if f * span * DAY < 1.0:
            raise InputError(f"GW frequency {f * 1e9:.4g} nHz completes no full cycle in the {span / 365.25:.3g}-yr span", f"{path}.{key}")
        if f > nyquist:
            raise InputError(f"GW frequency {f * 1e9:.4g} nHz is above the cadence's Nyquist frequency {nyquist * 1e9:.4g} nHz", f"{path}.{key}")
        if source.frequency_evolution:
            tau = float(time_to_coalescence(source.chirp_mass * M_SUN, f))
            if tau <= span * DAY:
                raise InputError(f"the binary merges {tau / YEAR:.3g} yr after the first epoch, within the span", f"{path}.chirp_mass")
            if tau < 10 * span * DAY:
                warnings.warn(f"{path}: the binary merges {tau / YEAR:.3g} yr after the first epoch; its frequency evolves strongly", PhysicsWarning, stacklevel=2)
        if source.distance is not None:
            from ptares.physics.binaries import strain_amplitude

            h0 = float(strain_amplitude(source.chirp_mass * M_SUN, f, source.distance * 1e3 * KPC))
            if h0 > 1e-9:
                raise InputError(f"chirp mass and distance give h0 = {h0:.3g}, above 1e-9: surely a typo", f"{path}.distance")
        if source.chirp_mass is not None and source.chirp_mass > 1e11:
            warnings.warn(f"{path}: chirp mass {source.chirp_mass:.3g} solar masses is unusually large", PhysicsWarning, stacklevel=2)


def validation_error(exc: ValidationError, raw: dict, where: str, prefix: tuple = ()) -> InputError:
    """The first fault of a validation as one line: ``where: key.path: what is wrong``.  A missing key
    beside an unknown one in the same table is most likely misspelt: the unknown key is reported."""
    errors = exc.errors()
    first = errors[0]
    if first["type"] == "missing":
        table = tuple(first["loc"][:-1])
        first = next((e for e in errors if e["type"] == "extra_forbidden" and tuple(e["loc"][:-1]) == table), first)
    return error_line(first, raw, where, prefix)


def error_line(first: dict, raw: dict, where: str, prefix: tuple = ()) -> InputError:
    """One pydantic error (an entry of ``ValidationError.errors()``) as an :class:`InputError`."""
    loc = prefix + tuple(p for p in first["loc"] if not (isinstance(p, str) and p.startswith("function-")))
    location = _location(loc, raw)
    message = message_for(first, loc, location)
    if not loc:
        return InputError(message, where or None)
    return InputError(message, f"{where}: {location}" if where else location)


def load_correlate_section(path) -> CorrelateSection:
    """The ``[correlate]`` table of the TOML file at ``path`` (other tables are not read)."""
    return load_section(path, "correlate", CorrelateSection)


def read_bytes(path, limit: int = FILE_LIMIT) -> bytes:
    """The bytes of the regular file at ``path``, at most ``limit``; a missing, special, unreadable or
    too large file is an :class:`InputError` naming it (a stream such as /dev/zero is never read)."""
    info = regular_file(path)
    if info.st_size > limit:
        raise InputError(f"is {info.st_size / 2**20:.0f} MiB, more than ptares reads ({limit / 2**20:.0f} MiB)", str(path))
    try:
        with open(path, "rb") as handle:
            data = handle.read(limit + 1)
    except OSError as exc:
        raise InputError(f"cannot read file ({exc.strerror or exc})", str(path)) from None
    if len(data) > limit:  # grew while being read
        raise InputError(f"is more than ptares reads ({limit / 2**20:.0f} MiB)", str(path))
    return data


def read_text(path, encoding: str = "utf-8") -> str:
    """The text of the file at ``path`` (see :func:`read_bytes`); text that does not decode is an
    :class:`InputError` naming the file and the byte."""
    data = read_bytes(path)
    try:
        return data.decode(encoding)
    except UnicodeDecodeError as exc:
        raise InputError(f"not UTF-8 text (byte {exc.start + 1} is 0x{data[exc.start]:02x})", str(path)) from None


class _BadNumber(float):
    """A TOML float literal that does not survive as a double: it overflowed to infinity or fell to zero."""

    text: str


def _checked_float(text: str) -> float:
    """``tomllib``'s float parser, marking literals whose value overflows or underflows (see :func:`toml_data`)."""
    value = float(text)
    digits = text.lower().lstrip("+-").replace("_", "")
    overflow = math.isinf(value) and digits != "inf"
    underflow = value == 0.0 and any(c in "123456789" for c in digits.split("e")[0])
    if overflow or underflow:
        marked = _BadNumber(value)
        marked.text = text
        return marked
    return value


def _depth(value, level: int = 0) -> int:
    """How deeply tables and arrays nest in ``value`` (stops counting past the limit)."""
    if level > NESTING_LIMIT or not isinstance(value, (dict, list)):
        return level
    items = value.values() if isinstance(value, dict) else value
    return max((_depth(v, level + 1) for v in items), default=level + 1)


def _bad_number(value, path: tuple = ()):
    """``(key path, the marked number)`` of the first overflowing or underflowing number in ``value``, or None."""
    if isinstance(value, _BadNumber):
        return path, value
    if isinstance(value, (dict, list)):
        items = value.items() if isinstance(value, dict) else enumerate(value)
        for key, item in items:
            found = _bad_number(item, path + (key,))
            if found:
                return found
    return None


def _dotted(path: tuple) -> str:
    return "".join(f"[{p}]" if isinstance(p, int) else (f".{p}" if i else str(p)) for i, p in enumerate(path))


def toml_data(text: str, where: str) -> dict:
    """TOML ``text`` as data; invalid TOML, nesting deeper than :data:`NESTING_LIMIT` and a number that does not
    fit a double (``1e400``, ``1e-400``) are :class:`InputError` s naming ``where`` (and the key)."""
    try:
        raw = tomllib.loads(text, parse_float=_checked_float)
    except tomllib.TOMLDecodeError as exc:
        raise InputError(f"not valid TOML: {exc}", where) from None
    except RecursionError:
        raise InputError(f"nests tables or arrays more than {NESTING_LIMIT} deep", where) from None
    if _depth(raw) > NESTING_LIMIT:
        raise InputError(f"nests tables or arrays more than {NESTING_LIMIT} deep", where)
    found = _bad_number(raw)
    if found:
        path, number = found
        what = "overflows: it is beyond" if math.isinf(number) else "underflows: it is below"
        raise InputError(f"{number.text} {what} the range of a double-precision number", f"{where}: {_dotted(path)}")
    return raw


def read_json(path):
    """The JSON file at ``path`` as data, read like :func:`read_text`; invalid JSON and nesting deeper
    than :data:`NESTING_LIMIT` are :class:`InputError` s naming the file."""
    import json

    try:
        data = json.loads(read_text(path))
    except json.JSONDecodeError as exc:
        raise InputError(f"not valid JSON: {exc}", str(path)) from None
    except ValueError as exc:  # e.g. an integer of more digits than Python converts
        raise InputError(f"not valid JSON: {exc}", str(path)) from None
    except RecursionError:
        raise InputError(f"nests objects or arrays more than {NESTING_LIMIT} deep", str(path)) from None
    if _depth(data) > NESTING_LIMIT:
        raise InputError(f"nests objects or arrays more than {NESTING_LIMIT} deep", str(path))
    return data


def read_toml(path) -> dict:
    """The TOML file at ``path`` as data; every reading fault is an :class:`InputError` naming the file."""
    return toml_data(read_text(path), str(path))


def with_overrides(section, overrides: dict, option_prefix: str = "--"):
    """``section`` (a pydantic model) with ``overrides`` applied and validated; faults name the option."""
    if not overrides:
        return section
    try:
        return type(section).model_validate({**section.model_dump(), **overrides})
    except ValidationError as exc:
        first = exc.errors()[0]
        fields = [str(p) for p in first["loc"] if not str(p).startswith("function-")]
        where = option_prefix + fields[0].replace("_", "-") if fields else "options"
        raise InputError(message_for(first), where) from None


def load_section(path, name: str, model):
    """The ``[name]`` table of the TOML file at ``path`` validated by ``model`` (other tables are not read)."""
    path = Path(path)
    raw = read_toml(path)
    if name not in raw:
        raise InputError(f"has no [{name}] table", str(path))
    try:
        return model.model_validate(raw[name])
    except ValidationError as exc:
        raise validation_error(exc, raw, str(path), (name,)) from None


def merge_tables(base: Mapping, top: Mapping) -> dict:
    """``top`` over ``base``, table by table (a copy; neither input changes)."""
    merged = copy.deepcopy(dict(base))
    for key, value in top.items():
        if isinstance(value, Mapping) and isinstance(merged.get(key), dict):
            merged[key] = merge_tables(merged[key], value)
        else:
            merged[key] = copy.deepcopy(value)
    return merged


def _toml_ready(value):
    """Config data as tomli-w writes it: Quantities as strings with their unit (which the config
    reads back), numpy scalars as Python numbers, tuples as lists, ``None`` left out."""
    import astropy.units as u

    if isinstance(value, u.Quantity):
        if not value.isscalar:
            return [_toml_ready(v) for v in value]
        number = float(value.value)
        if value.unit == u.dimensionless_unscaled:
            return number
        if value.unit == u.hourangle:  # not a unit name astropy's angle parser reads; 15 degrees an hour exactly
            return f"{number * 15.0!r} deg"
        return f"{number!r} {value.unit.to_string()}"
    if isinstance(value, Mapping):
        return {str(k): _toml_ready(v) for k, v in value.items() if v is not None}
    if isinstance(value, (list, tuple, np.ndarray)):
        return [_toml_ready(v) for v in value]
    if isinstance(value, (np.bool_, np.integer, np.floating)):
        return value.item()
    if isinstance(value, Path):
        return str(value)
    return value


def config_text(raw: Mapping) -> str:
    """``raw`` (tables of numbers, strings, lists or astropy Quantities) as TOML text; ``TypeError`` if it cannot be."""
    return tomli_w.dumps(_toml_ready(raw))


def config_from_data(raw: dict, where: str, path: Optional[Path] = None, text: str = "") -> Config:
    """Validate TOML-like ``raw``; ``where`` names it in error messages, ``text`` is the record kept with it."""
    try:
        config = Config.model_validate(raw)
    except ValidationError as exc:
        raise validation_error(exc, raw, where) from None
    except InputError as exc:
        raise InputError(exc.message, f"{where}: {exc.where}") from None
    config._text = text
    config._path = path
    return config


def parse_config(text: str, where: str = "<config>", path: Optional[Path] = None) -> Config:
    """Validate TOML ``text``; ``where`` names it in error messages."""
    return config_from_data(toml_data(text, where), where, path, text)


def load_config(path) -> Config:
    """Read and validate the TOML config at ``path``."""
    path = Path(path)
    return parse_config(read_text(path), where=str(path), path=path)

"""The model ``ptares fit`` samples: parameters, priors and the log posterior.

Parameter names follow :mod:`ptares.inference.parameters`: ``common_lg_amplitude``
and ``common_spectral_index`` for the common process; ``white_scale@<pulsar>``,
``white_lg_quadrature@<pulsar>`` (lg of seconds), ``red_lg_amplitude@<pulsar>``,
``red_spectral_index@<pulsar>``; and for a continuous wave ``binary_lg_strain``,
``binary_orbital_phase`` (at the first epoch), ``binary_inclination_cosine``,
``binary_polarization_angle``, ``binary_right_ascension``, ``binary_declination_sine``,
``binary_lg_frequency`` (GW frequency in Hz); for a memory step ``memory_lg_strain``,
``memory_epoch`` (MJD), ``memory_polarization_angle``, ``memory_right_ascension`` and
``memory_declination_sine``.  Whatever is not free is held at a fixed value: the
dataset's injected truth by default, or the config's.  The continuous-wave model is a
binary of constant frequency (Earth term, and the pulsar term at the catalogue distances
when asked for); the memory model a sharp step seen at the Earth, whose residual is the
ramp ``F+ h (t - t0)`` after the epoch (:mod:`ptares.physics.waveforms`).
"""

from __future__ import annotations

import warnings

import numpy as np

from ptares.dataset import Dataset, text_of
from ptares.errors import InputError, PhysicsWarning
from ptares.inference import priors as prior_module
from ptares.inference.likelihood import Likelihood, NotPositiveDefinite
from ptares.inference.pulsar_noise import read_pulsar_noise
from ptares.inference.spectral_models import MODELS as SPECTRAL_MODELS
from ptares.inference.parameters import (
    BINARY_QUANTITIES,
    CHROMATIC,
    MEMORY_QUANTITIES,
    COMMON_BEND,
    COMMON_BEND_INDEX,
    COMMON_VARIANCE,
    RED_VARIANCE,
    red_bin,
    spectrum_bin,
    COMMON_AMPLITUDE,
    COMMON_INDEX,
    PER_PULSAR,
    RED_AMPLITUDE,
    RED_INDEX,
    WHITE_JITTER,
    WHITE_QUADRATURE,
    WHITE_SCALE,
    binary,
    memory,
    white_owners,
    for_pulsar,
    is_array_signal,
    quantity,
    split,
)
from ptares.inputs.config import FitSection
from ptares.physics.spectra import coefficient_variance
from ptares.physics.constants import DAY
from ptares.physics.waveforms import MemoryStep, plane_wave_residuals
from ptares.simulation.signals.continuous import Binary, PulsarLayout

__all__ = ["FitModel", "DEFAULT_PRIORS", "binary_frequency_prior", "binary_strain_prior", "memory_strain_prior",
           "memory_epoch_prior"]

#: Default priors by quantity.  Red noise: amplitude and index ranges as used in published
#: array noise analyses (e.g. Agazie et al. 2023, ApJL 951, L10; reference from memory).  The continuous wave's
#: strain and frequency priors come from the data (:func:`binary_strain_prior`,
#: :func:`binary_frequency_prior`); its angles cover their full ranges.
DEFAULT_PRIORS = {
    # the common process's ranges are those of the spectral models refitted from a free spectrum
    **{name: prior_module.Uniform(*bounds) for name, bounds in
       zip((COMMON_AMPLITUDE, COMMON_INDEX, COMMON_BEND, COMMON_BEND_INDEX), SPECTRAL_MODELS["turnover"].ranges)},
    COMMON_VARIANCE: prior_module.Uniform(-20.0, -8.0),  # lg of s^2: coefficient rms from 0.1 ns to 0.1 ms
    RED_VARIANCE: prior_module.Uniform(-20.0, -8.0),
    RED_AMPLITUDE: prior_module.Uniform(-20.0, -11.0),
    RED_INDEX: prior_module.Uniform(0.0, 7.0),
    WHITE_SCALE: prior_module.Uniform(0.1, 5.0),
    WHITE_QUADRATURE: prior_module.Uniform(-9.0, -4.0),
    WHITE_JITTER: prior_module.Uniform(-9.0, -4.0),
    **{amplitude: prior_module.Uniform(-20.0, -11.0) for amplitude, _ in CHROMATIC.values()},
    **{index: prior_module.Uniform(0.0, 7.0) for _, index in CHROMATIC.values()},
    binary("orbital_phase"): prior_module.Uniform(0.0, 2.0 * np.pi),
    binary("inclination_cosine"): prior_module.Uniform(-1.0, 1.0),
    binary("polarization_angle"): prior_module.Uniform(0.0, np.pi),
    binary("right_ascension"): prior_module.Uniform(0.0, 2.0 * np.pi),
    binary("declination_sine"): prior_module.Uniform(-1.0, 1.0),
    memory("polarization_angle"): prior_module.Uniform(0.0, np.pi),
    memory("right_ascension"): prior_module.Uniform(0.0, 2.0 * np.pi),
    memory("declination_sine"): prior_module.Uniform(-1.0, 1.0),
}

#: Values each quantity may take (fixed values and prior supports must lie inside).
VALID = {
    COMMON_AMPLITUDE: (-np.inf, -9.0), RED_AMPLITUDE: (-np.inf, -9.0), binary("lg_strain"): (-np.inf, -9.0),
    COMMON_INDEX: (-10.0, 10.0), RED_INDEX: (-10.0, 10.0), COMMON_VARIANCE: (-np.inf, -2.0), RED_VARIANCE: (-np.inf, -2.0),
    COMMON_BEND: (-12.0, -5.0), COMMON_BEND_INDEX: (0.0, 20.0),
    WHITE_SCALE: (1e-6, 1e3), WHITE_QUADRATURE: (-np.inf, -2.0), WHITE_JITTER: (-np.inf, -2.0),
    **{amplitude: (-np.inf, -9.0) for amplitude, _ in CHROMATIC.values()},
    **{index: (-10.0, 10.0) for _, index in CHROMATIC.values()},
    binary("orbital_phase"): (-1e6, 1e6), binary("inclination_cosine"): (-1.0, 1.0), binary("polarization_angle"): (-1e6, 1e6),
    binary("right_ascension"): (-1e6, 1e6), binary("declination_sine"): (-1.0, 1.0), binary("lg_frequency"): (-10.0, -5.0),
    memory("lg_strain"): (-np.inf, -9.0), memory("epoch"): (15_000.0, 100_000.0), memory("polarization_angle"): (-1e6, 1e6),
    memory("right_ascension"): (-1e6, 1e6), memory("declination_sine"): (-1.0, 1.0),
}

_NAMING = "parameters are named like 'common_lg_amplitude' or 'red_lg_amplitude@PULSAR' (README: Fits)"


def _frequency_range(dataset: Dataset) -> tuple:
    """``(1/T, Nyquist frequency of the finest cadence)`` in Hz; a pulsar's cadence is the median
    interval between its distinct epochs, and the finest is the shortest over the array."""
    cadences = [np.median(np.diff(np.unique(p.mjd))) * 86400.0 for p in dataset.pulsars if len(np.unique(p.mjd)) > 1]
    return 1.0 / dataset.span, 0.5 / min(cadences)


def binary_frequency_prior(dataset: Dataset) -> prior_module.Uniform:
    """Uniform prior on lg f_GW over [1/T, the Nyquist frequency of the finest cadence] (see :func:`_frequency_range`)."""
    low, high = _frequency_range(dataset)
    return prior_module.Uniform(float(np.log10(low)), float(np.log10(high)))


#: Strain prior ends as residual amplitudes: a thousandth of the smallest TOA error, and ten
#: times the largest residual scatter.
STRAIN_FLOOR, STRAIN_CEILING = 1e-3, 10.0


def _largest_scatter(dataset: Dataset) -> float:
    """The largest residual standard deviation of the array's pulsars; the largest TOA error where every residual
    is zero (a schedule checked before it is simulated)."""
    scatter = max(float(np.std(p.residuals)) for p in dataset.pulsars)
    return scatter if scatter > 0 else max(float(np.max(p.errors)) for p in dataset.pulsars)


def _strain_prior(dataset: Dataset, name: str, low_factor: float, high_factor: float) -> prior_module.Uniform:
    """Uniform prior on the lg strain ``name`` of a signal whose residual amplitude is its strain over
    ``factor x frequency`` (times a geometric factor of order one): from the strain whose residuals at the
    lowest frequency 1/T reach :data:`STRAIN_FLOOR` times the smallest quoted TOA error (``low_factor``) to the
    strain whose residuals at the finest cadence's Nyquist frequency reach :data:`STRAIN_CEILING` times the
    largest residual standard deviation (``high_factor``), at most the strain's valid range."""
    low_f, high_f = _frequency_range(dataset)
    smallest_error = min(float(np.min(p.errors)) for p in dataset.pulsars)
    low = np.log10(low_factor * low_f * STRAIN_FLOOR * smallest_error)
    high = min(np.log10(high_factor * high_f * STRAIN_CEILING * _largest_scatter(dataset)), VALID[name][1])
    return prior_module.Uniform(float(low), float(high))


def binary_strain_prior(dataset: Dataset) -> prior_module.Uniform:
    """Uniform prior on lg h0 from binaries that are invisible to binaries that dominate the data: a binary's
    residual amplitude is ``h0 / (2 pi f)`` (PHYSICS.md), so :func:`_strain_prior` with factors 2 pi."""
    return _strain_prior(dataset, binary("lg_strain"), 2.0 * np.pi, 2.0 * np.pi)


def memory_strain_prior(dataset: Dataset) -> prior_module.Uniform:
    """Uniform prior on lg h of a memory step, from steps no array could see to steps that dominate the data.

    A step of strain h leaves a ramp of slope about h: the lower end is the strain whose ramp reaches
    :data:`STRAIN_FLOOR` times the smallest TOA error over the whole span T (factor 1), the upper end the strain
    whose ramp reaches :data:`STRAIN_CEILING` times the largest residual standard deviation within half the finest
    cadence (factor 2 on its Nyquist frequency); see :func:`_strain_prior`.
    """
    return _strain_prior(dataset, memory("lg_strain"), 1.0, 2.0)


def memory_epoch_prior(dataset: Dataset) -> prior_module.Uniform:
    """Uniform prior on the memory step's epoch (MJD) over the array's window."""
    return prior_module.Uniform(float(dataset.start_mjd), float(dataset.start_mjd + dataset.span / DAY))


def _check_value(key: str, value: float, where: str) -> None:
    low, high = VALID[quantity(key)]
    if np.isnan(value) or not (low <= value <= high) or (np.isinf(value) and not np.isinf(low)):
        raise InputError(f"{value} is outside the allowed range [{low:g}, {high:g}]", where)


def _check_support(prior, key: str, where: str) -> None:
    low, high = VALID[quantity(key)]
    bounds = prior_module.support(prior)
    if bounds[0] < low or bounds[1] > high:
        hint = "; give the normal prior 'bounds' inside it" if isinstance(prior, prior_module.Normal) else ""
        raise InputError(f"the prior reaches [{bounds[0]:g}, {bounds[1]:g}], outside the allowed [{low:g}, {high:g}]{hint}",
                         where)


#: Chromatic index of each process where a pulsar records none (PHYSICS.md: 2 for dispersion, 4 for scattering).
CHROMATIC_DEFAULT_INDEX = {"dispersion": 2.0, "scattering": 4.0}


def _chromatic_indices(dataset: Dataset, process: str, section: FitSection) -> np.ndarray:
    """Each pulsar's chromatic index of ``process``: ``[fit] chromatic_indices``', else the injected one, else the
    process's usual one."""
    if process in section.chromatic_indices:
        return np.full(len(dataset.pulsars), float(section.chromatic_indices[process]))
    return np.array([float(p.noise.get(f"{process}_chromatic_index", CHROMATIC_DEFAULT_INDEX[process]))
                     for p in dataset.pulsars])


def _bent_power_law(span: float, harmonics: int, lg_amplitude: float, gamma: float, bend_frequency: float,
                    bend_index: float) -> np.ndarray:
    """Coefficient variances S(f_k) / T of a power law turning over below ``bend_frequency`` (Hz; 0: none),
    zero for a vanishing amplitude."""
    if not np.isfinite(lg_amplitude):
        return np.zeros(harmonics)
    return coefficient_variance(span, harmonics, 10 ** lg_amplitude, gamma, bend_frequency if bend_frequency > 0 else None,
                                bend_index)


def _subset(dataset: Dataset, names) -> Dataset:
    if names is None:
        return dataset
    missing = [n for n in names if n not in dataset.names]
    if missing:
        raise InputError(f"the dataset has no pulsar(s) {', '.join(missing)}", "fit.pulsars")
    if len(names) < 1:
        raise InputError("names no pulsars", "fit.pulsars")
    return dataset.subset(names)


class FitModel:
    """Log prior, log likelihood and log posterior over the free parameters, in the order of :attr:`names`."""

    def __init__(self, dataset: Dataset, section: FitSection):
        dataset = _subset(dataset, section.pulsars)
        self.dataset = dataset
        self.section = section
        pulsars = dataset.names
        injected_red = any(p.noise.get("red_amplitude", 0) > 0 for p in dataset.pulsars)
        self.red_mode = section.red or ("injected" if injected_red else "none")
        gwb = dataset.signals.get("gwb", {})
        self.harmonics = section.harmonics or int(gwb.get("harmonics", 30))
        red_harmonics = int(dataset.signals.get("red", {}).get("harmonics", section.red_harmonics))
        if self.red_mode == "free":
            red_harmonics = section.red_harmonics
        self.chromatic_modes = {}  # process -> "free" or "injected", for the chromatic processes modelled
        for process in CHROMATIC:
            injected_here = any(p.noise.get(f"{process}_amplitude", 0) > 0 for p in dataset.pulsars)
            mode = getattr(section, process) or ("injected" if injected_here else "none")
            if mode != "none":
                self.chromatic_modes[process] = mode
        self.likelihood = Likelihood(
            dataset,
            harmonics=self.harmonics if section.common != "none" else 0,
            red_harmonics=red_harmonics if self.red_mode != "none" else 0,
            correlated=section.common if section.common not in ("uncorrelated", "none") else None,
            chromatic=tuple((process, self._chromatic_harmonics(dataset, process, mode), _chromatic_indices(dataset, process, section))
                            for process, mode in self.chromatic_modes.items()),
        )

        injected_jitter = any(float(v) > 0 for p in dataset.pulsars for k, v in p.noise.items()
                              if k.split(":")[0] == "white_jitter")
        self.jitter_mode = section.jitter or ("injected" if injected_jitter else "none")
        # every parameter the model has, with its default (injected) value
        values = {}
        self._white_owners = [white_owners(p) for p in dataset.pulsars]
        self._by_system = [bool(p.systems) for p in dataset.pulsars]  # white-noise parameters per observing system
        for p, owners in zip(dataset.pulsars, self._white_owners):
            for owner, system in zip(owners, p.systems or [None]):
                def injected(key, default, system=system):  # the system's own value, else the pulsar's
                    return float(p.noise.get(f"{key}:{system}", p.noise.get(key, default)))

                values[for_pulsar(WHITE_SCALE, owner)] = injected("white_scale", 1.0)
                for name, key in ((WHITE_QUADRATURE, "white_quadrature"), (WHITE_JITTER, "white_jitter")):
                    value = injected(key, 0.0)
                    values[for_pulsar(name, owner)] = np.log10(value) if value > 0 else -np.inf
            amplitude = float(p.noise.get("red_amplitude", 0.0))
            values[for_pulsar(RED_AMPLITUDE, p.name)] = np.log10(amplitude) if amplitude > 0 else -np.inf
            values[for_pulsar(RED_INDEX, p.name)] = float(p.noise.get("red_spectral_index", 13.0 / 3.0))
            for process, (amplitude_name, index_name) in CHROMATIC.items():
                amplitude = float(p.noise.get(f"{process}_amplitude", 0.0))
                values[for_pulsar(amplitude_name, p.name)] = np.log10(amplitude) if amplitude > 0 else -np.inf
                values[for_pulsar(index_name, p.name)] = float(p.noise.get(f"{process}_spectral_index", 13.0 / 3.0))
        free = []
        if section.white == "free":
            free += [for_pulsar(q, o) for owners in self._white_owners for o in owners for q in (WHITE_SCALE, WHITE_QUADRATURE)]
        if self.jitter_mode == "free":
            free += [for_pulsar(WHITE_JITTER, o) for owners in self._white_owners for o in owners]
        self.red_spectrum = section.red_spectrum if self.red_mode == "free" else "power_law"
        if self.red_spectrum == "free":  # one variance per frequency per pulsar in place of its power law
            for p in dataset.pulsars:
                amplitude = float(p.noise.get("red_amplitude", 0.0))
                injected = (coefficient_variance(dataset.span, red_harmonics, amplitude,
                                                 float(p.noise.get("red_spectral_index", 13.0 / 3.0)))
                            if amplitude > 0 else np.zeros(red_harmonics))
                for k in range(1, red_harmonics + 1):
                    values[red_bin(k, p.name)] = np.log10(injected[k - 1]) if injected[k - 1] > 0 else -np.inf
                    free.append(red_bin(k, p.name))
        elif self.red_mode == "free":
            free += [for_pulsar(q, n) for n in pulsars for q in (RED_AMPLITUDE, RED_INDEX)]
        for process, mode in self.chromatic_modes.items():
            if mode == "free":
                free += [for_pulsar(q, n) for n in pulsars for q in CHROMATIC[process]]
        if section.common != "none":
            values[COMMON_AMPLITUDE] = np.log10(gwb["amplitude"]) if gwb.get("amplitude", 0) > 0 else -np.inf
            values[COMMON_INDEX] = float(gwb.get("spectral_index", 13.0 / 3.0))
            if section.common_spectrum == "free":  # one variance per frequency in place of the power law
                injected = _bent_power_law(dataset.span, self.harmonics, values[COMMON_AMPLITUDE], values[COMMON_INDEX],
                                           float(gwb.get("bend_frequency", 0.0)), float(gwb.get("bend_index", 2.0)))
                for k in range(1, self.harmonics + 1):
                    values[spectrum_bin(k)] = np.log10(injected[k - 1]) if injected[k - 1] > 0 else -np.inf
                    free.append(spectrum_bin(k))
                del values[COMMON_AMPLITUDE], values[COMMON_INDEX]
            else:
                free += [COMMON_AMPLITUDE, COMMON_INDEX]
            if section.common_spectrum == "turnover":  # the power law divided by 1 + (f_bend / f)^kappa
                values[COMMON_BEND] = float(np.log10(gwb["bend_frequency"])) if "bend_frequency" in gwb else -9.5
                values[COMMON_BEND_INDEX] = float(gwb.get("bend_index", 2.0))
                free += [COMMON_BEND, COMMON_BEND_INDEX]
        self.default_priors = dict(DEFAULT_PRIORS)
        if section.binary:
            self.default_priors[binary("lg_frequency")] = binary_frequency_prior(dataset)
            self.default_priors[binary("lg_strain")] = binary_strain_prior(dataset)
            values.update(self._binary_defaults(dataset, section))
            free += [binary(k) for k in section.binary_free]
        if section.memory:
            self.default_priors[memory("lg_strain")] = memory_strain_prior(dataset)
            self.default_priors[memory("epoch")] = memory_epoch_prior(dataset)
            values.update(self._memory_defaults(dataset, section))
            free += [memory(k) for k in section.memory_free]
        self.injected = {k: v for k, v in values.items() if np.isfinite(v) and self._was_injected(k, values)}

        known = set(values) | set(self.default_priors)
        used = set(free) | {k for k in values if quantity(k) in (COMMON_AMPLITUDE, COMMON_INDEX, WHITE_SCALE, WHITE_QUADRATURE)
                            or is_array_signal(k)}
        if self.red_mode != "none":
            used |= {k for k in values if quantity(k) in (RED_AMPLITUDE, RED_INDEX, RED_VARIANCE)}
        for process in self.chromatic_modes:
            used |= {k for k in values if quantity(k) in CHROMATIC[process]}
        if self.jitter_mode != "none":
            used |= {k for k in values if quantity(k) == WHITE_JITTER}
        self._noise_priors = {}
        if section.pulsar_noise is not None:  # the noise stage's results; [fit] fixed and priors override them
            for name, summary in read_pulsar_noise(section.pulsar_noise, dataset).items():
                if name not in free or quantity(name) not in section.pulsar_noise_quantities:
                    continue
                if section.pulsar_noise_use == "fix":
                    values[name] = summary["median"]
                    free.remove(name)
                else:
                    low, high = prior_module.support(self.default_priors[quantity(name)])
                    self._noise_priors[name] = prior_module.Normal(summary["mean"], max(summary["sd"], 1e-6), low, high)
        for key, value in sorted(section.fixed.items(), key=lambda item: item[0] not in PER_PULSAR):  # all pulsars' first
            targets = [k for k in values if quantity(k) == key and k != key] if key in PER_PULSAR else [key]
            for target in targets:
                if target not in values:
                    raise InputError(f"the model has no parameter {key!r}; {_NAMING}", f"fit.fixed.{key}")
                if target not in used:
                    raise InputError(f"{key!r} is not used by this model (red = {self.red_mode!r}, common = {section.common!r}"
                                     f", chromatic processes: {', '.join(self.chromatic_modes) or 'none'})",
                                     f"fit.fixed.{key}")
                _check_value(target, float(value), f"fit.fixed.{key}")
                values[target] = float(value)
                if target in free:
                    free.remove(target)
        for key in section.priors:
            if key not in known:
                raise InputError(f"the model has no parameter {key!r}; {_NAMING}", f"fit.priors.{key}")
            if key not in free and not any(quantity(f) == key for f in free):
                raise InputError(f"{key!r} is not a free parameter of this model", f"fit.priors.{key}")
        if not free:
            raise InputError("no free parameters: nothing to fit", "fit")
        self.names = free
        self.values = values
        self.priors = [self._prior(name) for name in free]
        # names the log posterior looks up on every call, formatted once
        self._spectrum_bins = [spectrum_bin(k) for k in range(1, self.harmonics + 1)]
        self._red_bins = [[red_bin(k, n) for k in range(1, self.likelihood.red_harmonics + 1)] for n in dataset.names]
        self._times = [q.times for q in self.likelihood.pulsars]  # s from the dataset's start, per pulsar
        self._layout = PulsarLayout.of(  # catalogue distances: the fit cannot know the true ones
            [p.position for p in dataset.pulsars], [p.distance for p in dataset.pulsars], self._times)
        for name, prior in zip(free, self.priors):
            key = name if name in section.priors else quantity(name)
            _check_support(prior, name, f"fit.priors.{key}")
        self._warned = False

    @staticmethod
    def _was_injected(name: str, values: dict) -> bool:
        """A spectral index counts as injected only where its process was (its amplitude is finite)."""
        head, pulsar = split(name)
        if head == RED_INDEX:
            return bool(np.isfinite(values[for_pulsar(RED_AMPLITUDE, pulsar)]))
        for amplitude_name, index_name in CHROMATIC.values():
            if head == index_name:
                return bool(np.isfinite(values[for_pulsar(amplitude_name, pulsar)]))
        if head == COMMON_INDEX:
            return bool(np.isfinite(values.get(COMMON_AMPLITUDE, -np.inf)))
        return True

    def common_variances(self, v: dict):
        """The common process's coefficient variances (harmonics,) at parameter values ``v`` where its spectrum is
        not a plain power law (a free spectrum, a turnover), else None."""
        if self.section.common == "none" or self.section.common_spectrum == "power_law":
            return None
        if self.section.common_spectrum == "free":
            return 10.0 ** np.array([v[name] for name in self._spectrum_bins])
        return _bent_power_law(self.dataset.span, self.harmonics, v[COMMON_AMPLITUDE], v[COMMON_INDEX],
                               10 ** v[COMMON_BEND], v[COMMON_BEND_INDEX])

    def _chromatic_harmonics(self, dataset, process: str, mode: str) -> int:
        """Frequencies of a chromatic process: the injected ones when held at the injection, else ``[fit]``'s."""
        injected = dataset.signals.get(process, {}).get("harmonics")
        return int(injected) if mode == "injected" and injected is not None else self.section.chromatic_harmonics

    def _signal_values(self, injected: dict, configured: dict, quantities, free, name_of, what: str) -> dict:
        """Values of a deterministic signal's parameters (``name_of(quantity)``): the ``injected`` ones (quantity ->
        value, from the dataset; may be empty), overridden by ``configured`` (``[fit] <what>_values``), and for
        free quantities given by neither the median of their default prior; a fixed quantity given by neither is
        an error."""
        values = {name_of(k): v for k, v in injected.items()}
        for key, value in configured.items():  # keys checked by FitSection
            _check_value(name_of(key), float(value), f"fit.{what}_values.{key}")
            values[name_of(key)] = float(value)
        missing = [k for k in quantities if name_of(k) not in values and k not in free]
        if missing:
            source = "source" if what == "binary" else "memory step"
            raise InputError(f"needs values for {', '.join(missing)} (no injected {source} to take them from)",
                             f"fit.{what}_values")
        for k in free:
            values.setdefault(name_of(k), float(self.default_priors[name_of(k)].ppf(0.5)))
        return values

    def _binary_defaults(self, dataset, section):
        """Binary values: the config's, else the dataset's first injected binary (``[[binary]]``)."""
        sources = dataset.signals.get("binary", {}).get("sources")
        injected = {}
        if sources is not None and len(sources):
            s = sources[0]
            injected = {"lg_strain": float(np.log10(s["strain"])), "orbital_phase": float(s["phase"]),
                        "inclination_cosine": float(np.cos(s["inclination"])), "polarization_angle": float(s["polarization"]),
                        "right_ascension": float(s["ra"]), "declination_sine": float(np.sin(s["dec"])),
                        "lg_frequency": float(np.log10(s["frequency"]))}
        return self._signal_values(injected, section.binary_values, BINARY_QUANTITIES, section.binary_free, binary,
                                   "binary")

    def _memory_defaults(self, dataset, section):
        """Memory-step values: the config's, else the dataset's first injected memory step (``[[wave]]``)."""
        sources = dataset.signals.get("wave", {}).get("sources")
        steps = [] if sources is None else [s for s in sources if text_of(s["shape"]) == "memory"]
        injected = {}
        if steps:
            s = steps[0]
            injected = {"lg_strain": float(np.log10(s["amplitude"])), "epoch": float(s["epoch"]),
                        "polarization_angle": float(s["polarization"]), "right_ascension": float(s["ra"]),
                        "declination_sine": float(np.sin(s["dec"]))}
        return self._signal_values(injected, section.memory_values, MEMORY_QUANTITIES, section.memory_free, memory,
                                   "memory")

    def _prior(self, name: str):
        """The configured prior of this parameter, else of its quantity, else the noise stage's, else the default."""
        kind = quantity(name)
        for key in (name, kind):
            if key in self.section.priors:
                return prior_module.from_config(self.section.priors[key])
        if name in self._noise_priors:
            return self._noise_priors[name]
        return self.default_priors[kind]

    @property
    def ndim(self) -> int:
        return len(self.names)

    # --- densities --------------------------------------------------------------
    def log_prior(self, x) -> float:
        return float(sum(prior.log_pdf(v) for prior, v in zip(self.priors, x)))

    def sample_prior(self, rng, count: int) -> np.ndarray:
        return np.column_stack([prior.sample(rng, count) for prior in self.priors])

    def parameters(self, x) -> dict:
        """All parameter values, the free ones from ``x``."""
        values = dict(self.values)
        values.update(zip(self.names, map(float, x)))
        return values

    def _signal(self, v):
        """Residuals of the deterministic signals (a binary, a memory step) at values ``v``, per pulsar, or None."""
        parts = [part for part in (self._binary_signal(v), self._memory_signal(v)) if part is not None]
        if len(parts) < 2:
            return parts[0] if parts else None
        return [a + b for a, b in zip(*parts)]

    def _memory_signal(self, v):
        if not self.section.memory:
            return None
        step = MemoryStep(10 ** v[memory("lg_strain")], (v[memory("epoch")] - self.dataset.start_mjd) * DAY)
        dec = float(np.arcsin(np.clip(v[memory("declination_sine")], -1, 1)))
        return plane_wave_residuals(step, self._times, self._layout.positions, None, v[memory("right_ascension")], dec,
                                    v[memory("polarization_angle")], pulsar_term=False)

    def _binary_signal(self, v):
        if not self.section.binary:
            return None
        source = Binary(
            name="fit", ra=v[binary("right_ascension")],
            dec=float(np.arcsin(np.clip(v[binary("declination_sine")], -1, 1))),
            frequency=10 ** v[binary("lg_frequency")], strain=10 ** v[binary("lg_strain")],
            inclination=float(np.arccos(np.clip(v[binary("inclination_cosine")], -1, 1))),
            polarization=v[binary("polarization_angle")], phase=v[binary("orbital_phase")], pulsar_term=self.section.binary_pulsar_term,
        )
        return self._layout.residuals([source])

    def physical(self, x, values: dict | None = None) -> dict:
        """The likelihood's arguments at ``x``: per-pulsar ``white_scale``, ``white_quadrature`` (s),
        ``red_amplitude``, ``red_spectral_index``, the common ``amplitude`` and ``gamma``, and per modelled
        chromatic process its per-pulsar amplitudes and spectral indices (``chromatic``); with observing
        systems recorded, each pulsar's white values are arrays over its systems, and ``white_jitter`` (s)
        is given when jitter is modelled."""
        v = self.parameters(x) if values is None else values
        names = self.dataset.names

        def white(quantity_name, transform=float):  # per pulsar a number, or an array over its observing systems
            values = [np.array([transform(v[for_pulsar(quantity_name, o)]) for o in owners]) if by_system
                      else transform(v[for_pulsar(quantity_name, owners[0])])
                      for owners, by_system in zip(self._white_owners, self._by_system)]
            return values if any(self._by_system) else np.array(values)

        def power(value):
            return 10.0 ** value

        return dict(
            white_scale=white(WHITE_SCALE),
            white_quadrature=white(WHITE_QUADRATURE, power),
            white_jitter=white(WHITE_JITTER, power) if self.jitter_mode != "none" else None,
            red_amplitude=np.array([10 ** v[for_pulsar(RED_AMPLITUDE, n)] for n in names]),
            red_spectral_index=np.array([v[for_pulsar(RED_INDEX, n)] for n in names]),
            amplitude=10 ** v[COMMON_AMPLITUDE] if COMMON_AMPLITUDE in v else 0.0,
            gamma=v.get(COMMON_INDEX, 13.0 / 3.0),
            common_variances=self.common_variances(v),
            red_variances=(10.0 ** np.array([[v[name] for name in row] for row in self._red_bins])
                           if self.red_spectrum == "free" else None),
            chromatic={process: (np.array([10 ** v[for_pulsar(CHROMATIC[process][0], n)] for n in names]),
                                 np.array([v[for_pulsar(CHROMATIC[process][1], n)] for n in names]))
                       for process in self.chromatic_modes},
        )

    def log_likelihood(self, x) -> float:
        return self.log_likelihood_at(self.parameters(x))

    def log_likelihood_at(self, values: dict) -> float:
        """Log likelihood at a full set of parameter ``values`` (every name of :attr:`values`)."""
        value = self.likelihood(**self.physical(None, values), signal=self._signal(values))
        if np.isnan(value):
            raise ArithmeticError(f"the likelihood is NaN at {({k: values[k] for k in self.names})}")
        return value

    def __call__(self, x) -> float:
        """Log posterior (up to a constant); ``-inf`` outside the prior or where a covariance is not positive definite."""
        prior = self.log_prior(x)
        if not np.isfinite(prior):
            return -np.inf
        try:
            return prior + self.log_likelihood(x)
        except NotPositiveDefinite as exc:
            if not self._warned:
                self._warned = True
                warnings.warn(f"likelihood: {exc} at {dict(zip(self.names, np.round(x, 4)))}; "
                              "such points get zero probability", PhysicsWarning, stacklevel=2)
            return -np.inf

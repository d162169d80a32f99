"""The model ``ptares fit`` samples: parameters, priors and the log posterior.

Parameters are named ``gwb_log10_A`` and ``gwb_gamma`` (common process),
``<pulsar>_red_log10_A``, ``<pulsar>_red_gamma``, ``<pulsar>_white_scale``,
``<pulsar>_white_log10_quadrature`` (log10 of seconds), and
``cw_log10_h0``, ``cw_phase`` (orbital phase at the first epoch),
``cw_cos_inclination``, ``cw_polarization``, ``cw_ra``, ``cw_sin_dec``,
``cw_log10_frequency`` (GW frequency in Hz).  Whatever is not free is held at a
fixed value: the dataset's injected truth by default, or the config's.  The
continuous-wave model is a binary of constant frequency (Earth term, and the
pulsar term at the catalogue distances when asked for).
"""

from __future__ import annotations

import warnings

import numpy as np

from ptares.dataset import Dataset
from ptares.errors import InputError, PhysicsWarning
from ptares.inference import priors as prior_module
from ptares.inference.likelihood import Likelihood, NotPositiveDefinite
from ptares.inputs.config import FitSection
from ptares.simulation.signals.continuous import Binary, PulsarLayout

__all__ = ["FitModel", "DEFAULT_PRIORS"]

#: Default priors by generic parameter name.
DEFAULT_PRIORS = {
    "gwb_log10_A": prior_module.Uniform(-18.0, -12.0),
    "gwb_gamma": prior_module.Uniform(0.0, 7.0),
    "red_log10_A": prior_module.Uniform(-20.0, -11.0),
    "red_gamma": prior_module.Uniform(0.0, 7.0),
    "white_scale": prior_module.Uniform(0.1, 5.0),
    "white_log10_quadrature": prior_module.Uniform(-9.0, -4.0),
    "cw_log10_h0": prior_module.Uniform(-18.0, -11.0),
    "cw_phase": prior_module.Uniform(0.0, 2.0 * np.pi),
    "cw_cos_inclination": prior_module.Uniform(-1.0, 1.0),
    "cw_polarization": prior_module.Uniform(0.0, np.pi),
    "cw_ra": prior_module.Uniform(0.0, 2.0 * np.pi),
    "cw_sin_dec": prior_module.Uniform(-1.0, 1.0),
    "cw_log10_frequency": prior_module.Uniform(-9.0, -7.0),
}
_PER_PULSAR = ("red_log10_A", "red_gamma", "white_scale", "white_log10_quadrature")

#: Values each generic parameter may take (fixed values and prior supports must lie inside).
VALID = {
    "gwb_log10_A": (-np.inf, -9.0), "red_log10_A": (-np.inf, -9.0), "cw_log10_h0": (-np.inf, -9.0),
    "gwb_gamma": (-10.0, 10.0), "red_gamma": (-10.0, 10.0),
    "white_scale": (1e-6, 1e3), "white_log10_quadrature": (-np.inf, -2.0),
    "cw_phase": (-1e6, 1e6), "cw_cos_inclination": (-1.0, 1.0), "cw_polarization": (-1e6, 1e6),
    "cw_ra": (-1e6, 1e6), "cw_sin_dec": (-1.0, 1.0), "cw_log10_frequency": (-10.0, -5.0),
}


def generic(name: str) -> str:
    """``RP001_red_gamma`` -> ``red_gamma``; other names unchanged."""
    return next((g for g in _PER_PULSAR if name.endswith("_" + g)), name)


def _check_value(key: str, value: float, where: str) -> None:
    low, high = VALID[generic(key)]
    if np.isnan(value) or not (low <= value <= high) or (np.isinf(value) and not np.isinf(low)):
        raise InputError(f"{value} is outside the allowed range [{low:g}, {high:g}]", where)


def _check_support(prior, key: str, where: str) -> None:
    low, high = VALID[generic(key)]
    bounds = (getattr(prior, "low", -np.inf), getattr(prior, "high", np.inf))
    if bounds[0] < low or bounds[1] > high:
        raise InputError(f"the prior reaches [{bounds[0]:g}, {bounds[1]:g}], outside the allowed [{low:g}, {high:g}]", where)
_CW = ("log10_h0", "phase", "cos_inclination", "polarization", "ra", "sin_dec", "log10_frequency")


def _subset(dataset: Dataset, names) -> Dataset:
    if names is None:
        return dataset
    missing = [n for n in names if n not in dataset.names]
    if missing:
        raise InputError(f"the dataset has no pulsar(s) {', '.join(missing)}", "fit.pulsars")
    if len(names) < 1:
        raise InputError("names no pulsars", "fit.pulsars")
    return Dataset(
        pulsars=[dataset.pulsar(n) for n in names], config=dataset.config, seed=dataset.seed,
        ptares_version=dataset.ptares_version, created=dataset.created, start_mjd=dataset.start_mjd,
        span=dataset.span, signals=dataset.signals,
    )


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
        self.components = section.components or int(gwb.get("components", 30))
        red_components = int(dataset.signals.get("red", {}).get("components", section.red_components))
        if self.red_mode == "free":
            red_components = section.red_components
        self.likelihood = Likelihood(
            dataset,
            components=self.components if section.common != "none" else 0,
            red_components=red_components if self.red_mode != "none" else 0,
            correlated=section.common == "hellings-downs",
        )

        # every parameter the model has, with its default (injected) value
        values = {}
        for p in dataset.pulsars:
            values[f"{p.name}_white_scale"] = float(p.noise.get("white_scale", 1.0))
            quadrature = float(p.noise.get("white_quadrature", 0.0))
            values[f"{p.name}_white_log10_quadrature"] = np.log10(quadrature) if quadrature > 0 else -np.inf
            amplitude = float(p.noise.get("red_amplitude", 0.0))
            values[f"{p.name}_red_log10_A"] = np.log10(amplitude) if amplitude > 0 else -np.inf
            values[f"{p.name}_red_gamma"] = float(p.noise.get("red_gamma", 13.0 / 3.0))
        free = []
        if section.white == "free":
            free += [f"{n}_white_{k}" for n in pulsars for k in ("scale", "log10_quadrature")]
        if self.red_mode == "free":
            free += [f"{n}_red_{k}" for n in pulsars for k in ("log10_A", "gamma")]
        if section.common != "none":
            values["gwb_log10_A"] = np.log10(gwb["amplitude"]) if gwb.get("amplitude", 0) > 0 else -np.inf
            values["gwb_gamma"] = float(gwb.get("gamma", 13.0 / 3.0))
            free += ["gwb_log10_A", "gwb_gamma"]
        if section.cw:
            values.update(self._cw_defaults(dataset, section))
            free += [f"cw_{k}" for k in section.cw_free]
        self.injected = {k: v for k, v in values.items() if np.isfinite(v)}

        known = set(values) | set(DEFAULT_PRIORS)
        used = set(free) | {k for k in values if k.startswith(("gwb_", "cw_")) or k.endswith(("_white_scale", "_white_log10_quadrature"))}
        if self.red_mode != "none":
            used |= {k for k in values if k.endswith(("_red_log10_A", "_red_gamma"))}
        for key, value in section.fixed.items():
            targets = [k for k in values if generic(k) == key and k != key] if key in _PER_PULSAR else [key]
            for target in targets:
                if target not in values:
                    raise InputError(f"the model has no parameter {key!r}", f"fit.fixed.{key}")
                if target not in used:
                    raise InputError(f"{key!r} is not used by this model (red = {self.red_mode!r}, common = {section.common!r})",
                                     f"fit.fixed.{key}")
                _check_value(target, float(value), f"fit.fixed.{key}")
                values[target] = float(value)
                if target in free:
                    free.remove(target)
        for key in section.priors:
            if key not in known:
                raise InputError(f"the model has no parameter {key!r}", f"fit.priors.{key}")
            if key not in free and not any(f.endswith("_" + key) for f in free):
                raise InputError(f"{key!r} is not a free parameter of this model", f"fit.priors.{key}")
        if not free:
            raise InputError("no free parameters: nothing to fit", "fit")
        self.names = free
        self.values = values
        self.priors = [self._prior(name) for name in free]
        self._layout = PulsarLayout.of(  # catalogue distances: the fit cannot know the true ones
            [p.position for p in dataset.pulsars], [p.distance for p in dataset.pulsars],
            [q.times for q in self.likelihood.pulsars],
        )
        for name, prior in zip(free, self.priors):
            key = name if name in section.priors else generic(name)
            _check_support(prior, name, f"fit.priors.{key}")
        self._warned = False

    @staticmethod
    def _cw_defaults(dataset, section):
        sources = dataset.signals.get("cw", {}).get("sources")
        values = {}
        if sources is not None and len(sources):
            s = sources[0]
            values = {
                "cw_log10_h0": float(np.log10(s["strain"])),
                "cw_phase": float(s["phase"]),
                "cw_cos_inclination": float(np.cos(s["inclination"])),
                "cw_polarization": float(s["polarization"]),
                "cw_ra": float(s["ra"]),
                "cw_sin_dec": float(np.sin(s["dec"])),
                "cw_log10_frequency": float(np.log10(s["frequency"])),
            }
        for key, value in section.cw_values.items():
            if key not in _CW:
                raise InputError(f"the continuous-wave model has no parameter {key!r}", f"fit.cw_values.{key}")
            values[f"cw_{key}"] = float(value)
        missing = [k for k in _CW if f"cw_{k}" not in values and k not in section.cw_free]
        if missing:
            raise InputError(f"needs values for {', '.join(missing)} (no injected source to take them from)", "fit.cw_values")
        for k in section.cw_free:
            values.setdefault(f"cw_{k}", float(DEFAULT_PRIORS[f"cw_{k}"].ppf(0.5)))
        return values

    def _prior(self, name: str):
        if name in self.section.priors:
            return prior_module.from_config(self.section.priors[name])
        kind = generic(name)
        if kind in self.section.priors:
            return prior_module.from_config(self.section.priors[kind])
        return DEFAULT_PRIORS[kind]

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
        if not self.section.cw:
            return None
        binary = Binary(
            name="fit", ra=v["cw_ra"], dec=float(np.arcsin(np.clip(v["cw_sin_dec"], -1, 1))),
            frequency=10 ** v["cw_log10_frequency"], strain=10 ** v["cw_log10_h0"],
            inclination=float(np.arccos(np.clip(v["cw_cos_inclination"], -1, 1))), polarization=v["cw_polarization"],
            phase=v["cw_phase"], pulsar_term=self.section.cw_pulsar_term,
        )
        return self._layout.residuals([binary])

    def log_likelihood(self, x) -> float:
        v = self.parameters(x)
        names = self.dataset.names
        value = self.likelihood(
            white_scale=np.array([v[f"{n}_white_scale"] for n in names]),
            white_quadrature=np.array([10 ** v[f"{n}_white_log10_quadrature"] for n in names]),
            red_amplitude=np.array([10 ** v[f"{n}_red_log10_A"] for n in names]),
            red_gamma=np.array([v[f"{n}_red_gamma"] for n in names]),
            amplitude=10 ** v["gwb_log10_A"] if "gwb_log10_A" in v else 0.0,
            gamma=v.get("gwb_gamma", 13.0 / 3.0),
            signal=self._signal(v),
        )
        if np.isnan(value):
            raise ArithmeticError(f"the likelihood is NaN at {dict(zip(self.names, x))}")
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

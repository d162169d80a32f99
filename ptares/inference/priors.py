"""Prior distributions of fit parameters: uniform, log-uniform, uniform in the value of an lg
parameter, and (truncated) normal.

Each prior gives its log density (``-inf`` outside its support), draws from
itself, and its support.  Built from the config's ``{uniform = [...]}``,
``{log_uniform = [...]}``, ``{uniform_in_value = [...]}`` or
``{normal = [mean, sd], bounds = [...]}`` tables.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import cached_property

import numpy as np
from scipy import stats

__all__ = ["Uniform", "LogUniform", "UniformInValue", "Normal", "from_config", "support"]


@dataclass(frozen=True)
class Uniform:
    low: float
    high: float

    def log_pdf(self, x: float) -> float:
        return -np.log(self.high - self.low) if self.low <= x <= self.high else -np.inf

    def sample(self, rng, size):
        return rng.uniform(self.low, self.high, size)

    def ppf(self, q):
        return self.low + q * (self.high - self.low)


@dataclass(frozen=True)
class LogUniform:
    low: float
    high: float

    def log_pdf(self, x: float) -> float:
        if not self.low <= x <= self.high:
            return -np.inf
        return -np.log(x) - np.log(np.log(self.high / self.low))

    def sample(self, rng, size):
        return np.exp(rng.uniform(np.log(self.low), np.log(self.high), size))

    def ppf(self, q):
        return self.low * (self.high / self.low) ** q


@dataclass(frozen=True)
class UniformInValue:
    """For an lg parameter x (``common_lg_amplitude``): uniform in 10^x between 10^low and 10^high, so the density
    of x is ln(10) 10^x / (10^high - 10^low).  The prior upper limits are usually quoted with (see
    :mod:`ptares.inference.upper_limits`)."""

    low: float
    high: float

    def log_pdf(self, x: float) -> float:
        if not self.low <= x <= self.high:
            return -np.inf
        return float(np.log(np.log(10.0)) + (x - self.high) * np.log(10.0) - np.log1p(-10.0 ** (self.low - self.high)))

    def sample(self, rng, size):
        return self.ppf(rng.uniform(0.0, 1.0, size))

    def ppf(self, q):
        return self.high + np.log10(10.0 ** (self.low - self.high) + np.asarray(q) * (1.0 - 10.0 ** (self.low - self.high)))


@dataclass(frozen=True)
class Normal:
    mean: float
    sd: float
    low: float = -np.inf
    high: float = np.inf

    def _distribution(self):
        return stats.truncnorm((self.low - self.mean) / self.sd, (self.high - self.mean) / self.sd, self.mean, self.sd)

    @cached_property
    def _log_norm(self) -> float:
        """Log normalisation of the truncated density (computed once; log_pdf is called per step)."""
        mass = stats.norm.cdf(self.high, self.mean, self.sd) - stats.norm.cdf(self.low, self.mean, self.sd)
        return -np.log(self.sd * np.sqrt(2.0 * np.pi) * mass)

    def log_pdf(self, x: float) -> float:
        if not self.low <= x <= self.high:
            return -np.inf
        return self._log_norm - 0.5 * ((x - self.mean) / self.sd) ** 2

    def sample(self, rng, size):
        return self._distribution().rvs(size=size, random_state=rng)

    def ppf(self, q):
        return self._distribution().ppf(q)


def support(prior) -> tuple:
    """``(low, high)``: where a prior's density is not zero (infinite ends for an untruncated normal)."""
    return float(getattr(prior, "low", -np.inf)), float(getattr(prior, "high", np.inf))


def from_config(prior) -> object:
    """A prior object from a validated :class:`ptares.inputs.config.Prior`."""
    if prior.uniform is not None:
        return Uniform(*prior.uniform)
    if prior.log_uniform is not None:
        return LogUniform(*prior.log_uniform)
    if prior.uniform_in_value is not None:
        return UniformInValue(*prior.uniform_in_value)
    low, high = prior.bounds if prior.bounds is not None else (-np.inf, np.inf)
    return Normal(prior.normal[0], prior.normal[1], low, high)

"""Prior distributions of fit parameters: uniform, log-uniform and (truncated) normal.

Each prior gives its log density (``-inf`` outside its support), draws from
itself, and its support.  Built from the config's ``{uniform = [...]}``,
``{log_uniform = [...]}`` or ``{normal = [mean, sd], bounds = [...]}`` tables.
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import cached_property

import numpy as np
from scipy import stats

__all__ = ["Uniform", "LogUniform", "Normal", "from_config"]


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


def from_config(prior) -> object:
    """A prior object from a validated :class:`ptares.inputs.config.Prior`."""
    if prior.uniform is not None:
        return Uniform(*prior.uniform)
    if prior.log_uniform is not None:
        return LogUniform(*prior.log_uniform)
    low, high = prior.bounds if prior.bounds is not None else (-np.inf, np.inf)
    return Normal(prior.normal[0], prior.normal[1], low, high)

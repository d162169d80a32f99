"""Bayes factors of a correlated common process against an uncorrelated one, by reweighting.

The two models share every parameter and prior; they differ only in the correlation of the
common process between pulsars.  With equal priors the Bayes factor is the posterior mean of
the likelihood ratio under the uncorrelated model (Hourihane et al. 2023, arXiv:2212.06276;
PHYSICS.md, "Bayes factors by reweighting"):
``B = E[L_pattern(theta) / L_uncorrelated(theta)]`` over ``theta ~ p_U(theta | data)``.
From ``n`` independent draws with weights ``w_i = L_pattern / L_U``:
``ln B = ln mean(w)``, its standard error ``sd(w) / (sqrt(n) mean(w))`` (delta method), and
the effective sample size ``(sum w)^2 / sum w^2``.  The same weights turn the draws into
draws of the correlated model's posterior.  Reweighting is unreliable when a few draws carry
the weight (small effective sample size): the correlated posterior then lies where the
uncorrelated one has few draws.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.special import logsumexp

__all__ = ["Reweighting", "reweight", "independent_draws", "weighted_quantiles", "weighted_summary"]


@dataclass(frozen=True)
class Reweighting:
    """The Bayes factor of one pattern against the uncorrelated model, from the ``log_weights``
    (ln L_pattern - ln L_U) of independent draws; everything else follows from them."""

    log_weights: np.ndarray

    @property
    def draws(self) -> int:
        return int(self.log_weights.size)

    @property
    def _scaled(self) -> np.ndarray:
        """``w / max w``: no overflow."""
        return np.exp(self.log_weights - self.log_weights.max())

    @property
    def ln_bayes_factor(self) -> float:
        return float(np.log(self._scaled.mean()) + self.log_weights.max())

    @property
    def ln_bayes_factor_error(self) -> float:
        """Standard error of ln mean(w): ``sd(w) / (sqrt(n) mean(w))`` (delta method)."""
        scaled = self._scaled
        return float(scaled.std(ddof=1) / (np.sqrt(scaled.size) * scaled.mean()))

    @property
    def effective_samples(self) -> float:
        scaled = self._scaled
        return float(scaled.sum() ** 2 / np.sum(scaled**2))

    @property
    def efficiency(self) -> float:
        """Effective samples per draw, between 1/n and 1."""
        return self.effective_samples / self.draws

    @property
    def weights(self) -> np.ndarray:
        """Weights normalised to sum to one."""
        return np.exp(self.log_weights - logsumexp(self.log_weights))


def reweight(log_weights) -> Reweighting:
    """ln B, its standard error and the effective sample size from independent draws' log weights."""
    log_weights = np.asarray(log_weights, dtype=float)
    if log_weights.ndim != 1 or log_weights.size < 2 or not np.all(np.isfinite(log_weights)):
        raise ValueError("reweighting needs at least two finite log weights")
    return Reweighting(log_weights)


def independent_draws(chain: np.ndarray, burn: int, step: int, count: int, rng: np.random.Generator) -> np.ndarray:
    """At most ``count`` draws (draws, parameters) from ``chain`` (steps, chains, parameters): after ``burn``,
    every ``step``-th step of every chain, then an even random subset."""
    draws = chain[burn::step].reshape(-1, chain.shape[-1])
    if draws.shape[0] > count:
        draws = draws[np.sort(rng.choice(draws.shape[0], count, replace=False))]
    return draws


def weighted_quantiles(values: np.ndarray, weights: np.ndarray, quantiles) -> np.ndarray:
    """Quantiles of ``values`` under normalised ``weights`` (linear in the cumulative weight at each value's midpoint)."""
    order = np.argsort(values)
    values, weights = values[order], weights[order]
    cumulative = np.cumsum(weights) - 0.5 * weights
    return np.interp(quantiles, cumulative / weights.sum(), values)


def weighted_summary(draws: np.ndarray, names, weights: np.ndarray, effective_samples: float, injected: dict) -> dict:
    """Per parameter ``median``, ``interval68``, ``interval95``, ``effective_samples`` (of the
    weights, shared by all parameters) and ``injected``, in the form of ``posterior.json``."""
    summary = {}
    for i, name in enumerate(names):
        q = weighted_quantiles(draws[:, i], weights, [0.5, 0.15865, 0.84135, 0.025, 0.975])
        summary[name] = {
            "median": float(q[0]),
            "interval68": [float(q[1]), float(q[2])],
            "interval95": [float(q[3]), float(q[4])],
            "effective_samples": float(effective_samples),
            **({"injected": injected[name]} if name in injected else {}),
        }
    return summary

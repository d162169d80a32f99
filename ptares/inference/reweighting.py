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

__all__ = ["Reweighting", "reweight", "Bridge", "bridge", "independent_draws", "weighted_quantiles", "weighted_summary"]


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


@dataclass(frozen=True)
class Bridge:
    """The Bayes factor of one pattern against the uncorrelated model from draws of both posteriors
    (bridge sampling), with its standard error and how many draws of each side carry it."""

    ln_bayes_factor: float
    ln_bayes_factor_error: float
    effective_correlated: float  #: (sum g)^2 / sum g^2 of the correlated posterior's draws' bridge terms
    effective_uncorrelated: float  #: the same for the uncorrelated posterior's draws
    draws_correlated: int
    draws_uncorrelated: int
    iterations: int

    @property
    def effective_samples(self) -> float:
        """The smaller side's effective samples: the bridge is only as good as its thinner end."""
        return min(self.effective_correlated, self.effective_uncorrelated)


def _effective(log_terms: np.ndarray) -> float:
    scaled = np.exp(log_terms - log_terms.max())
    return float(scaled.sum() ** 2 / np.sum(scaled**2))


def _relative_variance(log_terms: np.ndarray) -> float:
    """var(t) / (n mean(t)^2), the variance of ln mean(t) by the delta method, from ln t."""
    scaled = np.exp(log_terms - log_terms.max())
    return float(scaled.var(ddof=1) / (scaled.size * scaled.mean() ** 2))


def bridge(correlated_log_ratios, uncorrelated_log_ratios, start: float = 0.0, tolerance: float = 1e-10,
           max_iterations: int = 1000) -> Bridge:
    """ln B = ln(Z_pattern / Z_U) by the optimal bridge (Meng & Wong 1996, Statistica Sinica 6, 831).

    Both arguments are ``ln L_pattern - ln L_U`` at independent draws, of the correlated posterior
    (n1) and of the uncorrelated one (n2); with equal priors these are the log ratios of the two
    unnormalised posteriors.  With ``s_i = n_i / (n1 + n2)`` the fixed point of
    ``r = mean_U[w / (s1 w + s2 r)] / mean_pattern[1 / (s1 w + s2 r)]`` is iterated in logs from
    ``exp(start)``; its standard error is ``var(f)/(n2 mean(f)^2) + var(g)/(n1 mean(g)^2)`` for the
    two means' terms f and g (delta method for independent draws; Frühwirth-Schnatter 2004,
    Econometrics J. 7, 143).  Unlike reweighting one posterior, the bridge needs only that the two
    posteriors overlap, not that one covers the other.
    """
    one = np.asarray(correlated_log_ratios, dtype=float)
    two = np.asarray(uncorrelated_log_ratios, dtype=float)
    for values in (one, two):
        if values.ndim != 1 or values.size < 2 or not np.all(np.isfinite(values)):
            raise ValueError("bridge sampling needs at least two finite log ratios from each posterior")
    log_s1, log_s2 = np.log(one.size / (one.size + two.size)), np.log(two.size / (one.size + two.size))

    def terms(log_r):
        """ln of the bridge's terms: f = w / (s1 w + s2 r) at the uncorrelated draws, g = 1 / (s1 w + s2 r) at the others."""
        return two - np.logaddexp(log_s1 + two, log_s2 + log_r), -np.logaddexp(log_s1 + one, log_s2 + log_r)

    log_r = float(start)
    for iteration in range(1, max_iterations + 1):
        numerator, denominator = terms(log_r)
        updated = float(logsumexp(numerator) - np.log(numerator.size) - logsumexp(denominator) + np.log(denominator.size))
        converged = abs(updated - log_r) < tolerance
        log_r = updated
        if converged:
            break
    numerator, denominator = terms(log_r)
    variance = _relative_variance(numerator) + _relative_variance(denominator)
    return Bridge(log_r, float(np.sqrt(variance)), _effective(denominator), _effective(numerator), int(one.size),
                  int(two.size), iteration)


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

"""When is a chain long enough?  One rule for every sampler, with its numbers.

Per parameter: the integrated autocorrelation time ``tau`` (Sokal's automatic
window, as emcee computes it; Goodman & Weare 2010), the effective sample size
``chains x (steps - burn) / tau``, and for samplers whose chains are independent
the split R-hat (Gelman et al. 2013, *Bayesian Data Analysis*, 3rd ed., sec. 11.4).
A run has converged when

* it is longer than ``autocorr_factor`` times the longest ``tau``, and that
  estimate has settled (changed by under 1% since the previous check);
* every parameter has at least ``effective_samples`` effective draws after burn-in;
* where chains are independent, every split R-hat is below :data:`RHAT_LIMIT`.

The same numbers give the progress bar its length: the steps the rule still asks
for at the current ``tau``, not the maximum step count.
"""

from __future__ import annotations

from dataclasses import dataclass

import emcee
import numpy as np

__all__ = ["RHAT_LIMIT", "Convergence", "autocorr_times", "split_rhat", "default_burn", "assess", "steps_needed"]

#: Largest split R-hat accepted (Vehtari et al. 2021, Bayesian Analysis 16, 667: "R-hat < 1.01").
RHAT_LIMIT = 1.01


def autocorr_times(chain: np.ndarray) -> np.ndarray:
    """Integrated autocorrelation time (steps) of each parameter of a (steps, chains, parameters) array.

    NaN where the chain is too short or stuck for an estimate.
    """
    if chain.shape[0] < 2:
        return np.full(chain.shape[-1], np.nan)
    with np.errstate(invalid="ignore", divide="ignore"):
        return emcee.autocorr.integrated_time(chain, tol=0, quiet=True)


def split_rhat(chain: np.ndarray) -> np.ndarray:
    """Split R-hat of each parameter: every chain cut in two halves, then the ratio of the pooled
    variance estimate to the mean within-half variance (Gelman et al. 2013, eqs. 11.1–11.4)."""
    steps = chain.shape[0] // 2
    if steps < 2:
        return np.full(chain.shape[-1], np.nan)
    halves = np.concatenate([chain[:steps], chain[steps: 2 * steps]], axis=1)  # (n, 2 chains, parameters)
    within = np.mean(np.var(halves, axis=0, ddof=1), axis=0)
    between = steps * np.var(np.mean(halves, axis=0), axis=0, ddof=1)
    pooled = (steps - 1) / steps * within + between / steps
    with np.errstate(invalid="ignore", divide="ignore"):
        rhat = np.sqrt(pooled / within)
    return np.where(within > 0, rhat, np.where(between > 0, np.inf, 1.0))


def default_burn(tau, steps: int, adaptation: int = 0) -> int:
    """Burn-in when none is set: two of the longest integrated autocorrelation times (half the
    chain while they are unknown), and at least the sampler's adaptation steps; leaves at least one step."""
    tau = np.asarray(tau, dtype=float)
    burn = int(2 * np.max(tau)) if tau.size and np.all(np.isfinite(tau)) else steps // 2
    return max(min(max(burn, adaptation), steps - 1), 0)


@dataclass
class Convergence:
    """The verdict of the convergence rule and the numbers behind it."""

    converged: bool
    autocorr_time: np.ndarray  #: per parameter, steps
    effective_samples: np.ndarray  #: per parameter, after burn-in
    rhat: np.ndarray | None  #: per parameter; None where chains are not independent (ensemble walkers)
    burn: int
    reason: str  #: what is still missing ("" when converged)


def assess(chain: np.ndarray, autocorr_factor: float, effective_samples: float, independent: bool,
           burn: int | None = None, adaptation: int = 0, previous_tau: float | None = None) -> Convergence:
    """Apply the rule to a (steps, chains, parameters) chain.

    ``previous_tau`` is the longest autocorrelation time at the previous check (``inf`` before
    the first; None: do not require it to have settled, as at the end of a run).
    """
    steps = chain.shape[0]
    tau = autocorr_times(chain[adaptation:] if steps - adaptation > 1 else chain)
    burn = default_burn(tau, steps, adaptation) if burn is None else min(max(burn, adaptation), max(steps - 1, 0))
    kept = chain[burn:]
    with np.errstate(invalid="ignore", divide="ignore"):
        effective = np.where(tau > 0, kept.shape[0] * chain.shape[1] / tau, 0.0)
    effective = np.nan_to_num(effective, nan=0.0)
    rhat = split_rhat(kept) if independent and chain.shape[1] > 1 else None
    longest = float(np.max(tau)) if np.all(np.isfinite(tau)) else np.inf
    missing = []
    if not steps > autocorr_factor * longest:
        missing.append(f"{steps} steps, fewer than {autocorr_factor:g} autocorrelation times "
                       f"({'unknown' if not np.isfinite(longest) else f'{longest:.0f} steps'})")
    elif previous_tau is not None and not abs(previous_tau - longest) <= 0.01 * longest:
        missing.append("the autocorrelation time is still changing")
    if effective.size and np.min(effective) < effective_samples:
        missing.append(f"fewest effective samples {np.min(effective):.0f} < {effective_samples:g}")
    if rhat is not None and not np.all(rhat < RHAT_LIMIT):
        missing.append(f"largest R-hat {np.nanmax(np.where(np.isfinite(rhat), rhat, np.inf)):.3f} >= {RHAT_LIMIT}")
    return Convergence(not missing, tau, effective, rhat, burn, "; ".join(missing))


def steps_needed(verdict: Convergence, steps: int, chains: int, autocorr_factor: float, effective_samples: float,
                 adaptation: int = 0) -> int:
    """Total steps the rule asks for at the current autocorrelation times (for the progress bar)."""
    tau = verdict.autocorr_time
    if not np.all(np.isfinite(tau)) or tau.size == 0:
        return 2 * max(steps, 1)
    longest = float(np.max(tau))
    burn = max(2 * longest, adaptation)
    return int(np.ceil(max(autocorr_factor * longest, burn + effective_samples * longest / chains, steps + 1)))

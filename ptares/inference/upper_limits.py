"""Upper limits and the Savage–Dickey density ratio from posterior draws of one parameter.

An upper limit is a quantile of the marginal posterior: the 95% upper limit of the common
amplitude is the 95th percentile of ``common_lg_amplitude`` (quoted also as an amplitude).
It depends on the prior as much as on the data: a prior uniform in lg A, the default here,
gives more weight to small amplitudes than one uniform in A, so its limit is lower, not higher
(Hazboun et al. 2020, ApJL 905, L6, compare the two).  Its Monte Carlo error is that of a
sample quantile, ``sqrt(q (1 - q) / N_eff) / p(x_q)`` (common practice), with the density
``p`` from a Gaussian kernel estimate (scipy).

Savage–Dickey (Dickey 1971, Ann. Math. Stat. 42, 204): where the model without a process is
the model with it at one value of its amplitude, their Bayes factor is the posterior density at
that value over the prior density there.  A power-law process of vanishing amplitude has
no effect, so the lower edge of the lg-amplitude prior stands for "no such process" (common
practice, an approximation as good as the edge is far below what the data resolve).  The
densities are averaged over the lowest :data:`EDGE_WIDTH` of the prior's range: the
posterior's by the fraction of draws there, the prior's by its probability there, so
``B(process vs none) = prior mass / posterior fraction``; its error comes from the binomial
error of the fraction with the effective sample size.  With no draw in that range only a
lower bound is given.
"""

from __future__ import annotations

import numpy as np
from scipy import integrate, stats

from ptares.inference.priors import support

__all__ = ["upper_limit", "savage_dickey", "EDGE_WIDTH", "UPPER_LIMIT_CAVEAT"]

#: Width (in the parameter, dex for an lg amplitude) of the range at the prior's lower edge whose
#: densities the Savage–Dickey ratio compares.
EDGE_WIDTH = 0.5

UPPER_LIMIT_CAVEAT = ("an upper limit depends on the prior: uniform in lg A (the default) weighs small amplitudes "
                      "more than uniform in A, which gives a higher limit (Hazboun et al. 2020, ApJL 905, L6)")


def upper_limit(values: np.ndarray, effective: float, level: float = 0.95) -> dict:
    """The ``level`` quantile of ``values`` (posterior draws of one parameter) and its Monte Carlo error."""
    values = np.asarray(values, dtype=float)
    value = float(np.quantile(values, level))
    error = None
    if values.size > 2 and np.ptp(values) > 0 and effective > 0:
        density = float(stats.gaussian_kde(values)(value)[0])
        error = float(np.sqrt(level * (1 - level) / effective) / density) if density > 0 else None
    return {"level": level, "value": value, "error": error}


def savage_dickey(values: np.ndarray, prior, effective: float, width: float = EDGE_WIDTH) -> dict:
    """ln B of "the process is present" against "absent" from posterior draws ``values`` of its lg amplitude and
    its ``prior`` (a :mod:`ptares.inference.priors` object), as the module docstring describes."""
    values = np.asarray(values, dtype=float)
    low, high = support(prior)
    width = min(width, (high - low) / 4.0)
    prior_mass = integrate.quad(lambda x: np.exp(prior.log_pdf(x)), low, low + width)[0]
    inside = int(np.count_nonzero(values <= low + width))
    effective = max(min(float(effective), values.size), 1.0)
    entry = {"edge": [low, low + width], "prior_mass": prior_mass, "posterior_fraction": inside / values.size,
             "draws_in_edge": inside, "effective_samples": effective}
    if inside == 0:  # fewer than about one effective draw would fall there: a bound
        entry.update(ln_bayes_factor=None, ln_bayes_factor_error=None,
                     ln_bayes_factor_lower_bound=float(np.log(prior_mass * effective)))
        return entry
    fraction = inside / values.size
    error = np.sqrt(fraction * (1 - fraction) / effective) / fraction  # relative error of the fraction
    entry.update(ln_bayes_factor=float(np.log(prior_mass / fraction)), ln_bayes_factor_error=float(error),
                 ln_bayes_factor_lower_bound=None)
    return entry

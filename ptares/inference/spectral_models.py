"""Spectral models of the common process, refitted from a free spectrum's posterior.

A free-spectrum fit gives draws of lg rho_k, the variance of the common process's Fourier
coefficients at f_k = k / T (rho_k = S(f_k) / T).  With the frequencies nearly independent, the
posterior of any model of S(f) follows from the free spectrum's per-frequency marginals alone
(Lamb, Taylor & van Haasteren 2023, PRD 108, 103019, from memory): each marginal, divided by
the free spectrum's prior on lg rho_k, is that frequency's likelihood, so

    ln L(theta) = sum_k [ln p_k(lg rho_k(theta)) - ln prior_k(lg rho_k(theta))],

with p_k a Gaussian kernel density estimate of the draws (scipy).  Sampling theta (emcee) then
takes seconds, where a direct fit takes as long as the free spectrum did.

Models (S in s^2/Hz, f_yr = 1/yr):

* ``power_law``: ``S(f) = A^2 / (12 pi^2) f_yr^-3 (f / f_yr)^-gamma`` (PHYSICS.md);
  parameters ``lg_amplitude``, ``spectral_index``;
* ``turnover``: the power law divided by ``1 + (f_bend / f)^kappa``, power lost below f_bend
  as binaries driven by their environment would lose it (Sampson, Cornish & McWilliams 2015,
  PRD 91, 084055; the form from memory); parameters ``lg_amplitude``, ``spectral_index``,
  ``lg_bend_frequency`` (Hz), ``bend_index`` (kappa).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import stats

from ptares.inference.priors import support
from ptares.physics.spectra import fourier_frequencies, residual_psd, turnover

__all__ = ["MODELS", "SpectralModel", "refit", "bin_likelihood", "spectrum_content"]


@dataclass(frozen=True)
class SpectralModel:
    """A parametric spectrum: its parameter names, their (uniform) prior ranges, and S(f)."""

    name: str
    parameters: tuple
    ranges: tuple  #: (low, high) of each parameter's uniform prior

    def psd(self, frequency: np.ndarray, values) -> np.ndarray:
        """S(f) in s^2/Hz at ``frequency`` (Hz) for parameter ``values``."""
        if self.name == "power_law":
            lg_amplitude, gamma = values
            return residual_psd(frequency, 10.0**lg_amplitude, gamma)
        lg_amplitude, gamma, lg_bend, kappa = values
        return residual_psd(frequency, 10.0**lg_amplitude, gamma) * turnover(frequency, 10.0**lg_bend, kappa)


MODELS = {
    "power_law": SpectralModel("power_law", ("lg_amplitude", "spectral_index"), ((-18.0, -12.0), (0.0, 7.0))),
    "turnover": SpectralModel("turnover", ("lg_amplitude", "spectral_index", "lg_bend_frequency", "bend_index"),
                              ((-18.0, -12.0), (0.0, 7.0), (-9.5, -7.0), (0.0, 8.0))),
}


def bin_likelihood(draws: np.ndarray, priors, points: int = 512):
    """Per frequency, ln (posterior density / prior density) of lg rho_k on a grid: ``(grids, tables)``, each
    (K, points), from the free spectrum's ``draws`` (N, K) and its per-bin ``priors`` (uniform here, so the
    prior density is a constant)."""
    grids, tables = [], []
    for k in range(draws.shape[1]):
        low, high = support(priors[k])
        grid = np.linspace(low, high, points)
        values = draws[:, k]
        if np.ptp(values) > 0:
            # reflect at the prior's edges so the density estimate is not halved there (a posterior pressed
            # against the lower edge is the usual case for frequencies the noise dominates)
            mirrored = np.concatenate([values, 2 * low - values, 2 * high - values])
            bandwidth = stats.gaussian_kde(values).factor * np.std(values)  # Scott's rule on the draws themselves
            density = stats.gaussian_kde(mirrored, bw_method=bandwidth / np.std(mirrored))(grid) * 3.0
        else:
            density = np.where(np.isclose(grid, values[0]), 1.0, 1e-300)
        prior = np.array([np.exp(priors[k].log_pdf(g)) for g in grid])
        tables.append(np.log(np.maximum(density, 1e-300)) - np.log(prior))
        grids.append(grid)
    return np.array(grids), np.array(tables)


def refit(draws: np.ndarray, priors, span: float, model: str, seed: int = 0, steps: int = 3000, walkers: int = 32) -> dict:
    """Posterior of ``model`` (a key of :data:`MODELS`) from free-spectrum ``draws`` (N, K) of lg rho_k on the
    frequencies k / ``span``: the summary (median, 68% and 95% intervals per parameter), the draws, and the
    maximum ln likelihood found."""
    import emcee

    spec = MODELS[model]
    grids, tables = bin_likelihood(draws, priors)
    frequency = fourier_frequencies(span, draws.shape[1])
    lows, highs = np.array([r[0] for r in spec.ranges]), np.array([r[1] for r in spec.ranges])

    def log_probability(theta):
        if np.any(theta < lows) or np.any(theta > highs):
            return -np.inf
        lg_rho = np.log10(spec.psd(frequency, theta) / span)
        if np.any(lg_rho < grids[:, 0]) or np.any(lg_rho > grids[:, -1]) or not np.all(np.isfinite(lg_rho)):
            return -np.inf
        return float(sum(np.interp(lg_rho[k], grids[k], tables[k]) for k in range(len(frequency))))

    rng = np.random.default_rng(seed)
    start = []
    while len(start) < walkers:  # prior draws with a finite likelihood
        trial = rng.uniform(lows, highs)
        if np.isfinite(log_probability(trial)):
            start.append(trial)
    sampler = emcee.EnsembleSampler(walkers, len(lows), log_probability)
    state = emcee.State(np.array(start), random_state=np.random.RandomState(seed % 2**32).get_state())
    sampler.run_mcmc(state, steps, progress=False)
    burn = steps // 2
    samples = sampler.get_chain(discard=burn, flat=True)
    summary = {}
    for i, name in enumerate(spec.parameters):
        values = samples[:, i]
        summary[name] = {"median": float(np.median(values)),
                         "interval68": [float(v) for v in np.percentile(values, [15.865, 84.135])],
                         "interval95": [float(v) for v in np.percentile(values, [2.5, 97.5])]}
    try:
        autocorr = [float(t) for t in sampler.get_autocorr_time(discard=burn, quiet=True)]
    except Exception:  # noqa: BLE001 - emcee raises its own error type for short chains
        autocorr = None
    return {"model": model, "parameters": summary, "draws": samples,
            "max_ln_likelihood": float(np.max(sampler.get_log_prob(discard=burn))),
            "autocorr_time": autocorr, "steps": steps, "walkers": walkers, "burn": burn}


def spectrum_content(model, draws: np.ndarray, seed: int = 0) -> tuple:
    """``(spectrum.json's content, {model: refit draws})`` of a free-spectrum fit (a
    :class:`~ptares.inference.model.FitModel` and its posterior ``draws`` over its free parameters): each
    frequency's posterior of lg rho_k (and the injected value), and every model of ``[fit] spectral_models``
    refitted from them."""
    from ptares.inference.parameters import bin_of

    columns = [(bin_of(name), i) for i, name in enumerate(model.names) if bin_of(name) is not None]
    span = model.dataset.span
    bins = []
    for k, i in columns:
        values = draws[:, i]
        name = model.names[i]
        bins.append({"k": k, "frequency": k / span, "median": float(np.median(values)),
                     "interval68": [float(v) for v in np.percentile(values, [15.865, 84.135])],
                     "interval95": [float(v) for v in np.percentile(values, [2.5, 97.5])],
                     **({"injected": float(model.injected[name])} if name in model.injected else {})})
    spectrum = draws[:, [i for _, i in columns]]
    priors = [model.priors[i] for _, i in columns]
    refits, refit_draws = {}, {}
    for name in model.section.spectral_models:
        result = refit(spectrum, priors, span, name, seed=seed)
        refits[name] = {key: value for key, value in result.items() if key != "draws"}
        refit_draws[name] = result["draws"]
    return {"quantity": "lg of the coefficient variance rho_k = S(f_k) / T, s^2", "span": span, "bins": bins,
            "refits": refits,
            "method": "refits from the per-frequency marginals (Lamb, Taylor & van Haasteren 2023; kernel density "
                      "estimates divided by the free spectrum's prior)"}, refit_draws

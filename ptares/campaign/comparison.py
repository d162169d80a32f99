"""``ptares compare``: correlated against uncorrelated common process, by likelihood reweighting.

The uncorrelated model's posterior draws (thinned to about one per autocorrelation
time) are reweighted by the likelihood ratio of each correlation pattern
(:mod:`ptares.inference.reweighting`).  The likelihood evaluations are split into
chunks that run on the campaign engines (local processes or a Dask cluster); every
chunk rebuilds both models from the dataset, so a worker needs nothing but its task.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ptares.dataset import Dataset
from ptares.inference.reweighting import independent_draws, reweight, weighted_summary
from ptares.inputs.config import CompareSection, FitSection
from ptares.version import __version__

__all__ = ["Comparison", "LikelihoodChunk", "likelihood_ratios", "compare_models", "patterns_of"]

#: Chunks per worker: enough to keep every worker busy to the end and the progress bar moving.
CHUNKS_PER_WORKER = 4


@dataclass
class LikelihoodChunk:
    """Draws whose log likelihood ratios one worker computes."""

    index: int
    dataset: Dataset
    section: FitSection  #: the uncorrelated model's settings
    values: dict  #: every parameter value that is not free
    names: list  #: free parameters, in the columns of ``points``
    points: np.ndarray
    patterns: tuple


def patterns_of(section: CompareSection) -> tuple:
    """The patterns compared, Hellings–Downs always first."""
    return ("hellings-downs",) + tuple(p for p in section.patterns if p != "hellings-downs")


def likelihood_ratios(chunk: LikelihoodChunk) -> dict:
    """``{"index", "log_weights": {pattern: (n,) ln L_pattern - ln L_uncorrelated}}`` of one chunk."""
    from ptares.inference.model import FitModel

    uncorrelated = FitModel(chunk.dataset, chunk.section)
    models = {p: FitModel(chunk.dataset, chunk.section.model_copy(update={"common": p})) for p in chunk.patterns}
    log_weights = {p: np.empty(len(chunk.points)) for p in chunk.patterns}
    for i, point in enumerate(chunk.points):
        values = dict(chunk.values)
        values.update(zip(chunk.names, map(float, point)))
        reference = uncorrelated.log_likelihood_at(values)
        for pattern, model in models.items():
            log_weights[pattern][i] = model.log_likelihood_at(values) - reference
    return {"index": chunk.index, "log_weights": log_weights}


def _chunks(model, draws: np.ndarray, patterns, workers: int) -> list:
    section = model.section.model_copy(update={"pulsar_noise": None, "pulsars": None, "workers": 1})
    count = max(1, min(len(draws), CHUNKS_PER_WORKER * workers))
    return [LikelihoodChunk(i, model.dataset, section, dict(model.values), list(model.names), part, patterns)
            for i, part in enumerate(np.array_split(draws, count)) if len(part)]


@dataclass
class Comparison:
    """``content`` of ``comparison.json``; the reweighted ``draws`` (n, parameters) and each pattern's normalised ``weights``."""

    content: dict
    draws: np.ndarray
    weights: dict


def compare_models(model, chain: np.ndarray, fit_summary: dict, settings: CompareSection, *, seed: int = 0,
                   scheduler=None, progress: bool = False) -> Comparison:
    """Reweight the uncorrelated ``model``'s posterior ``chain`` by each pattern (see :class:`Comparison`).

    ``fit_summary`` is the uncorrelated fit's ``posterior.json`` (burn-in, autocorrelation times, verdict).
    """
    from tqdm.auto import tqdm

    from ptares.campaign.engines import run_locally, run_on_dask

    patterns = patterns_of(settings)
    taus = [entry["autocorr_time"] for entry in fit_summary["parameters"].values()]
    tau = float(np.nanmax(taus)) if taus and np.any(np.isfinite(taus)) else 1.0
    # one early straggler outside the posterior's bulk can carry all the weight: burn a quarter of the chain at least
    burn = max(int(fit_summary["burn"]), chain.shape[0] // 4)
    # one draw per two integrated autocorrelation times: successive draws then correlate by about e^-4,
    # so the error of the mean weight, which treats them as independent, holds
    step = max(int(np.ceil(2.0 * tau)), 1)
    draws = independent_draws(chain, burn, step, settings.samples, np.random.default_rng(seed))
    chunks = _chunks(model, draws, patterns, settings.workers)
    if scheduler is not None:
        rows = run_on_dask(chunks, scheduler, function=likelihood_ratios)
    elif settings.workers > 1:
        rows = run_locally(chunks, settings.workers, function=likelihood_ratios, where="compare")
    else:
        rows = map(likelihood_ratios, chunks)
    parts = {}
    with tqdm(total=len(draws), desc="likelihood ratios", unit="draw", disable=None if progress else True) as bar:
        for row in rows:
            parts[row["index"]] = row["log_weights"]
            bar.update(len(chunks[row["index"]].points))
    results = {p: reweight(np.concatenate([parts[c.index][p] for c in chunks])) for p in patterns}
    entries = {}
    for pattern, result in results.items():
        warning = _warning(result, settings.min_effective_samples, fit_summary)
        entries[pattern] = {
            "ln_bayes_factor": result.ln_bayes_factor,
            "ln_bayes_factor_error": result.ln_bayes_factor_error,
            "effective_samples": result.effective_samples,
            "efficiency": result.efficiency,
            "reliable": warning is None,
            "warning": warning,
            "posterior": weighted_summary(draws, model.names, result.weights, result.effective_samples, model.injected),
        }
    hd = entries["hellings-downs"]
    content = {
        "ptares_version": __version__,
        "against": "uncorrelated common process (same parameters and priors)",
        **{key: hd[key] for key in ("ln_bayes_factor", "ln_bayes_factor_error", "effective_samples", "reliable",
                                    "warning")},
        "draws": int(len(draws)),
        "burn": burn,
        "thinned_by": step,
        "posterior": hd["posterior"],
        "patterns": entries,
        "uncorrelated_fit": {k: fit_summary[k] for k in ("sampler", "converged", "not_converged_because", "steps",
                                                          "effective_samples", "max_rhat") if k in fit_summary},
        "settings": {"patterns": list(patterns), "samples": settings.samples,
                     "min_effective_samples": settings.min_effective_samples, "seed": seed},
    }
    return Comparison(content, draws, {p: r.weights for p, r in results.items()})


def _warning(result, min_effective: int, fit_summary: dict) -> str | None:
    """Why the reweighted Bayes factor should not be trusted, or None."""
    reasons = []
    if result.draws < min_effective:
        reasons.append(f"only {result.draws} independent draws of the uncorrelated posterior (fewer than {min_effective}): "
                       "run its fit longer (max_steps, effective_samples)")
    elif result.effective_samples < min_effective:
        reasons.append(f"only {result.effective_samples:.0f} effective samples of {result.draws} draws "
                       f"(fewer than {min_effective}): the correlated posterior lies where the uncorrelated one has few "
                       "draws, and ln B is then most likely an underestimate (the rare large weights are missed); "
                       "fit the correlated model directly")
    if not fit_summary.get("converged", False):
        reasons.append(f"the uncorrelated fit has not converged ({fit_summary.get('not_converged_because')})")
    return "; ".join(reasons) or None

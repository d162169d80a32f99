"""``ptares compare``: correlated against uncorrelated common process.

The uncorrelated model's posterior draws (thinned to about one per autocorrelation
time) are reweighted by the likelihood ratio of each correlation pattern
(:mod:`ptares.inference.reweighting`).  Where that leaves too few effective samples (the
correlated posterior lies where the uncorrelated one has few draws: a loud signal, a large
array), the pattern's model is fitted directly and the Bayes factor comes from draws of both
posteriors by bridge sampling (:func:`~ptares.inference.reweighting.bridge`); its posterior is
then the direct fit's.  The likelihood evaluations are split into chunks that run on the
campaign engines (local processes or a Dask cluster); every chunk rebuilds both models from
the dataset, so a worker needs nothing but its task.
"""

from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from ptares.dataset import Dataset
from ptares.inference.reweighting import bridge, independent_draws, reweight, weighted_summary
from ptares.inputs.config import CompareSection, FitSection
from ptares.version import __version__

__all__ = ["Comparison", "LikelihoodChunk", "likelihood_ratios", "compare_models", "patterns_of", "direct_patterns",
           "add_direct_fit", "BRIDGE_MIN_EFFECTIVE"]

#: Chunks per worker: enough to keep every worker busy to the end and the progress bar moving.
CHUNKS_PER_WORKER = 4
#: Fewest effective draws on each side of a bridge for its Bayes factor and error to be trusted.
BRIDGE_MIN_EFFECTIVE = 20


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
    """``content`` of ``comparison.json``; the uncorrelated posterior's ``draws`` (n, parameters), each pattern's
    ``log_weights`` (ln L_pattern - ln L_U) at them, and ``direct``: the draws of each pattern fitted directly."""

    content: dict
    draws: np.ndarray
    log_weights: dict
    direct: dict = field(default_factory=dict)

    @property
    def weights(self) -> dict:
        """Each pattern's normalised weights of the uncorrelated draws."""
        return {p: reweight(w).weights for p, w in self.log_weights.items()}

    def posterior_draws(self, pattern: str):
        """``(draws, normalised weights)`` of the pattern's posterior: its direct fit's, else the reweighted ones."""
        if pattern in self.direct:
            draws = self.direct[pattern]
            return draws, np.full(len(draws), 1.0 / len(draws))
        return self.draws, reweight(self.log_weights[pattern]).weights


def _thinned(chain: np.ndarray, fit_summary: dict, count: int, seed: int) -> tuple:
    """``(draws, burn, step)``: up to ``count`` draws of a posterior ``chain``, about independent."""
    taus = [entry["autocorr_time"] for entry in fit_summary["parameters"].values()]
    tau = float(np.nanmax(taus)) if taus and np.any(np.isfinite(taus)) else 1.0
    # one early straggler outside the posterior's bulk can carry all the weight: burn a quarter of the chain at least
    burn = max(int(fit_summary["burn"]), chain.shape[0] // 4)
    # one draw per two integrated autocorrelation times: successive draws then correlate by about e^-4,
    # so the errors, which treat them as independent, hold
    step = max(int(np.ceil(2.0 * tau)), 1)
    return independent_draws(chain, burn, step, count, np.random.default_rng(seed)), burn, step


def _log_ratios(model, draws: np.ndarray, patterns, workers: int, scheduler, progress: bool, label: str) -> dict:
    """``{pattern: ln L_pattern - ln L_U at each draw}``, computed on the campaign engines."""
    from tqdm.auto import tqdm

    from ptares.campaign.engines import run_locally, run_on_dask

    chunks = _chunks(model, draws, patterns, workers)
    if scheduler is not None:
        rows = run_on_dask(chunks, scheduler, function=likelihood_ratios)
    elif workers > 1:
        rows = run_locally(chunks, workers, function=likelihood_ratios, where="compare")
    else:
        rows = map(likelihood_ratios, chunks)
    parts = {}
    with tqdm(total=len(draws), desc=label, unit="draw", disable=None if progress else True) as bar:
        for row in rows:
            parts[row["index"]] = row["log_weights"]
            bar.update(len(chunks[row["index"]].points))
    return {p: np.concatenate([parts[c.index][p] for c in chunks]) for p in patterns}


def compare_models(model, chain: np.ndarray, fit_summary: dict, settings: CompareSection, *, seed: int = 0,
                   scheduler=None, progress: bool = False) -> Comparison:
    """Reweight the uncorrelated ``model``'s posterior ``chain`` by each pattern (see :class:`Comparison`).

    ``fit_summary`` is the uncorrelated fit's ``posterior.json`` (burn-in, autocorrelation times, verdict).
    """
    patterns = patterns_of(settings)
    draws, burn, step = _thinned(chain, fit_summary, settings.samples, seed)
    log_weights = _log_ratios(model, draws, patterns, settings.workers, scheduler, progress, "likelihood ratios")
    results = {p: reweight(log_weights[p]) for p in patterns}
    entries = {}
    for pattern, result in results.items():
        warning = _warning(result, settings.min_effective_samples, fit_summary)
        entries[pattern] = {
            "method": "reweighting",
            "ln_bayes_factor": result.ln_bayes_factor,
            "ln_bayes_factor_error": result.ln_bayes_factor_error,
            "effective_samples": result.effective_samples,
            "efficiency": result.efficiency,
            "reliable": warning is None,
            "warning": warning,
            "posterior": weighted_summary(draws, model.names, result.weights, result.effective_samples, model.injected),
        }
    content = {
        "ptares_version": __version__,
        "against": "uncorrelated common process (same parameters and priors)",
        "draws": int(len(draws)),
        "burn": burn,
        "thinned_by": step,
        "patterns": entries,
        "uncorrelated_fit": {k: fit_summary[k] for k in ("sampler", "converged", "not_converged_because", "steps",
                                                          "effective_samples", "max_rhat") if k in fit_summary},
        "settings": {"patterns": list(patterns), "samples": settings.samples,
                     "min_effective_samples": settings.min_effective_samples, "direct_fit": settings.direct_fit,
                     "seed": seed},
    }
    _lead_with_hellings_downs(content)
    return Comparison(content, draws, log_weights)


def _lead_with_hellings_downs(content: dict) -> None:
    """The top-level keys of ``comparison.json`` repeat the Hellings–Downs entry."""
    hd = content["patterns"]["hellings-downs"]
    content.update({key: hd[key] for key in ("method", "ln_bayes_factor", "ln_bayes_factor_error", "effective_samples",
                                             "reliable", "warning", "posterior")})


def direct_patterns(comparison: Comparison, settings: CompareSection) -> list:
    """The patterns to fit directly: all (``direct_fit = "always"``), none (``"never"``), or those whose
    reweighting left fewer than ``min_effective_samples`` effective samples (``"auto"``)."""
    entries = comparison.content["patterns"]
    if settings.direct_fit == "never":
        return []
    if settings.direct_fit == "always":
        return list(entries)
    return [p for p, e in entries.items() if e["effective_samples"] < settings.min_effective_samples]


def add_direct_fit(comparison: Comparison, model, pattern: str, chain: np.ndarray, fit_summary: dict,
                   settings: CompareSection, *, seed: int = 0, scheduler=None, progress: bool = False) -> None:
    """Replace ``pattern``'s reweighted entry by the bridge between both posteriors: the uncorrelated
    ``model``'s draws (already weighed) and draws of the pattern's own fit (``chain``, ``fit_summary``);
    the posterior becomes the direct fit's summary.  Changes ``comparison`` in place."""
    draws, burn, step = _thinned(chain, fit_summary, settings.samples, seed + 1)
    log_ratios = _log_ratios(model, draws, (pattern,), settings.workers, scheduler, progress,
                             f"{pattern} likelihood ratios")[pattern]
    entry = comparison.content["patterns"][pattern]
    result = bridge(log_ratios, comparison.log_weights[pattern], start=entry["ln_bayes_factor"])
    reasons = []
    for side, effective in (("correlated", result.effective_correlated), ("uncorrelated", result.effective_uncorrelated)):
        if effective < BRIDGE_MIN_EFFECTIVE:
            reasons.append(f"the bridge rests on {effective:.0f} effective draws of the {side} posterior (fewer than "
                           f"{BRIDGE_MIN_EFFECTIVE}): the posteriors barely overlap, so ln B and its error are rough; "
                           "more draws of both fits (samples, effective_samples) help")
    for name, summary in (("correlated", fit_summary), ("uncorrelated", comparison.content["uncorrelated_fit"])):
        if not summary.get("converged", False):
            reasons.append(f"the {name} fit has not converged ({summary.get('not_converged_because')})")
    comparison.content["patterns"][pattern] = {
        "method": "bridge",
        "ln_bayes_factor": result.ln_bayes_factor,
        "ln_bayes_factor_error": result.ln_bayes_factor_error,
        "effective_samples": result.effective_samples,
        "reliable": not reasons,
        "warning": "; ".join(reasons) or None,
        "bridge": {"effective_correlated": result.effective_correlated,
                   "effective_uncorrelated": result.effective_uncorrelated,
                   "draws_correlated": result.draws_correlated, "draws_uncorrelated": result.draws_uncorrelated,
                   "burn": burn, "thinned_by": step, "iterations": result.iterations},
        "reweighting": {key: entry[key] for key in ("ln_bayes_factor", "ln_bayes_factor_error", "effective_samples",
                                                    "efficiency", "warning")},
        "direct_fit": {k: fit_summary[k] for k in ("sampler", "converged", "not_converged_because", "steps",
                                                   "effective_samples", "max_rhat") if k in fit_summary},
        "posterior": fit_summary["parameters"],
    }
    comparison.direct[pattern] = draws
    _lead_with_hellings_downs(comparison.content)


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

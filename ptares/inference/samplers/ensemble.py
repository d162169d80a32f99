"""Sampling a :class:`~ptares.inference.model.FitModel` with emcee's affine-invariant ensemble (Goodman & Weare 2010;
Foreman-Mackey et al. 2013): the sampler for small models and for continuous waves.

Steps go to the chains file (:mod:`ptares.inference.samplers.chains`) in batches;
rerunning the same fit resumes from the last saved step and the saved random state,
so an interrupted run continues the same chain: no sample is lost or repeated.  The
run stops when the convergence rule (:mod:`ptares.inference.samplers.convergence`;
walkers are not independent, so no R-hat) is met, or at ``max_steps``.
"""

from __future__ import annotations

import emcee
import numpy as np
import scipy.optimize

from ptares.errors import InputError
from ptares.inference.samplers.convergence import assess, steps_needed
from ptares.rng import stream

__all__ = ["run_ensemble", "default_walkers", "CHECK_EVERY"]

CHECK_EVERY = 100  #: steps between convergence checks


def default_walkers(model) -> int:
    """Walkers when ``[fit] walkers = 0``: twice the parameters plus two, at least 16."""
    return max(2 * model.ndim + 2, 16)


def _starting_points(model, walkers: int, rng: np.random.Generator) -> np.ndarray:
    """Walkers inside the prior support: prior draws, or a small ball about the maximum posterior."""
    points = model.sample_prior(rng, walkers)
    values = np.array([model(p) for p in points])
    if not np.any(np.isfinite(values)):
        raise InputError("the posterior is zero at every starting point; check the priors and fixed values", "fit")
    if model.section.start == "map":
        best = points[np.argmax(values)]
        result = scipy.optimize.minimize(lambda x: -model(x), best, method="Nelder-Mead",
                                         options={"maxiter": 200 * model.ndim, "xatol": 1e-6, "fatol": 1e-6})
        centre = result.x if np.isfinite(model(result.x)) else best
        spread = np.array([abs(p.ppf(0.75) - p.ppf(0.25)) for p in model.priors]) * 1e-3
        points = centre + spread * rng.standard_normal((walkers, model.ndim))
        for i in range(walkers):
            while not np.isfinite(model.log_prior(points[i])):
                points[i] = centre + spread * rng.standard_normal(model.ndim)
    return points


def run_ensemble(model, backend, walkers: int, resume: bool, pool, interrupted: list, bar) -> None:
    """Advance the ensemble in ``backend`` until the convergence rule holds, ``max_steps``, or an interrupt."""
    section = model.section
    sampler = emcee.EnsembleSampler(walkers, model.ndim, model, backend=backend, pool=pool)
    if resume:
        start = backend.get_last_sample()
    else:
        rng = stream(section.seed, "ensemble start")
        start = emcee.State(_starting_points(model, walkers, rng),
                            random_state=np.random.RandomState(section.seed % 2**32).get_state())
    done = int(backend.iteration)
    remaining = section.max_steps - done
    bar.update(done)
    previous = np.inf
    if resume:
        verdict = assess(backend.get_chain(), section.autocorr_factor, section.effective_samples, independent=False)
        if verdict.converged or remaining <= 0:
            return
    if remaining <= 0:
        return
    try:
        for step, _ in enumerate(sampler.sample(start, iterations=remaining, store=True), start=done + 1):
            bar.update(1)
            if interrupted:
                break
            if step % CHECK_EVERY:
                continue
            backend.flush()
            verdict = assess(backend.get_chain(), section.autocorr_factor, section.effective_samples, independent=False,
                             previous_tau=previous)
            previous = float(np.max(verdict.autocorr_time))
            bar.total = min(section.max_steps, steps_needed(verdict, step, walkers, section.autocorr_factor,
                                                            section.effective_samples))
            bar.refresh()
            if verdict.converged:
                break
    finally:
        backend.flush()  # also on Ctrl-C: every finished step is kept

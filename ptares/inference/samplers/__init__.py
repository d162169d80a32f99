"""Samplers that draw from a fit model's posterior into a resumable chains file (one module per sampler).

:func:`run_sampler` picks the sampler (``[fit] sampler``; by default the ensemble
sampler for small models and the blocked Gibbs sampler above
:data:`GIBBS_ABOVE` parameters), opens or resumes ``chains.h5`` and runs it with
a progress bar whose length follows the convergence rule.
"""

from __future__ import annotations

import signal
import threading
from contextlib import nullcontext

__all__ = ["run_sampler", "choose_sampler", "GIBBS_ABOVE"]

#: Models with more free parameters than this are sampled by blocked Gibbs unless ``[fit] sampler`` says otherwise.
GIBBS_ABOVE = 20


def choose_sampler(model) -> str:
    """``"ensemble"`` or ``"gibbs"``: the configured one, or by the number of parameters (continuous waves, memory steps, and
    free jitter or white noise beside jitter or per observing system: ensemble, which has no Gibbs step yet)."""
    chosen = model.section.sampler
    if chosen != "auto":
        return chosen
    from ptares.inference.samplers.gibbs import why_gibbs_cannot_sample

    gibbs = model.ndim > GIBBS_ABOVE and why_gibbs_cannot_sample(model) is None
    return "gibbs" if gibbs else "ensemble"


def run_sampler(model, path, progress: bool = False, overwrite: bool = False):
    """Sample ``model`` into the HDF5 file ``path`` (created, or resumed when it holds the same fit); returns a
    :class:`~ptares.inference.samplers.chains.FitRun`.  Ctrl-C stops after the current step or segment,
    keeps what is done, and raises KeyboardInterrupt."""
    from tqdm import tqdm

    from ptares.errors import InputError
    from ptares.inference.samplers.chains import finish, open_chains

    section = model.section
    sampler = choose_sampler(model)
    if sampler == "gibbs":
        from ptares.inference.samplers.gibbs import GibbsSampler, adaptation_steps, run_gibbs

        gibbs = GibbsSampler(model)  # refuses models it has no step for, before anything is written
        chains, adaptation = section.gibbs_chains, adaptation_steps(section)
    else:
        from ptares.inference.samplers.ensemble import default_walkers, run_ensemble

        chains, adaptation = section.walkers or default_walkers(model), 0
        if chains < 2 * model.ndim:
            raise InputError(f"{chains} walkers are fewer than twice the {model.ndim} free parameters", "fit.walkers")
    backend, resume, adaptation = open_chains(model, path, sampler, chains, overwrite, adaptation)

    interrupted = []
    previous_handler = None
    if threading.current_thread() is threading.main_thread():
        # Ctrl-C stops after the current step or segment (worker processes ignore it and finish theirs);
        # a second Ctrl-C stops at once, keeping what was written
        def stop_soon(*_):
            interrupted.append(True)
            signal.signal(signal.SIGINT, previous_handler)

        previous_handler = signal.signal(signal.SIGINT, stop_soon)
    bar = tqdm(total=section.max_steps, disable=not progress, unit="step", desc=f"{sampler} sampler", leave=False)
    try:
        with bar:
            if sampler == "gibbs":
                run_gibbs(gibbs, backend, chains, resume, section.workers, interrupted, bar, adaptation)
            else:
                pool = None
                if section.workers > 1:
                    import multiprocessing

                    from ptares.threads import current_threads, worker_initializer

                    pool = multiprocessing.get_context("spawn").Pool(section.workers, initializer=worker_initializer,
                                                                     initargs=(current_threads(), _ignore_interrupts))
                with pool if pool is not None else nullcontext():
                    run_ensemble(model, backend, chains, resume, pool, interrupted, bar)
    finally:
        if previous_handler is not None:
            signal.signal(signal.SIGINT, previous_handler)
    if interrupted:
        raise KeyboardInterrupt
    return finish(model, backend, sampler, adaptation)


def _ignore_interrupts():
    signal.signal(signal.SIGINT, signal.SIG_IGN)

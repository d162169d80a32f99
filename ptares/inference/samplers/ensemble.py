"""Sampling a :class:`~ptares.inference.model.FitModel` with emcee, checkpointed so that nothing is lost.

Chains go to an HDF5 file through emcee's own HDF backend, in batches of
steps (every 100 steps, every 10 s, and when the run stops).  Rerunning the same fit with the same output resumes from the last saved
step and the saved random state, so an interrupted run (Ctrl-C or a kill)
continues the same chain: no sample is lost or repeated.  The run stops when
the chain is longer than ``autocorr_factor`` integrated autocorrelation times
(Goodman & Weare 2010; Foreman-Mackey et al. 2013) and the estimate has
settled, or at ``max_steps``.
"""

from __future__ import annotations

import hashlib
import json
import signal
import threading
import time
from contextlib import nullcontext
from dataclasses import dataclass

import emcee
import h5py
import numpy as np
import scipy.optimize

from ptares.dataset import fingerprint
from ptares.errors import InputError
from ptares.inference.model import FitModel

__all__ = ["run_sampler", "summarise", "default_burn", "posterior_draws", "read_chain", "FitRun", "CHAIN_GROUP"]

CHAIN_GROUP = "chains"
CHECK_EVERY = 100  #: steps between convergence checks


@dataclass
class FitRun:
    chain: np.ndarray  #: (steps, walkers, ndim)
    log_prob: np.ndarray  #: (steps, walkers)
    acceptance_fraction: float
    autocorr_time: np.ndarray
    converged: bool
    steps: int


class CheckpointedBackend(emcee.backends.HDFBackend):
    """emcee's HDF backend, writing steps in batches: every ``seconds`` or ``steps``, and on :meth:`flush`.

    Each batch is written with the random state after its last step, so a run
    killed between batches resumes exactly where the file ends; steps not yet
    written are simply computed again, identically.
    """

    def __init__(self, filename, name=CHAIN_GROUP, seconds: float = 10.0, steps: int = 1000):
        super().__init__(filename, name=name)
        self._buffer = []
        self._seconds, self._steps = seconds, steps
        self._last = time.monotonic()

    def save_step(self, state, accepted):
        self._buffer.append((state.coords.copy(), state.log_prob.copy(), accepted.copy(), state.random_state))
        if len(self._buffer) >= self._steps or time.monotonic() - self._last > self._seconds:
            self.flush()

    def flush(self):
        """Write the buffered steps."""
        self._last = time.monotonic()
        if not self._buffer:
            return
        coords, log_prob, accepted, states = zip(*self._buffer)
        with self.open("a") as f:
            g = f[self.name]
            start = int(g.attrs["iteration"])
            stop = start + len(coords)
            g["chain"][start:stop] = np.stack(coords)
            g["log_prob"][start:stop] = np.stack(log_prob)
            g["accepted"][:] += np.sum(accepted, axis=0)
            for i, value in enumerate(states[-1]):
                g.attrs[f"random_state_{i}"] = value
            g.attrs["iteration"] = stop
        self._buffer.clear()


def _identity(model: FitModel, walkers: int) -> str:
    """A fingerprint of what is being sampled, so a resume never mixes two different fits or datasets."""
    settings = model.section.model_dump(exclude={"max_steps", "autocorr_factor", "burn", "thin", "workers", "walkers"})
    text = json.dumps({"names": model.names, "settings": settings, "walkers": walkers, "values": model.values,
                       "dataset": fingerprint(model.dataset)}, sort_keys=True, default=str)
    return hashlib.sha256(text.encode()).hexdigest()


def _starting_points(model: FitModel, walkers: int, rng: np.random.Generator) -> np.ndarray:
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


def run_sampler(model: FitModel, path, progress: bool = False, overwrite: bool = False) -> FitRun:
    """Sample ``model`` into the HDF5 file ``path`` (created, or resumed when it holds the same fit)."""
    section = model.section
    walkers = section.walkers or max(2 * model.ndim + 2, 16)
    if walkers < 2 * model.ndim:
        raise InputError(f"{walkers} walkers are fewer than twice the {model.ndim} free parameters", "fit.walkers")
    identity = _identity(model, walkers)
    backend = CheckpointedBackend(str(path))
    resume = False
    if path.exists() and not overwrite:
        try:
            with h5py.File(path, "r") as f:
                stored = f.attrs.get("fit_identity")
        except OSError as exc:
            raise InputError(f"cannot read the saved chains ({exc}); move the file away to start afresh", str(path)) from None
        if stored != identity:
            raise InputError("holds chains of a different fit; pass --overwrite or choose another --out", str(path))
        resume = backend.initialized and backend.iteration > 0
    if not resume:
        backend.reset(walkers, model.ndim)
        with h5py.File(path, "a") as f:
            f.attrs["fit_identity"] = identity
            f.attrs["parameter_names"] = model.names
            f.attrs["injected"] = json.dumps(model.injected)
            f.attrs["held_values"] = json.dumps({k: v for k, v in model.values.items() if k not in model.names},
                                                default=str)
            f.attrs["common_harmonics"] = model.harmonics if model.section.common != "none" else 0
            f.attrs["red_harmonics"] = model.likelihood.red_harmonics
            f.attrs["dataset_fingerprint"] = fingerprint(model.dataset)
    elif backend.shape != (walkers, model.ndim):
        raise InputError("the saved chains have another number of walkers", str(path))

    pool = None
    if section.workers > 1:
        import multiprocessing

        pool = multiprocessing.get_context("spawn").Pool(section.workers, initializer=_ignore_interrupts)
    interrupted = []
    previous_handler = None
    if threading.current_thread() is threading.main_thread():
        # Ctrl-C stops after the current step; the workers ignore it and finish that step
        previous_handler = signal.signal(signal.SIGINT, lambda *_: interrupted.append(True))
    try:
        with pool if pool is not None else nullcontext():
            run = _sample(model, backend, walkers, pool, resume, interrupted, progress)
    finally:
        if previous_handler is not None:
            signal.signal(signal.SIGINT, previous_handler)
    if interrupted:
        raise KeyboardInterrupt
    return run


def _ignore_interrupts():
    signal.signal(signal.SIGINT, signal.SIG_IGN)


def _sample(model, backend, walkers, pool, resume, interrupted, progress):
    section = model.section
    sampler = emcee.EnsembleSampler(walkers, model.ndim, model, backend=backend, pool=pool,
                                    parameter_names=None)
    if resume:
        start = backend.get_last_sample()
    else:
        rng = np.random.default_rng(section.seed)
        start = emcee.State(_starting_points(model, walkers, rng),
                            random_state=np.random.RandomState(section.seed % 2**32).get_state())
    done = int(backend.iteration)
    remaining = section.max_steps - done
    previous = np.inf
    converged = _converged(backend, section.autocorr_factor, previous, final=True)[0] if resume else False
    if remaining > 0 and not converged:
        try:
            for step, _ in enumerate(sampler.sample(start, iterations=remaining, progress=progress, store=True),
                                     start=done + 1):
                if interrupted:
                    break
                if step % CHECK_EVERY:
                    continue
                backend.flush()
                converged, previous = _converged(backend, section.autocorr_factor, previous)
                if converged:
                    break
        finally:
            backend.flush()  # also on Ctrl-C: every finished step is kept
    converged, _ = _converged(backend, section.autocorr_factor, np.inf, final=True)
    return FitRun(
        chain=backend.get_chain(),
        log_prob=backend.get_log_prob(),
        acceptance_fraction=float(np.mean(backend.accepted / max(backend.iteration, 1))),
        autocorr_time=_autocorr(backend),
        converged=converged,
        steps=int(backend.iteration),
    )


def _autocorr(backend) -> np.ndarray:
    """Integrated autocorrelation times (NaN where the chain is too short or stuck to say)."""
    with np.errstate(invalid="ignore", divide="ignore"):
        return backend.get_autocorr_time(tol=0)


def _converged(backend, factor: float, previous, final: bool = False):
    """``(converged, largest autocorrelation time)``: long enough and, while running, settled within 1%."""
    if backend.iteration < 2:
        return False, np.inf
    tau = float(np.max(_autocorr(backend)))
    long_enough = backend.iteration > factor * tau
    settled = final or abs(previous - tau) < 0.01 * tau
    return bool(long_enough and settled), tau


def read_chain(path) -> emcee.backends.HDFBackend:
    """The saved chains of a ``chains.h5``, read-only (emcee's HDF reader)."""
    return emcee.backends.HDFBackend(str(path), name=CHAIN_GROUP, read_only=True)


def default_burn(tau, steps: int) -> int:
    """Burn-in when none is set: two of the longest integrated autocorrelation times (half the
    chain while they are unknown), leaving at least one step."""
    tau = np.asarray(tau, dtype=float)
    burn = int(2 * np.max(tau)) if tau.size and np.all(np.isfinite(tau)) else steps // 2
    return max(min(burn, steps - 1), 0)


def posterior_draws(chain: np.ndarray, burn: int, thin: int = 1) -> np.ndarray:
    """Draws after burn-in, every ``thin``-th step of every walker: shape (draws, parameters)."""
    return chain[burn::thin].reshape(-1, chain.shape[-1])


def summarise(model: FitModel, run: FitRun) -> dict:
    """The contents of ``posterior.json``."""
    tau = np.asarray(run.autocorr_time)
    burn = default_burn(tau, run.steps) if model.section.burn is None else min(model.section.burn, run.steps - 1)
    samples = posterior_draws(run.chain, burn, model.section.thin)
    parameters = {}
    for i, name in enumerate(model.names):
        values = samples[:, i]
        parameters[name] = {
            "median": float(np.median(values)),
            "interval68": [float(v) for v in np.percentile(values, [15.865, 84.135])],
            "interval95": [float(v) for v in np.percentile(values, [2.5, 97.5])],
            "autocorr_time": float(tau[i]),
            **({"injected": model.injected[name]} if name in model.injected else {}),
        }
    effective = (run.steps - burn) * run.chain.shape[1] / float(np.max(tau)) if np.all(tau > 0) else 0.0
    return {
        "parameters": parameters,
        "acceptance_fraction": run.acceptance_fraction,
        "effective_samples": float(effective),
        "converged": run.converged,
        "steps": run.steps,
        "walkers": int(run.chain.shape[1]),
        "burn": int(burn),
        "thin": model.section.thin,
        "model": {"common": model.section.common, "red": model.red_mode, "white": model.section.white,
                  "binary": model.section.binary, "harmonics": model.harmonics},
    }

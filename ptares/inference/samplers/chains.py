"""The chains file every sampler writes, and the posterior summary every sampler gives.

``chains.h5`` holds emcee's HDF layout (group ``chains``: ``chain`` (steps,
chains, parameters), ``log_prob``, ``accepted``, ``iteration``) whatever the
sampler: the ensemble sampler's walkers or the Gibbs sampler's independent
chains.  Its attributes say what was fitted (``fit_identity``, so a resume never
mixes two fits), which sampler wrote it and how many of its first steps were the
sampler's adaptation.  Steps are written in batches, each with the random state
after its last step, so a run killed between batches resumes exactly where the
file ends.
"""

from __future__ import annotations

import hashlib
import json
import time
from dataclasses import dataclass
from typing import NamedTuple

import emcee
import h5py
import numpy as np

from ptares.dataset import fingerprint
from ptares.errors import InputError
from ptares.inference.parameters import COMMON_AMPLITUDE, memory
from ptares.inference.samplers.convergence import Convergence, assess
from ptares.inference.upper_limits import UPPER_LIMIT_CAVEAT, savage_dickey, upper_limit

__all__ = ["CHAIN_GROUP", "CheckpointedBackend", "FitRun", "open_chains", "read_chain", "posterior_draws", "summarise",
           "saved_draws", "finish"]

CHAIN_GROUP = "chains"


class CheckpointedBackend(emcee.backends.HDFBackend):
    """emcee's HDF backend, writing steps in batches: every ``seconds`` or ``steps``, and on :meth:`flush`.

    The random state saved with a batch is emcee's (a RandomState tuple) or, for
    samplers with their own generators, a JSON text kept in the ``random_state`` attribute.
    """

    def __init__(self, filename, name=CHAIN_GROUP, seconds: float = 10.0, steps: int = 1000):
        super().__init__(filename, name=name)
        self._buffer = []
        self._seconds, self._steps = seconds, steps
        self._last = time.monotonic()

    def save_step(self, state, accepted):
        self._buffer.append((state.coords.copy(), state.log_prob.copy(), np.asarray(accepted, float).copy(),
                             state.random_state))
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
            if isinstance(states[-1], str):
                g.attrs["random_state"] = states[-1]
            else:
                for i, value in enumerate(states[-1]):
                    g.attrs[f"random_state_{i}"] = value
            g.attrs["iteration"] = stop
        self._buffer.clear()

    def flush_only_on_request(self) -> None:
        """Write steps only at :meth:`flush` (for samplers whose random state is known only at the end of a batch)."""
        self._seconds, self._steps = np.inf, 2**62

    def saved_random_state(self) -> str:
        with self.open() as f:
            return str(f[self.name].attrs["random_state"])


@dataclass
class FitRun:
    chain: np.ndarray  #: (steps, chains or walkers, parameters)
    log_prob: np.ndarray  #: (steps, chains or walkers)
    acceptance_fraction: float
    convergence: Convergence
    steps: int
    sampler: str  #: "ensemble" or "gibbs"
    adaptation: int = 0  #: first steps spent adapting proposals (always burnt)

    @property
    def converged(self) -> bool:
        return self.convergence.converged

    @property
    def autocorr_time(self) -> np.ndarray:
        return self.convergence.autocorr_time


def _identity(model, sampler: str, chains: int) -> str:
    """A fingerprint of what is being sampled, so a resume never mixes two different fits or datasets."""
    settings = model.section.model_dump(exclude={"max_steps", "autocorr_factor", "effective_samples", "burn", "thin",
                                                 "workers", "walkers", "gibbs_chains", "sampler"})
    text = json.dumps({"names": model.names, "priors": [repr(p) for p in model.priors], "settings": settings,
                       "sampler": sampler, "chains": chains,
                       "values": model.values, "dataset": fingerprint(model.dataset)}, sort_keys=True, default=str)
    return hashlib.sha256(text.encode()).hexdigest()


def open_chains(model, path, sampler: str, chains: int, overwrite: bool, adaptation: int = 0):
    """``(backend, resume, adaptation)``: the backend of ``path``, whether it holds steps of this very fit to
    resume, and the adaptation steps of its sampler (a resumed file keeps at least the length it began with)."""
    identity = _identity(model, sampler, chains)
    backend = CheckpointedBackend(str(path))
    if path.exists() and not overwrite:
        try:
            with h5py.File(path, "r") as f:
                stored = f.attrs.get("fit_identity")
        except OSError as exc:
            raise InputError(f"cannot read the saved chains ({exc}); move the file away to start afresh", str(path)) from None
        if stored != identity:
            raise InputError("holds chains of a different fit; pass --overwrite or choose another --out", str(path))
        if backend.initialized and backend.iteration > 0:
            if backend.shape != (chains, model.ndim):
                raise InputError("the saved chains have another number of chains or walkers", str(path))
            # a rerun with a larger max_steps may adapt for longer (those steps are burnt too); never shorter
            with h5py.File(path, "a") as f:
                adaptation = max(int(f.attrs.get("adaptation_steps", 0)), adaptation)
                f.attrs["adaptation_steps"] = adaptation
            return backend, True, adaptation
    backend.reset(chains, model.ndim)
    with h5py.File(path, "a") as f:
        f.attrs["fit_identity"] = identity
        f.attrs["sampler"] = sampler
        f.attrs["adaptation_steps"] = adaptation
        f.attrs["parameter_names"] = model.names
        f.attrs["injected"] = json.dumps(model.injected)
        f.attrs["held_values"] = json.dumps({k: v for k, v in model.values.items() if k not in model.names}, default=str)
        f.attrs["common_harmonics"] = model.harmonics if model.section.common != "none" else 0
        f.attrs["red_harmonics"] = model.likelihood.red_harmonics
        # each modelled chromatic process: [name, harmonics, chromatic index of every pulsar]
        f.attrs["chromatic"] = json.dumps([[name, k, [float(c) for c in chi]] for name, k, chi in model.likelihood.chromatic])
        f.attrs["dataset_fingerprint"] = fingerprint(model.dataset)
    return backend, False, adaptation


def finish(model, backend, sampler: str, adaptation: int = 0) -> FitRun:
    """The run as saved, with the convergence rule's verdict (the configured burn-in, if any)."""
    section = model.section
    chain = backend.get_chain()
    verdict = assess(chain, section.autocorr_factor, section.effective_samples, independent=sampler == "gibbs",
                     burn=section.burn, adaptation=adaptation)
    return FitRun(
        chain=chain,
        log_prob=backend.get_log_prob(),
        acceptance_fraction=float(np.mean(backend.accepted / max(backend.iteration, 1))),
        convergence=verdict,
        steps=int(backend.iteration),
        sampler=sampler,
        adaptation=adaptation,
    )


def read_chain(path) -> emcee.backends.HDFBackend:
    """The saved chains of a ``chains.h5``, read-only (emcee's HDF reader)."""
    return emcee.backends.HDFBackend(str(path), name=CHAIN_GROUP, read_only=True)


def posterior_draws(chain: np.ndarray, burn: int, thin: int = 1) -> np.ndarray:
    """Draws after burn-in, every ``thin``-th step of every chain: shape (draws, parameters)."""
    return chain[burn::thin].reshape(-1, chain.shape[-1])


def saved_draws(path) -> np.ndarray:
    """Posterior draws of a chains file after its default burn-in (as in the fit's summary)."""
    backend = read_chain(path)
    with h5py.File(path, "r") as f:
        adaptation = int(f.attrs.get("adaptation_steps", 0))
        independent = f.attrs.get("sampler", "ensemble") == "gibbs"
    chain = backend.get_chain()
    verdict = assess(chain, 1.0, 0.0, independent=independent, adaptation=min(adaptation, max(chain.shape[0] - 2, 0)))
    return posterior_draws(chain, verdict.burn)


class EvidenceOf(NamedTuple):
    """A signal whose lg amplitude the summary gives a 95% upper limit and a Savage–Dickey ln B."""

    parameter: str  #: its lg amplitude parameter
    label: str  #: what it is, in words
    symbol: str  #: its amplitude's symbol
    column: str  #: results.csv column of its Savage–Dickey ln B


#: Summary key -> the signal it reports on (``posterior.json``, ``ptares fit``, the report page, campaign rows).
EVIDENCE = {
    "common_process": EvidenceOf(COMMON_AMPLITUDE, "common process", "A", "common_ln_savage_dickey"),
    "memory_step": EvidenceOf(memory("lg_strain"), "memory step", "h", "memory_ln_savage_dickey"),
}


def summarise(model, run: FitRun) -> dict:
    """The contents of ``posterior.json``: per parameter its median, intervals, autocorrelation
    time, effective samples (and split R-hat for independent chains); the convergence verdict and why."""
    verdict = run.convergence
    samples = posterior_draws(run.chain, verdict.burn, model.section.thin)
    parameters = {}
    for i, name in enumerate(model.names):
        values = samples[:, i]
        parameters[name] = {
            "median": float(np.median(values)),
            "interval68": [float(v) for v in np.percentile(values, [15.865, 84.135])],
            "interval95": [float(v) for v in np.percentile(values, [2.5, 97.5])],
            "autocorr_time": float(verdict.autocorr_time[i]),
            "effective_samples": float(verdict.effective_samples[i]),
            **({"rhat": float(verdict.rhat[i])} if verdict.rhat is not None else {}),
            **({"injected": model.injected[name]} if name in model.injected else {}),
        }
    def evidence(name):  # the upper limit and the evidence for a signal from its lg amplitude, with their caveats
        if name not in model.names:
            return {}
        i = model.names.index(name)
        values, effective = samples[:, i], float(verdict.effective_samples[i])
        limit = upper_limit(values, effective)
        limit["amplitude"] = 10.0 ** limit["value"]
        limit["caveat"] = UPPER_LIMIT_CAVEAT
        return {"upper_limit": limit, "savage_dickey": savage_dickey(values, model.priors[i], effective)}

    return {
        "parameters": parameters,
        **{key: evidence(signal.parameter) for key, signal in EVIDENCE.items()},
        "sampler": run.sampler,
        "acceptance_fraction": run.acceptance_fraction,
        "effective_samples": float(np.min(verdict.effective_samples)) if verdict.effective_samples.size else 0.0,
        "max_rhat": float(np.max(verdict.rhat)) if verdict.rhat is not None else None,
        "converged": verdict.converged,
        "not_converged_because": verdict.reason or None,
        "steps": run.steps,
        "walkers": int(run.chain.shape[1]),
        "burn": int(verdict.burn),
        "adaptation": int(run.adaptation),
        "thin": model.section.thin,
        "model": {"common": model.section.common, "red": model.red_mode, "white": model.section.white,
                  "binary": model.section.binary, "memory": model.section.memory,
                  "harmonics": model.harmonics},
    }

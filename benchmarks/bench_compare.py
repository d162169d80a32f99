"""Bayes factor and Hellings–Downs posterior of a real-size array (never asserted).

Case: 100 pulsars, 15 years of fortnightly TOAs (~390 per pulsar, 0.5 us errors), a background
at A = 1.5e-15 (``--amplitude``), each pulsar's power-law red noise free on 30 frequencies,
white noise at its injected value (as after a noise stage), a common process on 14
frequencies with amplitude and index free: 202 parameters.
Target: the Hellings–Downs posterior and the Bayes factor in at most 15 minutes on 2 cores
(``ptares.compare`` with two Gibbs chains side by side, then two worker processes for the
Hellings–Downs likelihoods; one BLAS thread per process).  When reweighting the uncorrelated
posterior leaves too few effective samples, ``compare`` fits the Hellings–Downs model directly and
bridges both posteriors; the time of each part is printed.

Side by side in the same run, the reference for the Hellings–Downs Gibbs iteration: the same
sampler as it was, with five common-process steps and the coefficients drawn after a fresh
factorisation (now three steps, and the draw reuses the factors of the chain's point).  The script also prints how one Hellings–Downs likelihood grows with the
pulsars (the (P x 2K)^3 / 3 factorisation of the core).

Run: ``python benchmarks/bench_compare.py`` (``--quick``: 20 pulsars, a smoke run).
"""

from __future__ import annotations

import argparse
import tempfile
import time
from pathlib import Path

import numpy as np
from common import best_of, gibbs_iteration_seconds

import ptares
from ptares.inference.model import FitModel
from ptares.inputs.config import Config, FitSection
from ptares.threads import thread_limits

TARGET_SECONDS = 15 * 60


def array(pulsars: int, amplitude: float, seed: int = 4) -> Config:
    return Config.model_validate({
        "run": {"seed": seed},
        "array": {"random": {"count": pulsars}},
        "observing": {"start": 53000, "span": 15.0, "cadence": 14.0, "toa_error": 0.5},
        "noise": {"red": {"amplitude": {"log_uniform": [1e-16, 1e-14]}, "spectral_index": {"uniform": [1.5, 5.0]},
                          "harmonics": 30}},
        "gwb": {"amplitude": amplitude, "harmonics": 14},
    })


FIT = {"harmonics": 14, "red": "free", "red_harmonics": 30, "white": "injected", "sampler": "gibbs", "gibbs_chains": 2,
       "workers": 2, "seed": 1, "max_steps": 100_000}


def hellings_downs_model(data) -> FitModel:
    return FitModel(data, FitSection(**{**FIT, "common": "hellings-downs"}))


def likelihood_seconds(data) -> float:
    model = hellings_downs_model(data)
    values = model.parameters(model.sample_prior(np.random.default_rng(0), 1)[0])
    return best_of(lambda: model.log_likelihood_at(values), repeats=3)


def iteration_seconds(data, repeats: int = 3) -> tuple:
    """Seconds per Hellings–Downs Gibbs iteration: (this sampler, the reference)."""
    from ptares.inference.samplers import gibbs

    model = hellings_downs_model(data)
    start = model.sample_prior(np.random.default_rng(0), 1)[0]
    ours = gibbs_iteration_seconds(model, start, repeats)
    kept = gibbs.CORRELATED_MOVES
    gibbs.CORRELATED_MOVES = gibbs.MOVES["common"]
    try:
        reference = gibbs_iteration_seconds(model, start, repeats, keep_factors=False)
    finally:
        gibbs.CORRELATED_MOVES = kept
    return ours, reference


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true")
    parser.add_argument("--amplitude", type=float, default=1.5e-15,
                        help="injected background (default 1.5e-15: first evidence; at 3e-15 ln B is near 90 and the "
                             "reweighting is flagged unreliable, as it should be)")
    args = parser.parse_args()
    pulsars = 20 if args.quick else 100
    with thread_limits(1):
        print("one Hellings-Downs likelihood (14 common frequencies, one thread):")
        for count in ((10, 20) if args.quick else (25, 50, 100)):
            print(f"  {count:3d} pulsars: {likelihood_seconds(ptares.simulate(array(count, args.amplitude))):7.3f} s")
        print("  grows as (P x 2K_common)^3 / 3 (one Cholesky factorisation) plus P x n_TOA x 2K (projections)")
        data = ptares.simulate(array(pulsars, args.amplitude))
        per_iteration, reference = iteration_seconds(data)
    print(f"one Hellings-Downs Gibbs iteration: {per_iteration:.2f} s; reference (five steps, factors not kept) "
          f"{reference:.2f} s: {reference / per_iteration:.1f} x faster")
    with tempfile.TemporaryDirectory() as scratch:
        start = time.perf_counter()
        result = ptares.compare(data, Path(scratch) / "compare", fit_options=FIT, workers=2, samples=2000, verbose=True,
                                figures=False, threads=1)
        seconds = time.perf_counter() - start
    content = result.content
    entry = content["patterns"]["hellings-downs"]
    fit = result.fit.summary
    print(f"\n{pulsars} pulsars, {len(result.fit.names)} parameters: compare took {seconds / 60:.1f} min "
          f"({seconds / TARGET_SECONDS:.2f} x the 15-minute target), by {entry['method']}")
    print(f"  uncorrelated fit: {fit['steps']} iterations x {fit['walkers']} chains, converged {fit['converged']}, "
          f"fewest effective samples {fit['effective_samples']:.0f}")
    if entry["method"] == "bridge":
        direct = entry["direct_fit"]
        print(f"  Hellings-Downs fit: {direct['steps']} iterations x 2 chains, converged {direct['converged']}, "
              f"fewest effective samples {direct['effective_samples']:.0f}")
        old = entry["reweighting"]
        print(f"  reweighting alone: ln B = {old['ln_bayes_factor']:.2f} +/- {old['ln_bayes_factor_error']:.2f} "
              f"from {old['effective_samples']:.0f} effective samples")
        print(f"  bridge: effective draws {entry['bridge']['effective_correlated']:.0f} (Hellings-Downs) and "
              f"{entry['bridge']['effective_uncorrelated']:.0f} (uncorrelated)")
    print(f"  ln B (Hellings-Downs vs uncorrelated) = {content['ln_bayes_factor']:.2f} +/- "
          f"{content['ln_bayes_factor_error']:.2f}, reliable {content['reliable']}")
    amplitude = content["posterior"]["common_lg_amplitude"]
    print(f"  Hellings-Downs posterior: common_lg_amplitude {amplitude['median']:.2f} "
          f"[{amplitude['interval68'][0]:.2f}, {amplitude['interval68'][1]:.2f}] (injected {np.log10(args.amplitude):.2f})")
    if content["warning"]:
        print(f"  warning: {content['warning']}")


if __name__ == "__main__":
    main()

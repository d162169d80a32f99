"""Fits at the scale of a real array: time to 1000 effective samples of every parameter (never asserted).

Cases (each pulsar ~390 TOAs over 15 yr; 30 red-noise and 14 common-process frequencies):

* 50 pulsars, each pulsar's power-law red noise and white-noise scale free, an
  uncorrelated common process (152 parameters): target at most 20 minutes on 2 cores;
* 30 pulsars, the same with Hellings–Downs correlations (92 parameters): same target.

Both run the blocked Gibbs sampler with two chains side by side (``workers = 2``),
one BLAS thread per process, until every parameter has 1000 effective samples,
the chains are longer than 50 autocorrelation times and every split R-hat < 1.01.
The script first times single Gibbs iterations at several sizes and prints how the
cost grows with pulsars, TOAs and frequencies.

Run: ``python benchmarks/bench_gibbs.py`` (``--quick``: 10 pulsars, a smoke run;
``--case uncorrelated`` or ``--case hellings-downs`` for one case).
"""

from __future__ import annotations

import argparse
import json
import tempfile
import time
from pathlib import Path

import numpy as np
from common import gibbs_iteration_seconds

import ptares
from ptares.inference.model import FitModel
from ptares.inputs.config import Config, FitSection
from ptares.threads import thread_limits

TARGET_SECONDS = 20 * 60


def array(pulsars: int, seed: int = 1, cadence_days: float = 14.0, span_years: float = 15.0) -> Config:
    return Config.model_validate({
        "run": {"seed": seed},
        "array": {"random": {"count": pulsars}},
        "observing": {"start": 53000, "span": span_years, "cadence": cadence_days, "toa_error": 0.5},
        "noise": {"white": {"scale": {"uniform": [0.8, 1.5]}},
                  "red": {"amplitude": {"log_uniform": [1e-16, 1e-14]}, "spectral_index": {"uniform": [1.5, 5.0]},
                          "harmonics": 30}},
        "gwb": {"amplitude": 3e-15, "harmonics": 14},
    })


def section(common: str, **extra) -> FitSection:
    return FitSection(common=common, harmonics=14, red="free", red_harmonics=30, white="free", sampler="gibbs",
                      fixed={"white_lg_quadrature": -np.inf}, gibbs_chains=2, workers=2, effective_samples=1000,
                      max_steps=200_000, seed=1, **extra)


def iteration_seconds(data, common: str, repeats: int = 20) -> float:
    model = FitModel(data, section(common))
    x = model.sample_prior(np.random.default_rng(0), 1)[0]
    x[[model.names.index(n) for n in model.names if n.startswith("white_scale")]] = 1.0
    return gibbs_iteration_seconds(model, x, repeats)


def scaling():
    print("cost of one Gibbs iteration (one chain, one thread):")
    base = None
    for pulsars in (10, 25, 50):
        data = ptares.simulate(array(pulsars))
        seconds = iteration_seconds(data, "uncorrelated")
        base = base or seconds / pulsars
        print(f"  uncorrelated, {pulsars:3d} pulsars x ~390 TOAs: {1e3 * seconds:7.1f} ms "
              f"({seconds / pulsars / base:.2f} x the 10-pulsar cost per pulsar)")
    data = ptares.simulate(array(25, cadence_days=7.0))
    print(f"  uncorrelated,  25 pulsars x ~780 TOAs: {1e3 * iteration_seconds(data, 'uncorrelated'):7.1f} ms")
    for pulsars in (10, 20, 30):
        data = ptares.simulate(array(pulsars))
        print(f"  hellings-downs, {pulsars:2d} pulsars: {1e3 * iteration_seconds(data, 'hellings-downs'):7.1f} ms")
    print("  grows as: uncorrelated ~ P x (n_TOA x 2K_red [white steps] + (2K_red)^3 [red steps]);\n"
          "  Hellings-Downs adds the common-process steps, each one factorisation of the (P x 2K_common)^2 core.")


def run_case(pulsars: int, common: str):
    data = ptares.simulate(array(pulsars))
    with tempfile.TemporaryDirectory() as scratch:
        start = time.perf_counter()
        result = ptares.fit(data, Path(scratch) / "fit", settings=section(common).model_dump(exclude_defaults=True),
                            figures=False, verbose=True, threads=1)
        seconds = time.perf_counter() - start
    summary = result.summary
    entries = summary["parameters"]
    fewest = min(e["effective_samples"] for e in entries.values())
    print(f"{pulsars} pulsars, {common}, {len(entries)} parameters: {seconds / 60:.1f} min "
          f"({seconds / TARGET_SECONDS:.2f} x the 20-minute target), {summary['steps']} iterations x "
          f"{summary['walkers']} chains, fewest effective samples {fewest:.0f}, largest R-hat {summary['max_rhat']:.3f}, "
          f"converged: {summary['converged']}" + ("" if summary["converged"] else f" ({summary['not_converged_because']})"))
    slowest = sorted(entries, key=lambda n: -entries[n]["autocorr_time"])[:4]
    print("  longest autocorrelation times: " + ", ".join(f"{n} {entries[n]['autocorr_time']:.1f}" for n in slowest))
    common_entry = entries.get("common_lg_amplitude")
    if common_entry:
        print(f"  common_lg_amplitude {common_entry['median']:.2f} (injected {np.log10(3e-15):.2f}), "
              f"68% {json.dumps([round(v, 2) for v in common_entry['interval68']])}")


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true")
    parser.add_argument("--case", choices=["uncorrelated", "hellings-downs", "both"], default="both")
    args = parser.parse_args()
    with thread_limits(1):
        if args.quick:
            run_case(10, "uncorrelated")
            return
        scaling()
    if args.case in ("uncorrelated", "both"):
        run_case(50, "uncorrelated")
    if args.case in ("hellings-downs", "both"):
        run_case(30, "hellings-downs")


if __name__ == "__main__":
    main()

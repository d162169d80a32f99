"""Cost of realistic noise in the likelihood, measured side by side in one run (never asserted).

Case: 30 pulsars x 500 epochs x 4 sub-bands (2000 TOAs per pulsar, 60 000 in all, one observing
system at 1100, 1300, 1500 and 1700 MHz), red noise on 30 frequencies and a Hellings–Downs common
process on 14.  "Plain": white noise and red noise; "realistic": the same plus epoch jitter
(per-epoch Sherman–Morrison in the white-noise products) and dispersion-measure noise on 30
frequencies (60 more columns per pulsar, scaled by (1400 MHz / nu)^2).  Target: realistic at most
2x plain.

Two kinds of call are timed, each side by side:
* white noise (its quadrature, and the jitter) changing from call to call, so every pulsar's products
  F^T N'^-1 F are recomputed (a fit of the white noise: the costly case);
* white noise fixed (products cached; a fit of red, chromatic and common noise).

The script also prints how the realistic call grows with the TOAs (250, 500, 1000 epochs) and
with the pulsars (15, 30): the products grow linearly in the TOAs and in the pulsars, the
common-process factorisation as (P x 2 x 14)^3 / 3.

BLAS runs on one thread on both sides (environment set before numpy is imported).

Run: ``python benchmarks/bench_noise.py`` (``--quick``: 15 pulsars x 250 epochs).
"""

from __future__ import annotations

import os

for _name in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS", "MKL_NUM_THREADS"):
    os.environ[_name] = "1"  # before numpy is imported, which reads them once

import argparse

import numpy as np
from common import best_of

from ptares.inference.likelihood import Likelihood
from ptares.inputs.config import Config
from ptares.simulation.simulate import simulate

SPAN_YEARS = 15.0
BANDS = [1100.0, 1300.0, 1500.0, 1700.0]


def array(pulsars: int, epochs: int) -> Config:
    return Config.model_validate({
        "run": {"seed": 3},
        "array": {"random": {"count": pulsars}},
        "observing": {"start": 53000, "span": SPAN_YEARS, "cadence": SPAN_YEARS * 365.25 / (epochs - 1), "toa_error": 0.5,
                      "systems": [{"name": "Wide", "frequencies": BANDS}]},
        "noise": {"red": {"amplitude": 1e-15, "harmonics": 30}, "white": {"jitter": 0.2},
                  "dispersion": {"amplitude": 5e-15, "harmonics": 30}},
        "gwb": {"amplitude": 2.4e-15, "harmonics": 14},
    })


def calls(data, realistic: bool):
    """(a call with new white noise each time, a call with the white noise fixed) of one likelihood."""
    count = len(data.pulsars)
    chromatic = (("dispersion", 30, 2.0),) if realistic else ()
    likelihood = Likelihood(data, 14, 30, "hellings-downs", chromatic=chromatic)
    red_amplitude, red_index = np.full(count, 1e-15), np.full(count, 4.0)
    extra = {}
    if realistic:
        extra = {"chromatic": {"dispersion": (np.full(count, 5e-15), np.full(count, 3.0))},
                 "white_jitter": [2e-7] * count}
    scales = iter(np.linspace(0.9, 1.1, 10_000))

    def changing():  # a new quadrature (and jitter): nothing cached, no shortcut for a pure scale
        scale = next(scales)
        jitter = {"white_jitter": [2e-7 * scale] * count} if realistic else {}
        likelihood(np.ones(count), np.full(count, 1e-7 * scale), red_amplitude, red_index, 2.4e-15, 13 / 3,
                   **{**extra, **jitter})

    def fixed():
        likelihood(np.ones(count), np.zeros(count), red_amplitude, red_index, 2.4e-15, 13 / 3, **extra)

    return changing, fixed


def main():
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--quick", action="store_true", help="15 pulsars x 250 epochs")
    args = parser.parse_args()
    pulsars, epochs = (15, 250) if args.quick else (30, 500)
    data = simulate(array(pulsars, epochs))
    toas = sum(p.mjd.size for p in data.pulsars)
    print(f"{pulsars} pulsars x {epochs} epochs x {len(BANDS)} sub-bands: {toas} TOAs")
    plain_changing, plain_fixed = calls(data, realistic=False)
    real_changing, real_fixed = calls(data, realistic=True)
    for label, plain, real in (("white noise changing", plain_changing, real_changing),
                               ("white noise fixed", plain_fixed, real_fixed)):
        plain(), real()  # caches and first-call costs
        t_plain, t_real = best_of(plain, 5), best_of(real, 5)
        print(f"{label:22s} plain {t_plain * 1e3:8.1f} ms   realistic {t_real * 1e3:8.1f} ms   "
              f"ratio {t_real / t_plain:.2f} (target <= 2)")
    print("growth of the realistic call with white noise changing:")
    for p_count, e_count in ((pulsars, epochs // 2), (pulsars, epochs), (pulsars, epochs * 2), (pulsars // 2, epochs)):
        changing, _ = calls(simulate(array(p_count, e_count)), realistic=True)
        changing()
        print(f"  {p_count:3d} pulsars x {e_count:5d} epochs: {best_of(changing, 3) * 1e3:8.1f} ms")


if __name__ == "__main__":
    main()

"""Campaign throughput, as ratios measured side by side in one run (never asserted).

* 16 tasks of about a second each (simulate and correlate a 25-pulsar array) with
  2 local workers against 1 (target: at least 1.8x on 2 cores);
* Dask's overhead per task: 20 near-empty tasks on a dask.distributed
  LocalCluster (2 processes) against the local engine.

Run: ``python benchmarks/bench_sweep.py``
"""

from __future__ import annotations

import shutil
import tempfile
import time
from pathlib import Path

from ptares.campaign.engines import single_threaded_children
from ptares.campaign.sweep import run_sweep

HEAVY = """
[array]
random = {count = 25}
[observing]
span = "12 yr"
cadence = "5 d"
[gwb]
amplitude = 2e-15
[correlate]
scrambles = 50
phase_shifts = 50
fit_trials = 100
[sweep]
realisations = 8
[sweep.axes]
"gwb.amplitude" = [1e-15, 3e-15]
"""
LIGHT = """
[array]
random = {count = 2}
[observing]
span = "2 yr"
cadence = "60 d"
[sweep]
realisations = 20
stages = ["simulate"]
"""


def timed(config: Path, out: Path, **engine) -> float:
    shutil.rmtree(out, ignore_errors=True)
    start = time.perf_counter()
    run_sweep(config, out, progress=False, **engine)
    return time.perf_counter() - start


def main():
    scratch = Path(tempfile.mkdtemp())
    heavy, light = scratch / "heavy.toml", scratch / "light.toml"
    heavy.write_text(HEAVY)
    light.write_text(LIGHT)
    timed(light, scratch / "warm", workers=1)  # compile numba caches once
    one = timed(heavy, scratch / "one", workers=1)
    two = timed(heavy, scratch / "two", workers=2)
    local = timed(light, scratch / "local", workers=2)
    from distributed import Client, LocalCluster

    with single_threaded_children(), \
            LocalCluster(n_workers=2, threads_per_worker=1, processes=True, dashboard_address=None) as cluster, \
            Client(cluster) as client:
        client.run(lambda: None)
        dask = timed(light, scratch / "dask", scheduler=client)
    shutil.rmtree(scratch)
    print("16 tasks of about a second: simulate + correlate, 25 pulsars")
    print(f"1 worker   {one:7.2f} s   ({one / 16:.2f} s per task)")
    print(f"2 workers  {two:7.2f} s")
    print(f"speed-up 2 workers / 1      {one / two:6.2f}x   (target: at least 1.8x)")
    print("20 near-empty tasks")
    print(f"local engine, 2 workers     {local:6.2f} s  ({local / 20 * 1e3:.0f} ms per task, pool start-up included)")
    print(f"dask LocalCluster, 2 procs  {dask:6.2f} s  ({dask / 20 * 1e3:.0f} ms per task, cluster already up)")
    print(f"dask overhead per task      {(dask - local) / 20 * 1e3:+6.0f} ms against the local engine")


if __name__ == "__main__":
    main()

"""Injection-recovery campaigns: many simulate -> correlate -> fit runs over a grid of parameters.

A sweep is a config with a ``[sweep]`` table.  Its axes and realisations
expand into tasks, each a complete config whose seed is derived from the sweep
seed and the task's index (numpy ``SeedSequence``), so a task gives the same
row on any machine, engine or worker count.  Workers (local processes, or a
Dask cluster) only compute; this process writes each finished task's row to
``DIR/tasks/<index>.json`` atomically, and ``DIR/results.csv`` is rebuilt from
those files.  Rerunning the same command skips every task that has a file, so a
campaign killed at any point resumes without losing or repeating a row.  A task
that fails is recorded with its error and the campaign goes on.

Workers run with one thread each (BLAS, numba), which keeps results identical
whatever the number of workers and avoids oversubscribing the cores.
"""

from __future__ import annotations

import copy
import csv
import io
import itertools
import json
import os
import tempfile
import time
from concurrent.futures import ProcessPoolExecutor, as_completed
from concurrent.futures.process import BrokenProcessPool
from contextlib import contextmanager
from dataclasses import dataclass
from pathlib import Path

import numpy as np
from tqdm.auto import tqdm

from .config import Config, SweepSection, _validation_error, read_toml
from .dataset import atomic_path
from .errors import InputError

__all__ = ["Task", "load_sweep", "expand", "run_task", "run_sweep", "read_results", "single_threaded_children", "COLUMNS"]

#: Threading variables set to 1 in worker processes.
SINGLE_THREAD = {"OPENBLAS_NUM_THREADS": "1", "OMP_NUM_THREADS": "1", "MKL_NUM_THREADS": "1", "NUMBA_NUM_THREADS": "1"}

#: results.csv columns after the axis columns.
COLUMNS = [
    "injected_amplitude", "injected_gamma", "injected_correlation",
    "hd_amplitude2", "hd_sigma", "hd_snr", "hd_p_value", "monopole_snr", "dipole_snr",
    "fit_chi2", "fit_p_calibrated",
    "gwb_log10_A_median", "gwb_log10_A_low68", "gwb_log10_A_high68", "gwb_log10_A_quantile",
    "gwb_gamma_median", "gwb_gamma_quantile", "fit_converged",
    "status", "error", "run_time",
]


@dataclass(frozen=True)
class Task:
    index: int
    realisation: int
    seed: int
    values: tuple  #: ((dotted key, value), ...) of this task's axes
    raw: dict  #: the task's complete config, as TOML-like data
    stages: tuple


def _merge(base: dict, top: dict) -> dict:
    """``top`` over ``base``, table by table."""
    merged = copy.deepcopy(base)
    for key, value in top.items():
        if isinstance(value, dict) and isinstance(merged.get(key), dict):
            merged[key] = _merge(merged[key], value)
        else:
            merged[key] = copy.deepcopy(value)
    return merged


def _set(raw: dict, dotted: str, value) -> None:
    node = raw
    parts = dotted.split(".")
    for part in parts[:-1]:
        node = node.setdefault(part, {})
        if not isinstance(node, dict):
            raise InputError(f"{part!r} is not a table", f"sweep.axes.{dotted}")
    node[parts[-1]] = value


def load_sweep(path) -> tuple:
    """``(base raw config without [sweep], SweepSection)`` from a sweep file (and its ``base``)."""
    path = Path(path)
    raw = read_toml(path)
    if "sweep" not in raw:
        raise InputError("has no [sweep] table", str(path))
    try:
        section = SweepSection.model_validate(raw["sweep"])
    except Exception as exc:  # pydantic ValidationError
        if hasattr(exc, "errors"):
            raise _validation_error(exc, raw, str(path), ("sweep",)) from None
        raise
    base = {k: v for k, v in raw.items() if k != "sweep"}
    if section.base:
        base_path = (path.parent / section.base) if not Path(section.base).is_absolute() else Path(section.base)
        base = _merge({k: v for k, v in read_toml(base_path).items() if k != "sweep"}, base)
    return base, section


def derive_seed(seed: int, index: int) -> int:
    """The seed of task ``index``: a child of the sweep seed (numpy SeedSequence spawn key)."""
    return int(np.random.SeedSequence(seed, spawn_key=(index,)).generate_state(1, np.uint64)[0] >> np.uint64(1))


def expand(base: dict, section: SweepSection, where: str = "sweep") -> list:
    """Every task of the sweep, in index order.  Axis keys that do not exist in a config are errors."""
    keys = list(section.axes)
    if "run.seed" in keys:
        raise InputError("run.seed cannot be an axis: task seeds derive from [sweep] seed", f"{where}.axes")
    lists = [section.axes[k] for k in keys]
    combinations = list(itertools.product(*lists)) if section.grid else list(zip(*lists))
    if not keys:
        combinations = [()]
    tasks = []
    for c, combination in enumerate(combinations):
        raw = copy.deepcopy(base)
        for key, value in zip(keys, combination):
            _set(raw, key, value)
        if c == 0:
            _check_keys(raw, keys, where)
        for r in range(section.realisations):
            index = c * section.realisations + r
            seed = derive_seed(section.seed, index)
            task_raw = copy.deepcopy(raw)
            task_raw.setdefault("run", {})["seed"] = seed
            tasks.append(Task(index, r, seed, tuple(zip(keys, combination)), task_raw, section.stages))
    return tasks


def _check_keys(raw: dict, keys, where: str) -> None:
    """An axis naming a key the config does not have would fail every task: say so at once."""
    try:
        Config.model_validate(raw)
    except InputError:
        return
    except Exception as exc:
        for error in exc.errors():
            if error["type"] == "extra_forbidden":
                dotted = ".".join(str(p) for p in error["loc"])
                raise InputError(f"unknown config key {dotted!r}", f"{where}.axes") from None


def _summary_of_fit(model, run, summary) -> dict:
    row = {"fit_converged": summary["converged"]}
    samples = run.chain[summary["burn"] :: model.section.thin].reshape(-1, model.ndim)
    for name in ("gwb_log10_A", "gwb_gamma"):
        if name in model.names:
            entry = summary["parameters"][name]
            row[f"{name}_median"] = entry["median"]
            if name == "gwb_log10_A":
                row[f"{name}_low68"], row[f"{name}_high68"] = entry["interval68"]
            if name in model.injected:
                row[f"{name}_quantile"] = float(np.mean(samples[:, model.names.index(name)] < model.injected[name]))
    return row


def run_task(task: Task) -> dict:
    """Run one task and return its row; never raises (a failure is a row with its error)."""
    from .correlate import correlate
    from .fit_model import FitModel
    from .noise_model import noise_from_dataset
    from .sampling import run_sampler, summarise
    from .simulate import simulate

    started = time.perf_counter()
    row = {"index": task.index, "realisation": task.realisation, "seed": task.seed}
    row.update({f"axis:{key}": value for key, value in task.values})
    try:
        config = Config.model_validate(task.raw)
        data = simulate(config)
        gwb = data.signals.get("gwb", {})
        row.update(injected_amplitude=float(gwb.get("amplitude", 0.0)), injected_gamma=gwb.get("gamma"),
                   injected_correlation=gwb.get("correlation"))
        if "correlate" in task.stages:
            result = correlate(data, noise_from_dataset(data), config.correlate)
            hd = result.estimates["hellings-downs"]
            row.update(hd_amplitude2=hd["amplitude2"], hd_sigma=hd["sigma"], hd_snr=hd["snr"],
                       hd_p_value=hd.get("p_value"), monopole_snr=result.estimates["monopole"]["snr"],
                       dipole_snr=result.estimates["dipole"]["snr"], fit_chi2=result.fit["chi2"],
                       fit_p_calibrated=result.fit.get("p_calibrated"))
        if "fit" in task.stages:
            model = FitModel(data, config.fit)
            with tempfile.TemporaryDirectory() as scratch:
                run = run_sampler(model, Path(scratch) / "chains.h5")
            row.update(_summary_of_fit(model, run, summarise(model, run)))
        row["status"] = "ok"
    except Exception as exc:  # any failure of one task is recorded, never fatal to the campaign
        message = exc.line() if isinstance(exc, InputError) else f"{type(exc).__name__}: {exc}"
        row.update(status="failed", error=" ".join(str(message).split()))
    row["run_time"] = round(time.perf_counter() - started, 3)
    return row


@contextmanager
def single_threaded_children():
    """Environment for child processes (workers) with one BLAS, OpenMP and numba thread each."""
    saved = {k: os.environ.get(k) for k in SINGLE_THREAD}
    os.environ.update(SINGLE_THREAD)
    try:
        yield
    finally:
        for key, value in saved.items():
            if value is None:
                os.environ.pop(key, None)
            else:
                os.environ[key] = value


def _local(tasks, workers):
    import multiprocessing

    with single_threaded_children():
        with ProcessPoolExecutor(max_workers=workers, mp_context=multiprocessing.get_context("spawn")) as pool:
            futures = [pool.submit(run_task, task) for task in tasks]
            try:
                for future in as_completed(futures):
                    try:
                        yield future.result()
                    except BrokenProcessPool:
                        raise InputError("a worker process died (out of memory?); finished tasks are kept, "
                                         "rerun the same command to continue", "sweep") from None
            except BaseException:
                for future in futures:
                    future.cancel()
                raise


def _dask(tasks, scheduler):
    from distributed import Client
    from distributed import as_completed as dask_completed

    if isinstance(scheduler, str):
        try:
            client = Client(scheduler, timeout="20s")
        except OSError as exc:
            raise InputError(f"cannot reach the Dask scheduler ({exc})", scheduler) from None
    else:
        client = scheduler
    try:
        futures = client.map(run_task, tasks, pure=False)
        for future in dask_completed(futures):
            yield future.result()
    finally:
        if isinstance(scheduler, str):
            client.close()


def _task_file(out: Path, index: int) -> Path:
    return out / "tasks" / f"{index:06d}.json"


def _finished(out: Path) -> dict:
    rows = {}
    for path in sorted((out / "tasks").glob("*.json")):
        try:
            row = json.loads(path.read_text())
            rows[int(row["index"])] = row
        except (ValueError, KeyError, OSError):
            continue  # an unreadable file is not a finished task: the task runs again
    return rows


def _fingerprint(base: dict, section: SweepSection) -> dict:
    return {"axes": section.axes, "grid": section.grid, "realisations": section.realisations,
            "stages": list(section.stages), "seed": section.seed,
            "base": json.loads(json.dumps(base, sort_keys=True, default=str))}


def write_results(out: Path, rows: list) -> Path:
    """``results.csv``: one row per task, in index order (atomically replaced)."""
    axis_columns = sorted({k for row in rows for k in row if k.startswith("axis:")})
    columns = ["index", "realisation", "seed"] + axis_columns + COLUMNS
    buffer = io.StringIO()
    writer = csv.DictWriter(buffer, fieldnames=columns, extrasaction="ignore")
    writer.writeheader()

    def cell(value):
        if value is None:
            return ""
        return json.dumps(value) if isinstance(value, (list, dict)) else value  # list-valued axes as JSON

    for row in sorted(rows, key=lambda r: r["index"]):
        writer.writerow({k: cell(row.get(k)) for k in columns})
    with atomic_path(out / "results.csv") as temporary:
        temporary.write_text(buffer.getvalue())
    return out / "results.csv"


def read_results(path) -> list:
    """Rows of a ``results.csv`` as dicts (numbers as floats where they parse)."""
    rows = []
    with open(path, newline="") as handle:
        for row in csv.DictReader(handle):
            parsed = {}
            for key, value in row.items():
                try:
                    parsed[key] = float(value)
                except ValueError:
                    parsed[key] = value
            rows.append(parsed)
    return rows


def run_sweep(path, out, workers: int = 1, scheduler=None, overwrite: bool = False, progress: bool = True) -> list:
    """Run (or resume) the sweep of the config at ``path`` into ``out``; returns all rows."""
    base, section = load_sweep(path)
    tasks = expand(base, section, where=f"{path}: sweep")
    out = Path(out)
    out.mkdir(parents=True, exist_ok=True)
    fingerprint = _fingerprint(base, section)
    record = out / "sweep.json"
    if record.exists() and not overwrite:
        if json.loads(record.read_text()) != json.loads(json.dumps(fingerprint, default=str)):
            raise InputError("holds a different sweep; pass --overwrite or choose another --out", str(out))
    elif overwrite:
        for old in (out / "tasks").glob("*.json"):
            old.unlink()
    with atomic_path(record) as temporary:
        temporary.write_text(json.dumps(fingerprint, indent=1, default=str))
    (out / "tasks").mkdir(exist_ok=True)

    done = _finished(out)
    pending = [t for t in tasks if t.index not in done]
    scheduler = scheduler or (section.dask.scheduler if section.dask else None)
    rows = iter(()) if not pending else (_dask(pending, scheduler) if scheduler else _local(pending, workers))
    failed = sum(row["status"] != "ok" for row in done.values())
    bar = tqdm(total=len(tasks), initial=len(done), desc="tasks", unit="task", disable=None if progress else True)
    bar.set_postfix(failed=failed)
    last_table = time.monotonic()
    try:
        for row in rows:
            with atomic_path(_task_file(out, row["index"])) as temporary:
                temporary.write_text(json.dumps(row, default=str))
            done[row["index"]] = row
            failed += row["status"] != "ok"
            bar.update(1)
            bar.set_postfix(failed=failed)
            if time.monotonic() - last_table > 30:  # keep results.csv current during long campaigns
                write_results(out, list(done.values()))
                last_table = time.monotonic()
    finally:
        bar.close()
        write_results(out, list(done.values()))
    return [done[i] for i in sorted(done)]

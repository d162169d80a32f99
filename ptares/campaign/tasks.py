"""Campaign tasks: expand a ``[sweep]`` grid into complete configs and run one of them.

A sweep is a config with a ``[sweep]`` table.  Its axes and realisations
expand into tasks, each a complete config whose seed is derived from the sweep
seed and the task's index (numpy ``SeedSequence``), so a task gives the same
row on any machine, engine or worker count.
"""

from __future__ import annotations

import copy
import itertools
import math
import tempfile
import time
from dataclasses import dataclass
from pathlib import Path

import numpy as np
from pydantic import ValidationError

from ptares.errors import InputError
from ptares.inference.parameters import COMMON_AMPLITUDE, COMMON_INDEX, memory
from ptares.inputs.config import (
    Config,
    config_from_data,
    SweepSection,
    merge_tables,
    message_for,
    read_toml,
    validation_error,
)

__all__ = ["Task", "load_sweep", "derive_seed", "expand", "run_task"]


#: results.csv columns after the axis columns.
COLUMNS = [
    "injected_amplitude", "injected_spectral_index", "injected_correlation",
    "hd_amplitude2", "hd_sigma", "hd_snr", "hd_p_value", "hd_sigma_signal", "hd_p_exact", "monopole_snr", "dipole_snr",
    "hd_curve_chi2", "hd_curve_p_calibrated",
    "common_lg_amplitude.median", "common_lg_amplitude.low68", "common_lg_amplitude.high68",
    "common_lg_amplitude.quantile", "common_lg_amplitude.upper95", "common_ln_savage_dickey",
    "common_spectral_index.median", "common_spectral_index.quantile", "fit_converged",
    "memory_lg_strain.median", "memory_lg_strain.low68", "memory_lg_strain.high68", "memory_lg_strain.quantile",
    "memory_lg_strain.upper95", "memory_ln_savage_dickey",
    "memory_epoch.median", "memory_epoch.low68", "memory_epoch.high68", "memory_epoch.quantile",
    "ln_bayes_factor", "ln_bayes_factor_error", "bayes_effective_samples", "bayes_reliable",
    "status", "error", "run_time",
]
#: Fit parameters whose median (and, but for the index, 68% interval) and quantile of the injected value go
#: into results.csv.
SUMMARISED = (COMMON_AMPLITUDE, COMMON_INDEX, memory("lg_strain"), memory("epoch"))
assert all(f"{name}.quantile" in COLUMNS for name in SUMMARISED)


@dataclass(frozen=True)
class Task:
    index: int
    realisation: int
    seed: int
    values: tuple  #: ((dotted key, value), ...) of this task's axes
    raw: dict  #: the task's complete config, as TOML-like data
    stages: tuple
    source: str = ""  #: the sweep file, absolute: the task config's files are relative to its folder


def _set(raw: dict, dotted: str, value) -> None:
    """Set the config key ``dotted`` of ``raw``; a number picks an entry of an array of tables
    (``wave.0.amplitude``: the first ``[[wave]]``'s amplitude)."""
    node = raw
    parts = dotted.split(".")
    for part in parts[:-1]:
        if isinstance(node, list):
            if not (part.isdigit() and int(part) < len(node)):
                raise InputError(f"{part!r} is not an entry of the {len(node)} tables there (count from 0)",
                                 f"sweep.axes.{dotted}")
            node = node[int(part)]
        elif part.isdigit():
            raise InputError(f"{part!r} picks an entry of an array of tables, but there is none here (give the "
                             "tables in the base config)", f"sweep.axes.{dotted}")
        else:
            node = node.setdefault(part, {})
        if not isinstance(node, (dict, list)):
            raise InputError(f"{part!r} is not a table", f"sweep.axes.{dotted}")
    if not isinstance(node, dict):
        raise InputError(f"{parts[-2]!r} is an array of tables: name one entry by its number", f"sweep.axes.{dotted}")
    node[parts[-1]] = value


def load_sweep(path) -> tuple:
    """``(base raw config without [sweep], SweepSection)`` from a sweep file (and its ``base``)."""
    path = Path(path)
    return sweep_from_data(read_toml(path), path.parent, str(path))


def sweep_from_data(raw: dict, folder: Path, where: str) -> tuple:
    """``(base raw config without [sweep], SweepSection)`` from a config's data; a ``base`` file is
    relative to ``folder``; ``where`` names the source in messages."""
    if "sweep" not in raw:
        raise InputError("has no [sweep] table", where)
    try:
        section = SweepSection.model_validate(raw["sweep"])
    except ValidationError as exc:
        raise validation_error(exc, raw, where, ("sweep",)) from None
    base = {k: v for k, v in raw.items() if k != "sweep"}
    if section.base:
        base_path = Path(section.base) if Path(section.base).is_absolute() else folder / section.base
        base = merge_tables({k: v for k, v in read_toml(base_path).items() if k != "sweep"}, base)
    return base, section


def derive_seed(seed: int, index: int) -> int:
    """The seed of task ``index``: a child of the sweep seed (numpy SeedSequence spawn key)."""
    return int(np.random.SeedSequence(seed, spawn_key=(index,)).generate_state(1, np.uint64)[0] >> np.uint64(1))


#: Most tasks of one campaign.
MAX_TASKS = 1_000_000
#: Up to this many combinations of axis values every one is validated before the campaign runs; beyond it,
#: the first combination using each axis value (a config validates in about 15 ms).
FULL_CHECK = 2000


def expand(base: dict, section: SweepSection, where: str = "sweep", source=None) -> list:
    """Every task of the sweep, in index order.  Every combination of axis values is validated first: a task
    config that would fail (an unknown axis key, a value out of range) is an error naming the axis.  ``source``:
    the sweep file, whose folder the files a task config names (a wave's table) are relative to, wherever the
    task runs (default: none, the working folder)."""
    source = str(Path(source).resolve()) if source is not None else ""
    keys = list(section.axes)
    if "run.seed" in keys:
        raise InputError("run.seed cannot be an axis: task seeds derive from [sweep] seed", f"{where}.axes")
    lists = [section.axes[k] for k in keys]
    count = (math.prod(len(v) for v in lists) if section.grid else min((len(v) for v in lists), default=1))
    if count * section.realisations > MAX_TASKS:  # counted, not expanded
        raise InputError(f"{len(lists)} axes and {section.realisations} realisations make "
                         f"{count * section.realisations} tasks, more than ptares runs in one campaign ({MAX_TASKS})",
                         f"{where}.axes")
    combinations = list(itertools.product(*lists)) if section.grid else list(zip(*lists))
    if not keys:
        combinations = [()]
    tasks = []
    seen = [set() for _ in keys]  # axis values met so far (as text: values may be lists)
    for c, combination in enumerate(combinations):
        raw = copy.deepcopy(base)
        for key, value in zip(keys, combination):
            _set(raw, key, value)
        fresh = [repr(v) not in seen[a] for a, v in enumerate(combination)]
        for a, v in enumerate(combination):
            seen[a].add(repr(v))
        if len(combinations) <= FULL_CHECK or c == 0 or any(fresh):
            _check_task_config(raw, keys, combination, where)
        for r in range(section.realisations):
            index = c * section.realisations + r
            seed = derive_seed(section.seed, index)
            task_raw = copy.deepcopy(raw)
            task_raw.setdefault("run", {})["seed"] = seed
            tasks.append(Task(index, r, seed, tuple(zip(keys, combination)), task_raw, section.stages, source))
    return tasks


def _check_task_config(raw: dict, keys, combination, where: str) -> None:
    """A task config that does not validate would fail: refuse the campaign at once, naming the axis and its
    value when the fault is in one, else the base config's key (with the axis values that led to it)."""
    source = where.rpartition(": ")[0] if ": " in where else where
    settings = ", ".join(f"{k} = {v!r}" for k, v in zip(keys, combination))
    try:
        Config.model_validate(raw)
    except InputError as exc:  # a cross-field check of the whole config
        message = f"{exc.message} (at {settings})" if keys else exc.message
        raise InputError(message, f"{source}: {exc.where}" if exc.where else source) from None
    except ValidationError as exc:
        errors = exc.errors()
        error = next((e for e in errors if ".".join(str(p) for p in e["loc"]) in keys), errors[0])
        dotted = ".".join(str(p) for p in error["loc"])
        if dotted in keys:
            if error["type"] == "extra_forbidden":
                message = message_for(error, tuple(error["loc"]), dotted).replace("unknown key", f"unknown config key {dotted!r}", 1)
                raise InputError(message, f"{where}.axes") from None
            value = dict(zip(keys, combination))[dotted]
            raise InputError(f"value {value!r}: {message_for(error, tuple(error['loc']), dotted)}",
                             f"{where}.axes.{dotted}") from None
        line = validation_error(exc, raw, source)
        raise InputError(f"{line.message} (at {settings})" if keys else line.message, line.where) from None


def _summary_of_fit(model, run, summary) -> dict:
    from ptares.inference.samplers.chains import EVIDENCE, posterior_draws

    row = {"fit_converged": summary["converged"]}
    samples = posterior_draws(run.chain, summary["burn"], summary["thin"])
    for name in SUMMARISED:
        if name in model.names:
            entry = summary["parameters"][name]
            row[f"{name}.median"] = entry["median"]
            if name != COMMON_INDEX:
                row[f"{name}.low68"], row[f"{name}.high68"] = entry["interval68"]
            if name in model.injected:
                row[f"{name}.quantile"] = float(np.mean(samples[:, model.names.index(name)] < model.injected[name]))
    for key, signal in EVIDENCE.items():
        entry = summary.get(key) or {}
        if entry:  # the 95% upper limit (prior-dependent) and the Savage-Dickey ln B (None when only bounded)
            row[f"{signal.parameter}.upper95"] = entry["upper_limit"]["value"]
            row[signal.column] = entry["savage_dickey"]["ln_bayes_factor"]
    return row


def _fitted(data, section) -> tuple:
    """``(model, run, summary)`` of a fit of ``data`` with ``section``, its chains in a scratch file."""
    from ptares.inference.model import FitModel
    from ptares.inference.samplers import run_sampler
    from ptares.inference.samplers.chains import summarise

    model = FitModel(data, section)
    with tempfile.TemporaryDirectory() as scratch:
        run = run_sampler(model, Path(scratch) / "chains.h5")
    return model, run, summarise(model, run)


def _bayes_factor(data, config: Config, fitted: dict) -> dict:
    """The compare stage's columns: the uncorrelated fit reweighted by the Hellings–Downs likelihood in this
    process, and a direct fit bridged to it where ``[compare] direct_fit`` asks for one; ``fitted`` holds
    the fit stage's ``_fitted`` result under its ``common``, reused when it is one of these."""
    from ptares.campaign.comparison import add_direct_fit, compare_models, direct_patterns

    def fitted_as(common):
        return fitted.get(common) or _fitted(data, config.fit.model_copy(update={"common": common}))

    model, run, summary = fitted_as("uncorrelated")
    settings = config.compare.model_copy(update={"workers": 1})
    comparison = compare_models(model, run.chain, summary, settings, seed=config.fit.seed)
    for pattern in direct_patterns(comparison, settings):
        _, direct, direct_summary = fitted_as(pattern)
        add_direct_fit(comparison, model, pattern, direct.chain, direct_summary, settings, seed=config.fit.seed)
    content = comparison.content
    return {"ln_bayes_factor": content["ln_bayes_factor"], "ln_bayes_factor_error": content["ln_bayes_factor_error"],
            "bayes_effective_samples": content["effective_samples"], "bayes_reliable": content["reliable"]}


def run_task(task: Task) -> dict:
    """Run one task and return its row; never raises (a failure is a row with its error)."""
    from ptares.correlation.analysis import correlate
    from ptares.correlation.noise import noise_from_dataset
    from ptares.simulation.simulate import simulate

    started = time.perf_counter()
    row = {"index": task.index, "realisation": task.realisation, "seed": task.seed}
    row.update({f"axis:{key}": value for key, value in task.values})
    try:
        config = config_from_data(task.raw, "config", Path(task.source) if task.source else None)
        data = simulate(config)
        gwb = data.signals.get("gwb", {})
        row.update(injected_amplitude=float(gwb.get("amplitude", 0.0)), injected_spectral_index=gwb.get("spectral_index"),
                   injected_correlation=gwb.get("correlation"))
        if "correlate" in task.stages:
            result = correlate(data, noise_from_dataset(data), config.correlate)
            hd = result.estimates["hellings-downs"]
            row.update(hd_amplitude2=hd["amplitude2"], hd_sigma=hd["sigma"], hd_snr=hd["snr"],
                       hd_p_value=hd.get("p_value"), hd_sigma_signal=hd["sigma_signal"], hd_p_exact=hd["p_exact"],
                       monopole_snr=result.estimates["monopole"]["snr"],
                       dipole_snr=result.estimates["dipole"]["snr"], hd_curve_chi2=result.fit["chi2"],
                       hd_curve_p_calibrated=result.fit.get("p_calibrated"))
        fitted = {}
        if "fit" in task.stages:
            fitted[config.fit.common] = _fitted(data, config.fit)
            row.update(_summary_of_fit(*fitted[config.fit.common]))
        if "compare" in task.stages:
            row.update(_bayes_factor(data, config, fitted))
        row["status"] = "ok"
    except Exception as exc:  # any failure of one task is recorded, never fatal to the campaign
        if isinstance(exc, ValidationError):
            exc = validation_error(exc, task.raw, "config")
        message = exc.line() if isinstance(exc, InputError) else f"{type(exc).__name__}: {exc}"
        row.update(status="failed", error=" ".join(str(message).split()))
    row["run_time"] = round(time.perf_counter() - started, 3)
    return row

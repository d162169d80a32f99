"""The per-pulsar noise stage: every pulsar's white and red noise fitted alone, in parallel.

Each pulsar is one task on the campaign engines (local processes or Dask): a fit of
that pulsar alone with no common process, its chains in ``DIR/pulsars/<name>.h5``
and its summary in ``DIR/pulsars/<name>.json`` (both kept, so a rerun resumes
unfinished chains and skips finished pulsars).  ``DIR/pulsar_noise.json`` gathers
the summaries (:mod:`ptares.inference.pulsar_noise`) for ``[fit] pulsar_noise``.
"""

from __future__ import annotations

import json
import time
from dataclasses import dataclass
from pathlib import Path

from ptares.dataset import Dataset, atomic_path
from ptares.errors import InputError
from ptares.inference.parameters import PER_PULSAR, SYSTEM_SEPARATOR, split
from ptares.inference.pulsar_noise import NOISE_FILE, pulsar_fingerprint, summary_of_draws
from ptares.inputs.config import FitSection

__all__ = ["NoiseTask", "noise_tasks", "run_noise_task", "run_noise_stage"]


@dataclass
class NoiseTask:
    pulsar: str
    dataset: Dataset  #: this pulsar alone
    section: FitSection
    chains: Path
    fingerprint: str


def _single_pulsar_section(section: FitSection, name: str) -> FitSection:
    """The array fit's settings for one pulsar: its own noise free, no common process or binary, emcee in this
    process; of ``fixed`` and ``priors`` only the keys of this pulsar's noise (or every pulsar's) are kept."""
    settings = section.model_dump(exclude={"pulsars", "common", "binary", "sampler", "pulsar_noise", "fixed", "priors",
                                           "workers"})

    def own(key: str) -> bool:  # this pulsar's noise (or one of its observing systems'), or every pulsar's
        quantity, owner = split(key)
        return quantity in PER_PULSAR and (owner is None or owner.partition(SYSTEM_SEPARATOR)[0] == name)

    fixed = {k: v for k, v in section.fixed.items() if own(k)}
    priors = {k: v for k, v in section.priors.items() if own(k)}
    settings.update(pulsars=(name,), common="none", binary=False, sampler="ensemble", fixed=fixed, workers=1,
                    priors={k: v.model_dump(exclude_none=True) for k, v in priors.items()},
                    red=section.red or "free")
    return FitSection.model_validate(settings)


def noise_tasks(dataset: Dataset, section: FitSection, out: Path) -> list:
    """One task per pulsar (of ``[fit] pulsars``, or all)."""
    names = section.pulsars or dataset.names
    missing = [n for n in names if n not in dataset.names]
    if missing:
        raise InputError(f"the dataset has no pulsar(s) {', '.join(missing)}", "fit.pulsars")
    tasks = []
    for name in names:
        tasks.append(NoiseTask(name, dataset.subset([name]), _single_pulsar_section(section, name),
                               out / "pulsars" / f"{name}.h5", pulsar_fingerprint(dataset, name)))
    return tasks


def run_noise_task(task: NoiseTask) -> dict:
    """Fit one pulsar's noise; returns its row (never raises: a failure is a row with its error)."""
    from ptares.inference.model import FitModel
    from ptares.inference.samplers import run_sampler
    from ptares.inference.samplers.chains import posterior_draws, summarise

    started = time.perf_counter()
    row = {"pulsar": task.pulsar, "fingerprint": task.fingerprint}
    try:
        model = FitModel(task.dataset, task.section)
        run = run_sampler(model, task.chains)
        summary = summarise(model, run)
        draws = posterior_draws(run.chain, summary["burn"], summary["thin"])
        row["parameters"] = {}
        for i, name in enumerate(model.names):
            row["parameters"][name] = {**summary_of_draws(draws[:, i]),
                                       "effective_samples": summary["parameters"][name]["effective_samples"],
                                       **({"injected": model.injected[name]} if name in model.injected else {})}
        row.update(converged=summary["converged"], not_converged_because=summary["not_converged_because"],
                   steps=summary["steps"], status="ok")
    except Exception as exc:  # one pulsar's failure is recorded, never fatal to the stage
        message = exc.line() if isinstance(exc, InputError) else f"{type(exc).__name__}: {exc}"
        row.update(status="failed", error=" ".join(str(message).split()))
    row["run_time"] = round(time.perf_counter() - started, 3)
    return row


def _finished(out: Path, tasks) -> dict:
    rows = {}
    for task in tasks:
        path = out / "pulsars" / f"{task.pulsar}.json"
        try:
            row = json.loads(path.read_text())
        except (OSError, ValueError):
            continue  # missing or unreadable: the pulsar runs again
        if row.get("fingerprint") == task.fingerprint and row.get("status") == "ok":
            rows[task.pulsar] = row
    return rows


def run_noise_stage(dataset: Dataset, section: FitSection, out, workers: int = 1, scheduler=None,
                    overwrite: bool = False, progress: bool = True) -> dict:
    """Fit every pulsar's noise alone into ``out``; returns the contents of ``pulsar_noise.json``."""
    from tqdm.auto import tqdm

    from ptares.campaign.engines import run_locally, run_on_dask

    out = Path(out)
    tasks = noise_tasks(dataset, section, out)
    settings = json.loads(section.model_dump_json(exclude={"pulsars", "workers", "pulsar_noise"}))
    record = out / "noise_stage.json"
    if record.exists() and not overwrite and json.loads(record.read_text()) != settings:
        raise InputError("holds a noise stage with other settings; pass --overwrite or choose another --out", str(out))
    (out / "pulsars").mkdir(parents=True, exist_ok=True)
    if overwrite:
        for old in (out / "pulsars").glob("*"):
            old.unlink()
    with atomic_path(record) as temporary:
        temporary.write_text(json.dumps(settings, indent=1))
    done = _finished(out, tasks)
    pending = [t for t in tasks if t.pulsar not in done]
    rows = iter(()) if not pending else (
        run_on_dask(pending, scheduler, function=run_noise_task) if scheduler
        else run_locally(pending, workers, function=run_noise_task))
    bar = tqdm(total=len(tasks), initial=len(done), desc="pulsars", unit="pulsar", disable=None if progress else True)
    try:
        for row in rows:
            with atomic_path(out / "pulsars" / f"{row['pulsar']}.json") as temporary:
                temporary.write_text(json.dumps(row, default=str))
            done[row["pulsar"]] = row
            bar.update(1)
    finally:
        bar.close()
    content = {"pulsars": {t.pulsar: done[t.pulsar] for t in tasks if t.pulsar in done},
               "model": {"white": section.white, "red": section.red or "free", "red_harmonics": section.red_harmonics}}
    with atomic_path(out / NOISE_FILE) as temporary:
        temporary.write_text(json.dumps(content, indent=1, default=str))
    return content

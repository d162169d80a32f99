"""Injection-recovery campaigns: many simulate -> correlate -> fit runs over a grid of parameters.

This process writes each finished task's row to ``DIR/tasks/<index>.json``
atomically, and ``DIR/results.csv`` is rebuilt from those files.  Rerunning the
same command skips every task that has a file, so a campaign killed at any
point resumes without losing or repeating a row.  A task that fails is recorded
with its error and the campaign goes on.
"""

from __future__ import annotations

import csv
import io
import json
import time
from pathlib import Path

from tqdm.auto import tqdm

from ptares.campaign.engines import run_locally, run_on_dask
from ptares.campaign.tasks import COLUMNS, expand, load_sweep
from ptares.dataset import atomic_path
from ptares.errors import InputError
from ptares.inputs.config import SweepSection

__all__ = ["write_results", "read_results", "run_sweep"]


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
    tasks = expand(base, section, where=f"{path}: sweep", source=path)
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
    rows = iter(()) if not pending else (run_on_dask(pending, scheduler) if scheduler else run_locally(pending, workers))
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

"""The Python interface: :func:`simulate`, :func:`correlate`, :func:`fit`, :func:`compare`, :func:`pulsar_noise`
and :func:`sweep`.

Each function does what the command of the same name does, and the commands are
thin shells over them.  A config may be a :class:`~ptares.inputs.config.Config`, a
TOML file or a dict of sections; wherever a config value is a quantity, an astropy
Quantity is accepted (converted to the key's default unit; one that does not convert
is an :class:`~ptares.errors.InputError` naming the key).  Settings are keyword
arguments named like the keys of ``[correlate]`` and ``[fit]``, or a dict or TOML file
of such a table.  Files are written only when ``out`` is given; each function
returns an object whose ``repr`` is a short summary.  The keyword ``threads`` of each
sets the BLAS and numba threads of the process and of each worker it starts (default
:data:`~ptares.threads.DEFAULT_THREADS`, one: see :mod:`ptares.threads`).  Example::

    import astropy.units as u
    import ptares

    data = ptares.simulate({"array": {"random": {"count": 20}},
                            "observing": {"span": 15 * u.yr, "cadence": 14 * u.day, "toa_error": 300 * u.ns},
                            "gwb": {"amplitude": 2e-15}}, seed=3)
    data                                             # Dataset: 20 pulsars, ... TOAs, span 15.00 yr, signals ...
    result = ptares.correlate(data, phase_shifts=100, scrambles=0)
    result.estimates["hellings-downs"]["snr"]
    posterior = ptares.fit(data, max_steps=2000, out="fit-out")   # chains resume when run again
    posterior.samples(posterior.names[0])            # (n,) draws after burn-in
    bayes = ptares.compare(data, fit_options={"max_steps": 2000})   # ln B, Hellings-Downs against uncorrelated
    campaign = ptares.sweep("campaign.toml", "campaign-out", workers=4)
"""

from __future__ import annotations

import contextlib
import contextvars
import copy
import functools
import inspect
import json
import os
import sys
import tempfile
from collections.abc import Mapping
from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING

import numpy as np

from ptares.dataset import Dataset, describe_signal, load_dataset
from ptares.errors import InputError
from ptares.inputs.config import (
    Config,
    CorrelateSection,
    FitSection,
    config_from_data,
    config_text,
    load_config,
    load_section,
    merge_tables,
    read_toml,
    validation_error,
    with_overrides,
)
from ptares.locking import folder_lock
from ptares.threads import thread_count, thread_limits

if TYPE_CHECKING:  # imported when first used: it pulls in scipy.stats
    from ptares.correlation.analysis import CorrelationResult
    from ptares.forecast.sensitivity import SensitivityResult
    from ptares.report.page import Report

if sys.version_info >= (3, 11):
    import tomllib
else:  # pragma: no cover
    import tomli as tomllib

__all__ = ["simulate", "correlate", "sensitivity", "report", "fit", "compare", "pulsar_noise", "sweep", "describe", "import_tables", "export_tables",
           "FitResult", "ComparisonResult", "NoiseResult", "SweepResult", "Interrupted", "config_from"]

#: The command's words while the command line runs (else empty): messages then name options as ``--overwrite``
#: rather than ``overwrite=True``, and ``provenance.json`` records the command.
COMMAND_LINE = contextvars.ContextVar("ptares_command_line", default=())

DATASET_OUTPUTS = ("dataset.h5", "residuals.png", "sky.png", "correlation.png")
CORRELATE_OUTPUTS = ("correlations.json", "correlations.png", "nulls.png")


class Interrupted(KeyboardInterrupt):
    """A resumable run (fit chains, sweep tasks) stopped by Ctrl-C; ``kept`` is where its work so far is kept."""

    def __init__(self, kept: Path):
        super().__init__(str(kept))
        self.kept = Path(kept)


def _flag(name: str) -> str:
    """How a message names the switch ``name``: ``--name`` on the command line, ``name=True`` in Python."""
    return f"--{name.replace('_', '-')}" if COMMAND_LINE.get() else f"{name}=True"


def _option(name: str) -> str:
    """How a message names the option ``name``: ``--name`` on the command line, ``name`` in Python."""
    return f"--{name.replace('_', '-')}" if COMMAND_LINE.get() else name


def _threaded(function):
    """Run ``function`` under :func:`~ptares.threads.thread_limits` of its ``threads`` keyword (None: the default),
    holding its output folder ``out`` (when given) against other runs (:func:`~ptares.locking.folder_lock`), with
    the extra figure formats of a ``figure_formats`` keyword (PDF, SVG: :func:`~ptares.figures.common.extra_formats`),
    and recording in ``out/provenance.json`` what ran, when, with which version and seed."""
    signature = inspect.signature(function)

    @functools.wraps(function)
    def run(*args, **kwargs):
        formats = kwargs.pop("figure_formats", None)
        with thread_limits(thread_count(kwargs.get("threads"), _option("threads"))), with_figure_formats(formats):
            arguments = signature.bind(*args, **kwargs).arguments
            out = arguments.get("out")
            if out is None or not isinstance(out, (str, os.PathLike)):
                return function(*args, **kwargs)
            with folder_lock(out):
                result = function(*args, **kwargs)
                _record_provenance(Path(out), function.__name__, arguments, result)
                return result

    return run


def with_figure_formats(formats):
    """The context that adds ``formats`` (None, or a sequence of "pdf" and "svg") to every saved figure."""
    if formats is None:
        return contextlib.nullcontext()
    from ptares.figures.common import EXTRA_FORMATS, extra_formats

    formats = [formats] if isinstance(formats, str) else list(formats)
    for kind in formats:
        if kind not in EXTRA_FORMATS + ("png",):
            raise InputError(f"unknown figure format {kind!r}; choose from {', '.join(EXTRA_FORMATS)} (PNG is always written)",
                             _option("figure_formats"))
    return extra_formats([k for k in formats if k != "png"])


def _seed_of(result):
    """The seed a run used, where its result says: a dataset's, a fit's or campaign's sampler seed, the nulls' seed."""
    for holder in (result, getattr(result, "dataset", None)):
        if isinstance(getattr(holder, "seed", None), int):
            return holder.seed
    for mapping in (getattr(result, "summary", None), getattr(result, "settings", None), getattr(result, "content", None)):
        if isinstance(mapping, Mapping) and isinstance(mapping.get("seed"), int):
            return mapping["seed"]
    return None


def _record_provenance(out: Path, name: str, arguments: dict, result) -> None:
    """Write ``out/provenance.json``: the command (or Python call), ptares version, time, seed and source."""
    import datetime
    import shlex

    from ptares.dataset import write_json
    from ptares.version import __version__

    if not out.is_dir():
        return
    if COMMAND_LINE.get():
        command = " ".join(shlex.quote(a) for a in COMMAND_LINE.get())
    else:
        command = f"ptares.{name}(...) from Python"
    source = next(iter(arguments.values()), None)
    record = {
        "command": command,
        "kind": name,
        "ptares_version": __version__,
        "finished": datetime.datetime.now(datetime.timezone.utc).isoformat(timespec="seconds"),
        "seed": _seed_of(result),
        "source": str(source) if isinstance(source, (str, os.PathLike)) else type(source).__name__,
        "python": sys.version.split()[0],
        "threads": thread_count(arguments.get("threads")),
    }
    try:
        write_json(out / "provenance.json", record)
    except OSError as exc:
        raise _cannot_write(exc, out) from None


def _say(verbose: bool, line: str) -> None:
    if verbose:
        print(line)


def check_output_directory(out, overwrite: bool, outputs=DATASET_OUTPUTS) -> Path:
    """Fail before any work if ``out`` cannot take the ``outputs`` or would lose earlier ones; returns ``Path(out)``."""
    out = Path(out)
    existing = out
    while not existing.exists():
        existing = existing.parent
    if not existing.is_dir():
        raise InputError("exists and is not a directory", str(existing))
    if not os.access(existing, os.W_OK | os.X_OK):
        raise InputError("directory is not writable", str(existing))
    if not overwrite:
        present = [name for name in outputs if (out / name).exists()]
        if outputs is DATASET_OUTPUTS:
            present += sorted(p.name for p in out.glob("residuals-*.png"))
        if present:
            raise InputError(f"already holds {', '.join(present)}; pass {_flag('overwrite')} to replace them", str(out))
    return out


def _cannot_write(exc: OSError, out: Path) -> InputError:
    return InputError(f"cannot write outputs ({exc.strerror or exc})", str(out))


# ---------------------------------------------------------------- configs from files, dicts and Quantities


def _plain(value):
    """A validated config's dump as TOML-like data: no None, draws as ``{kind = [low, high]}``, lists for tuples."""
    if isinstance(value, dict):
        if set(value) == {"kind", "low", "high"}:
            return {value["kind"]: [value["low"], value["high"]]}
        return {k: _plain(v) for k, v in value.items() if v is not None}
    if isinstance(value, (list, tuple)):
        return [_plain(v) for v in value]
    return value


def _raw_config(config: Config) -> dict:
    """The data a config was made from: its TOML text when it has one, else its validated values."""
    if config.source_text:
        return tomllib.loads(config.source_text)
    return _plain(config.model_dump())


def _validated(raw: dict, where: str, path: Path | None) -> Config:
    config = config_from_data(raw, where, path)
    try:
        text = config_text(raw)
        tomllib.loads(text)
    except (TypeError, ValueError):
        text = ""  # only the record in the dataset is lost: the config itself is valid
    config._text = text
    return config


def config_from(source, **sections) -> Config:
    """A validated :class:`Config` from a Config, a TOML file or a dict of sections, with ``sections`` merged in.

    ``sections`` are whole tables by name (``gwb={"amplitude": 1e-15}``), merged key by
    key into the source's.  Values may be astropy Quantities anywhere the config takes a
    quantity.  Faults are :class:`InputError` naming the key (``config: observing.span``
    for a dict, the file's name for a file).
    """
    if isinstance(source, Config):
        if not sections:
            return source
        raw, path = _raw_config(source), source.source_path
        where = str(path) if path else "config"
    elif isinstance(source, Mapping):
        raw, path, where = dict(source), None, "config"
    elif isinstance(source, (str, os.PathLike)):
        path = Path(source)
        if not sections:
            return load_config(path)
        raw, where = read_toml(path), str(path)
    else:
        raise InputError(f"expected a Config, a config file or a dict of sections, got {type(source).__name__}", "config")
    return _validated(merge_tables(raw, sections), where, path)


def _section(model, table: str, settings, options: dict, default=None):
    """``(section, folder)``: ``settings`` (None, a section, a dict, a TOML file) with keyword ``options`` applied.

    ``folder`` is the settings file's folder (paths in it are relative to it), else None.
    """
    from pydantic import ValidationError

    folder = None
    if settings is None:
        section = default if default is not None else model()
    elif isinstance(settings, model):
        section = settings
    elif isinstance(settings, Mapping):
        raw = dict(settings[table]) if isinstance(settings.get(table), Mapping) else dict(settings)
        try:
            section = model.model_validate(raw)
        except ValidationError as exc:
            raise validation_error(exc, {table: raw}, "settings", (table,)) from None
    elif isinstance(settings, (str, os.PathLike)):
        section = load_section(settings, table, model)
        folder = Path(settings).parent
    else:
        raise InputError(f"expected a dict, a TOML file or {model.__name__}, got {type(settings).__name__}", "settings")
    if options:
        if COMMAND_LINE.get():
            section = with_overrides(section, options)
        else:
            try:
                section = model.model_validate({**section.model_dump(), **options})
            except ValidationError as exc:
                raise validation_error(exc, {table: options}, "", (table,)) from None
    return section, folder


def _tables(settings, names) -> tuple:
    """``settings`` (None, a TOML file or a dict of tables) split into one entry per table in ``names``:
    the file (or the table) where it has that table, else None; a file with none of them is an error."""
    if settings is None:
        return (None,) * len(names)
    if isinstance(settings, Mapping):
        return tuple({name: settings[name]} if name in settings else None for name in names)
    if isinstance(settings, (str, os.PathLike)):
        raw = read_toml(settings)
        if not any(name in raw for name in names):
            raise InputError(f"has no {' or '.join(f'[{n}]' for n in names)} table", str(settings))
        return tuple(settings if name in raw else None for name in names)
    raise InputError(f"expected a dict of tables or a TOML file, got {type(settings).__name__}", "settings")


def _dataset(dataset) -> Dataset:
    if isinstance(dataset, Dataset):
        return dataset
    if isinstance(dataset, (str, os.PathLike)):
        return load_dataset(dataset)
    raise InputError(f"expected a Dataset or the path of a dataset.h5, got {type(dataset).__name__}", "dataset")


# ---------------------------------------------------------------- simulate


@_threaded
def simulate(config, *, seed: int | None = None, out=None, overwrite: bool = False, figures: bool = True,
             verbose: bool = False, threads: int | None = None, **sections) -> Dataset:
    """Simulate the array a config describes; returns the :class:`Dataset` (residuals in s, epochs in MJD).

    ``config``: a :class:`Config`, a TOML file, or a dict of sections such as
    ``{"array": {"random": {"count": 20}}, "observing": {"span": 15 * u.yr}, "gwb": {"amplitude": 2e-15}}``;
    astropy Quantities are accepted wherever a config value is.  ``sections`` merge
    whole tables into it (``gwb={"amplitude": 0}``).  ``seed`` overrides ``[run] seed``
    (with neither, a fresh one is drawn and recorded).  With ``out``, writes
    ``out/dataset.h5`` and, unless ``figures=False``, the figures; earlier outputs are
    replaced only with ``overwrite=True``.  ``verbose`` shows progress and the files written.
    ``threads``: BLAS and numba threads (None: :data:`~ptares.threads.DEFAULT_THREADS`).
    """
    from ptares.simulation.simulate import simulate as simulate_config

    config = config_from(config, **sections)
    if out is not None:
        out = check_output_directory(out, overwrite)
    dataset = simulate_config(config, seed=seed, progress=verbose)
    if out is not None:
        from ptares.dataset import write_dataset

        try:
            out.mkdir(parents=True, exist_ok=True)
            target = write_dataset(dataset, out / "dataset.h5")
            _say(verbose, f"wrote {target} ({len(dataset.pulsars)} pulsars, seed {dataset.seed})")
            if figures:
                from ptares.figures.dataset import dataset_figures

                for path in dataset_figures(dataset, out):
                    _say(verbose, f"wrote {path}")
        except OSError as exc:
            raise _cannot_write(exc, out) from None
    return dataset


# ---------------------------------------------------------------- correlate


def _noise_models(dataset: Dataset, section: CorrelateSection, folder: Path | None):
    from ptares.correlation.noise import noise_from_dataset, noise_from_values

    if section.noise == "injected":
        return noise_from_dataset(dataset)
    if section.noise == "posterior":
        from ptares.inference.posterior_noise import noise_from_chains

        chains = Path(section.chains)
        if folder is not None and not chains.is_absolute():
            chains = folder / chains
        return noise_from_chains(dataset, chains, section.draws, section.seed)
    # the [correlate.noise_values] keys are noise_from_values' arguments; quadratures there are in microseconds
    values = section.noise_values
    given = {name: getattr(values, name) for name in type(values).model_fields if name != "pulsars"}
    given["white_quadrature"] *= 1e-6
    pulsars = {
        name: {k: v * 1e-6 if k == "white_quadrature" else v for k, v in table.given().items()}
        for name, table in values.pulsars.items()
    }
    return noise_from_values(dataset, **given, pulsars=pulsars)


@_threaded
def correlate(dataset, out=None, *, settings=None, overwrite: bool = False, verbose: bool = False,
              threads: int | None = None, **options) -> CorrelationResult:
    """Pair correlations, optimal statistics and nulls of a dataset; returns a :class:`CorrelationResult`.

    ``dataset``: a :class:`Dataset` or the path of a ``dataset.h5``.  Settings are the
    ``[correlate]`` keys: a dict or a TOML file (its ``[correlate]`` table) as
    ``settings``, and/or keyword ``options`` over it (``noise="values"``,
    ``noise_values={...}``, ``scrambles=0``, ``phase_shifts=100``, ``seed=1``...).  A
    relative ``chains`` is taken from the settings file's folder.  With ``out``,
    writes ``correlations.json``, ``correlations.png`` and (with null trials)
    ``nulls.png``; earlier ones are replaced only with ``overwrite=True``.
    ``threads``: BLAS and numba threads (None: :data:`~ptares.threads.DEFAULT_THREADS`).
    """
    from ptares.correlation.analysis import correlate as correlate_dataset

    section, folder = _section(CorrelateSection, "correlate", settings, options)
    dataset = _dataset(dataset)
    noise = _noise_models(dataset, section, folder)
    if out is not None:
        out = check_output_directory(out, overwrite, CORRELATE_OUTPUTS)
    result = correlate_dataset(dataset, noise, section, progress=verbose)
    if out is not None:
        from ptares.figures.common import save_figure
        from ptares.figures.correlation import correlations_figure, nulls_figure

        try:
            out.mkdir(parents=True, exist_ok=True)
            result.write(out / "correlations.json")
            _say(verbose, f"wrote {out / 'correlations.json'}")
            save_figure(correlations_figure(result), out / "correlations.png")
            _say(verbose, f"wrote {out / 'correlations.png'}")
            if result.nulls:
                save_figure(nulls_figure(result), out / "nulls.png")
                _say(verbose, f"wrote {out / 'nulls.png'}")
        except OSError as exc:
            raise _cannot_write(exc, out) from None
    return result


SENSITIVITY_OUTPUTS = ("sensitivity.json", "sensitivity.png", "detection.png", "continuous_wave.png",
                       "continuous_wave_sky.png")


@_threaded
def sensitivity(source, out=None, *, settings=None, overwrite: bool = False, figures: bool = True,
                verbose: bool = False, threads: int | None = None, **options) -> "SensitivityResult":
    """What an array can detect: strain-noise curves, the optimal statistic's expected S/N and detection
    probability against amplitude and observing time, and continuous-wave sensitivity; returns a
    :class:`~ptares.forecast.sensitivity.SensitivityResult`.

    ``source``: a :class:`Dataset` or a ``dataset.h5`` (its TOAs, errors, noise parameters and pulsars;
    residuals are not used), or a config (a :class:`Config`, a TOML file, a dict of sections), whose
    array is laid out without simulating any signal.  Settings are the ``[sensitivity]`` keys: the
    config's table, or ``settings`` (a dict or a TOML file with that table), with keyword ``options``
    over it (``false_alarm=0.01``, ``years=[5, 10]``...).  With ``out``, writes ``sensitivity.json`` and
    (unless ``figures=False``) ``sensitivity.png``, ``detection.png``, ``continuous_wave.png`` and
    ``continuous_wave_sky.png``; earlier ones are replaced only with ``overwrite=True``.
    """
    from ptares.forecast.sensitivity import forecast
    from ptares.inputs.config import SensitivitySection
    from ptares.simulation.simulate import outline

    dataset, config = _fit_source(source)
    section, _ = _section(SensitivitySection, "sensitivity", settings, options,
                          default=config.sensitivity if config is not None else None)
    if dataset is None:
        dataset = outline(config)
    if out is not None:
        out = check_output_directory(out, overwrite, SENSITIVITY_OUTPUTS)
    result = forecast(dataset, section, progress=verbose)
    if out is not None:
        from ptares.figures.common import save_figure
        from ptares.figures.sensitivity import curves_figure, detection_figure, wave_figure, wave_sky_figure

        try:
            out.mkdir(parents=True, exist_ok=True)
            result.write(out / "sensitivity.json")
            _say(verbose, f"wrote {out / 'sensitivity.json'}")
            if figures:
                for name, draw in (("sensitivity.png", curves_figure), ("detection.png", detection_figure),
                                   ("continuous_wave.png", wave_figure), ("continuous_wave_sky.png", wave_sky_figure)):
                    save_figure(draw(result), out / name)
                    _say(verbose, f"wrote {out / name}")
        except OSError as exc:
            raise _cannot_write(exc, out) from None
    return result


def report(folder, out=None, *, threads: int | None = None) -> "Report":
    """Write one self-contained HTML page (``folder/report.html``, or ``out``) for an output folder of any command:
    provenance, warnings, key numbers and tables, figures embedded, the config; returns the
    :class:`~ptares.report.page.Report` (its ``warnings`` lists what the page flags)."""
    from ptares.report.page import build_report

    with thread_limits(thread_count(threads, _option("threads"))):
        return build_report(folder, out)


# ---------------------------------------------------------------- fit


@dataclass(repr=False)
class FitResult:
    """A finished (or stopped) fit: the contents of ``posterior.json`` and where the chains are.

    ``summary`` is ``posterior.json`` (per parameter ``median``, ``interval68``,
    ``interval95``, ``autocorr_time``, ``injected``; and ``converged``, ``steps``,
    ``walkers``, ``burn``...); ``names`` the free parameters in chain order;
    ``chains`` the ``chains.h5`` (None when the fit ran without ``out``); ``out`` the
    output folder.  :meth:`samples` gives the draws after burn-in.
    """

    summary: dict
    names: list
    chains: Path | None
    out: Path | None
    injected: dict = field(default_factory=dict)
    _chain: np.ndarray | None = None  #: (steps, walkers, parameters), kept only when there is no chains file
    spectrum: dict | None = None  #: ``spectrum.json`` of a free-spectrum fit with an output folder, else None

    @property
    def converged(self) -> bool:
        return bool(self.summary["converged"])

    @property
    def steps(self) -> int:
        return int(self.summary["steps"])

    @property
    def walkers(self) -> int:
        return int(self.summary["walkers"])

    @property
    def parameters(self) -> dict:
        """Per parameter: ``median``, ``interval68``, ``interval95``, ``autocorr_time`` (and ``injected``)."""
        return self.summary["parameters"]

    def chain(self) -> np.ndarray:
        """Every step of every walker, shape (steps, walkers, parameters), burn-in included."""
        if self._chain is not None:
            return self._chain
        from ptares.inference.samplers.chains import read_chain

        return read_chain(self.chains).get_chain()

    def samples(self, parameter: str | None = None, burn: int | None = None, thin: int | None = None) -> np.ndarray:
        """Posterior draws after burn-in: shape (draws, parameters) in :attr:`names` order, or (draws,) of ``parameter``.

        ``burn`` and ``thin`` default to the summary's (as in ``posterior.json`` and the figures).
        """
        from ptares.inference.samplers.chains import posterior_draws

        burn = self.summary["burn"] if burn is None else int(burn)
        thin = self.summary["thin"] if thin is None else int(thin)
        flat = posterior_draws(self.chain(), burn, thin)
        if parameter is None:
            return flat
        if parameter not in self.names:
            raise InputError(f"is not a free parameter of this fit ({', '.join(self.names[:6])}"
                             f"{', ...' if len(self.names) > 6 else ''})", parameter)
        return flat[:, self.names.index(parameter)]

    def __repr__(self) -> str:
        state = "converged" if self.converged else "NOT converged"
        count = f"{len(self.names)} parameter{'s' if len(self.names) != 1 else ''}"
        noun = "chains" if self.summary.get("sampler") == "gibbs" else "walkers"
        lines = [f"FitResult: {count}, {self.steps} steps x {self.walkers} {noun}, {state}; "
                 f"acceptance {self.summary['acceptance_fraction']:.2f}, "
                 f"{self.summary['effective_samples']:.0f} effective samples"]
        for name in self.names[:3]:
            entry = self.parameters[name]
            low, high = entry["interval68"]
            injected = f", injected {entry['injected']:.4g}" if entry.get("injected") is not None else ""
            lines.append(f"  {name} = {entry['median']:.4g} [{low:.4g}, {high:.4g}] (68%){injected}")
        if len(self.names) > 3:
            lines.append(f"  ... and {len(self.names) - 3} more (.parameters)")
        if self.chains is not None:
            lines.append(f"  chains in {self.chains}")
        return "\n".join(lines)


def _fit_source(source):
    """``(dataset or None, config or None)`` from what :func:`fit` was given."""
    if isinstance(source, Dataset):
        return source, None
    if isinstance(source, (Config, Mapping)):
        return None, config_from(source)
    if isinstance(source, (str, os.PathLike)):
        if Path(source).suffix.lower() in (".h5", ".hdf5"):
            return load_dataset(source), None
        return None, load_config(source)
    raise InputError(f"expected a Dataset, a Config, a dict of sections or a file, got {type(source).__name__}", "source")


def _fit_section(source, config, settings, options) -> FitSection:
    """The ``[fit]`` settings, with a relative ``pulsar_noise`` taken from the folder of the file that gave it."""
    section, folder = _section(FitSection, "fit", settings, options, default=config.fit if config is not None else None)
    if settings is None and isinstance(source, (str, os.PathLike)) and config is not None:
        folder = Path(source).parent
    if section.pulsar_noise and folder is not None and "pulsar_noise" not in options \
            and not Path(section.pulsar_noise).is_absolute():
        section = section.model_copy(update={"pulsar_noise": str(folder / section.pulsar_noise)})
    return section


def _simulated(config: Config, out: Path | None, overwrite: bool, verbose: bool) -> Dataset:
    """The config's dataset for a run into ``out``.  A config without ``[run] seed`` draws a fresh seed,
    recorded in ``out/dataset.h5``; when that file holds a dataset of the same config, it is that dataset,
    so that rerunning the same command resumes (unless ``overwrite``)."""
    from ptares.simulation.simulate import simulate as simulate_config

    kept = None if out is None else out / "dataset.h5"
    if config.run.seed is None and kept is not None and kept.is_file() and not overwrite:
        previous = load_dataset(kept)
        if previous.config == config.source_text:  # the dataset this config gave last time: no need to simulate it again
            _say(verbose, f"[run] seed not set: using the dataset of seed {previous.seed} in {kept}, so the run resumes")
            return previous
    dataset = simulate_config(config, progress=verbose)
    if config.run.seed is None and kept is not None:
        _say(verbose, f"[run] seed not set: drew seed {dataset.seed} (recorded in {kept}; rerunning resumes)")
    return dataset


def _check_fit_settings(config: Config, section: FitSection) -> None:
    """Check ``[fit]`` against the dataset ``config`` would give (its pulsars, noise and signals, no signal drawn),
    so that a refused setting costs no simulation."""
    from ptares.inference.model import FitModel
    from ptares.simulation.simulate import outline

    FitModel(outline(config), section)


def _keep_dataset(dataset: Dataset, out: Path, overwrite: bool) -> None:
    """Write the simulated ``dataset`` to ``out/dataset.h5`` unless it is there; another dataset there is an error
    (its results would be mixed with this one's) unless ``overwrite``."""
    from ptares.dataset import fingerprint, write_dataset

    copy_path = out / "dataset.h5"
    if copy_path.exists() and fingerprint(load_dataset(copy_path)) != fingerprint(dataset):
        if not overwrite:
            raise InputError(f"holds a dataset from another config or seed; pass {_flag('overwrite')} "
                             f"or choose another {_option('out')}", str(copy_path))
        copy_path.unlink()
    if not copy_path.exists():
        write_dataset(dataset, copy_path)


@_threaded
def fit(source, out=None, *, settings=None, overwrite: bool = False, figures: bool = True, verbose: bool = False,
        threads: int | None = None, **options) -> FitResult:
    """Sample the posterior of a model of a dataset (emcee, or blocked Gibbs for large models); returns a :class:`FitResult`.

    ``source``: a :class:`Dataset` or a ``dataset.h5``; or a config (a :class:`Config`, a
    TOML file, a dict of sections), which is simulated first and fitted with its
    ``[fit]`` table.  ``settings`` replaces that table (a dict or a TOML file with a
    ``[fit]`` table); keyword ``options`` are ``[fit]`` keys over it (``max_steps=2000``,
    ``red="none"``, ``fixed={...}``, ``seed=1``...).

    With ``out``, the chains go to ``out/chains.h5`` and a rerun with the same
    ``out`` resumes them (``overwrite=True`` starts afresh); ``posterior.json``,
    ``corner.png`` and ``trace.png`` (unless ``figures=False``) are rewritten at the
    end, and ``dataset.h5`` is written when the source was a config.  Without
    ``out`` the chains live in a temporary file and are kept in memory afterwards.
    Ctrl-C during sampling raises :class:`Interrupted` (its ``kept`` names the
    chains file to resume).  ``threads``: BLAS and numba threads of this process and
    of each of the ``workers`` (None: :data:`~ptares.threads.DEFAULT_THREADS`).
    """
    from ptares.dataset import write_json
    from ptares.inference.model import FitModel
    from ptares.inference import samplers
    from ptares.inference.samplers.chains import posterior_draws, summarise

    dataset, config = _fit_source(source)
    section = _fit_section(source, config, settings, options)
    if out is not None:
        # chains.h5 is resumed, not overwritten; the other outputs are rewritten at the end of every run
        out = check_output_directory(out, True)
    if dataset is None:
        _check_fit_settings(config, section)
        dataset = _simulated(config, out, overwrite, verbose)
    model = FitModel(dataset, section)

    def announce(chains):
        _say(verbose, f"fitting {model.ndim} parameters ({', '.join(model.names[:6])}{', ...' if model.ndim > 6 else ''}) "
                      f"with the {samplers.choose_sampler(model)} sampler "
                      f"to {len(model.dataset.pulsars)} pulsars; chains in {chains}")

    if out is None:
        with tempfile.TemporaryDirectory(prefix="ptares-fit-") as scratch:
            chains = Path(scratch) / "chains.h5"
            announce(chains)
            run = samplers.run_sampler(model, chains, progress=verbose)
        summary = summarise(model, run)
        return FitResult(summary, list(model.names), None, None, dict(model.injected), run.chain)

    try:
        out.mkdir(parents=True, exist_ok=True)
        if config is not None:
            _keep_dataset(dataset, out, overwrite)
        chains = out / "chains.h5"
        announce(chains)
        try:
            run = samplers.run_sampler(model, chains, progress=verbose, overwrite=overwrite)
        except KeyboardInterrupt:
            raise Interrupted(chains) from None
        summary = summarise(model, run)
        write_json(out / "posterior.json", summary)
        samples = posterior_draws(run.chain, summary["burn"], summary["thin"])
        if figures:
            from ptares.figures.common import save_figure
            from ptares.figures.inference import corner_figure, trace_figure

            save_figure(corner_figure(samples, model.names, model.injected, converged=summary["converged"]), out / "corner.png")
            save_figure(trace_figure(run.chain, model.names, summary["burn"], model.injected, converged=summary["converged"],
                                     independent=summary["sampler"] == "gibbs"),
                        out / "trace.png")
        spectrum = None
        if model.section.common_spectrum == "free" and model.section.common != "none":
            from ptares.inference.spectral_models import spectrum_content

            spectrum, refit_draws = spectrum_content(model, samples, seed=model.section.seed)
            write_json(out / "spectrum.json", spectrum)
            if figures:
                from ptares.figures.inference import spectrum_figure

                save_figure(spectrum_figure(spectrum, refit_draws, converged=summary["converged"]), out / "spectrum.png")
    except OSError as exc:
        raise _cannot_write(exc, out) from None
    return FitResult(summary, list(model.names), chains, out, dict(model.injected), spectrum=spectrum)


# ---------------------------------------------------------------- compare


@dataclass(repr=False)
class ComparisonResult:
    """Correlated against uncorrelated common process: ``content`` is ``comparison.json``
    (``ln_bayes_factor``, ``ln_bayes_factor_error``, ``effective_samples``, ``posterior``, per-pattern
    entries in ``patterns``); ``fit`` the uncorrelated fit; ``out`` the output folder (or None)."""

    content: dict
    fit: FitResult
    out: Path | None

    @property
    def ln_bayes_factor(self) -> float:
        return float(self.content["ln_bayes_factor"])

    @property
    def ln_bayes_factor_error(self) -> float:
        return float(self.content["ln_bayes_factor_error"])

    @property
    def reliable(self) -> bool:
        return bool(self.content["reliable"])

    def pattern_lines(self) -> list:
        """One line per pattern (ln B, its error, effective samples, reliability) and the warning, if any."""
        lines = [f"  {pattern:15s} ln B = {entry['ln_bayes_factor']:+.3g} +/- {entry['ln_bayes_factor_error']:.2g} "
                 f"against uncorrelated ({entry['method']}), {entry['effective_samples']:.0f} effective samples"
                 + ("" if entry["reliable"] else "  UNRELIABLE")
                 for pattern, entry in self.content["patterns"].items()]
        if self.content["warning"]:
            lines.append(f"  warning: {self.content['warning']}")
        return lines

    def __repr__(self) -> str:
        return "\n".join([f"ComparisonResult: {self.content['draws']} draws of the uncorrelated posterior",
                          *self.pattern_lines()])


@_threaded
def compare(source, out=None, *, settings=None, fit_options=None, scheduler=None, overwrite: bool = False,
            figures: bool = True, verbose: bool = False, threads: int | None = None, **options) -> ComparisonResult:
    """Bayes factors of correlated common processes (Hellings–Downs; monopole, dipole) against an
    uncorrelated one, by reweighting the uncorrelated posterior or, where that is unreliable, by bridge
    sampling between it and a direct fit of the pattern; returns a :class:`ComparisonResult`.

    ``source`` as for :func:`fit`.  ``settings`` (a dict or TOML file) gives the ``[fit]`` table of the
    uncorrelated fit (its ``common`` is set to ``"uncorrelated"``) and the ``[compare]`` table;
    ``fit_options`` is a dict of ``[fit]`` keys over it, keyword ``options`` are ``[compare]`` keys
    (``samples=1000``, ``patterns=["hellings-downs", "monopole"]``, ``workers=2``).  The likelihood
    evaluations run in ``workers`` local processes or on a Dask ``scheduler``.  With ``out``:
    ``out/dataset.h5`` when the source is a config, the fit in ``out/uncorrelated/`` and any direct fit in
    ``out/<pattern>/`` (resumed when run again), ``out/comparison.json`` and, unless ``figures=False``,
    ``out/comparison.png``.
    """
    from ptares.campaign.comparison import add_direct_fit, compare_models, direct_patterns, patterns_of
    from ptares.dataset import write_json
    from ptares.inference.model import FitModel
    from ptares.inputs.config import CompareSection

    dataset, config = _fit_source(source)
    fit_settings, compare_settings = _tables(settings, ("fit", "compare"))
    fit_section = _fit_section(source, config, fit_settings, dict(fit_options or {}))
    fit_section = fit_section.model_copy(update={"common": "uncorrelated"})
    section, _ = _section(CompareSection, "compare", compare_settings, options,
                          default=config.compare if config is not None else None)
    if out is not None:
        out = check_output_directory(out, True)
    client = None
    if scheduler is not None:  # an unreachable scheduler is refused before hours of fitting
        from ptares.campaign.engines import dask_client

        client = dask_client(scheduler)
    try:
        if dataset is None:
            _check_fit_settings(config, fit_section)
            dataset = _simulated(config, out, overwrite, verbose)
        model = FitModel(dataset, fit_section)  # the [fit] settings are checked before anything is written
        if config is not None and out is not None:
            try:
                out.mkdir(parents=True, exist_ok=True)
                _keep_dataset(dataset, out, overwrite)
            except OSError as exc:
                raise _cannot_write(exc, out) from None
        fitted = fit(dataset, None if out is None else out / "uncorrelated", settings=fit_section, overwrite=overwrite,
                     figures=figures, verbose=verbose, threads=threads)
        _say(verbose, f"reweighting the uncorrelated posterior by the {', '.join(patterns_of(section))} likelihood")
        comparison = compare_models(model, fitted.chain(), fitted.summary, section, seed=fit_section.seed,
                                    scheduler=client, progress=verbose)
        for pattern in direct_patterns(comparison, section):
            effective = comparison.content["patterns"][pattern]["effective_samples"]
            why = ("direct_fit = \"always\"" if section.direct_fit == "always"
                   else f"reweighting left {effective:.0f} effective samples")
            _say(verbose, f"fitting the {pattern} model directly ({why}); the Bayes factor then bridges both posteriors")
            direct = fit(dataset, None if out is None else out / pattern, settings=fit_section.model_copy(
                update={"common": pattern}), overwrite=overwrite, figures=figures, verbose=verbose, threads=threads)
            add_direct_fit(comparison, model, pattern, direct.chain(), direct.summary, section, seed=fit_section.seed,
                           scheduler=client, progress=verbose)
    finally:
        if client is not None and client is not scheduler:
            client.close()
    if out is not None:
        try:
            write_json(out / "comparison.json", comparison.content)
            if figures:
                from ptares.figures.common import save_figure
                from ptares.figures.comparison import comparison_figure

                save_figure(comparison_figure(comparison, model.names, model.injected), out / "comparison.png")
        except OSError as exc:
            raise _cannot_write(exc, out) from None
    return ComparisonResult(comparison.content, fitted, out)


# ---------------------------------------------------------------- per-pulsar noise


@dataclass(repr=False)
class NoiseResult:
    """The per-pulsar noise stage: ``pulsars`` maps each pulsar to its row (``status``, ``converged``,
    ``parameters`` with mean, sd, median and 68% interval); ``out`` holds ``pulsar_noise.json``."""

    pulsars: dict
    out: Path

    @property
    def failed(self) -> list:
        return [name for name, row in self.pulsars.items() if row.get("status") != "ok"]

    @property
    def not_converged(self) -> list:
        return [name for name, row in self.pulsars.items() if row.get("status") == "ok" and not row.get("converged")]

    def __repr__(self) -> str:
        return (f"NoiseResult: {len(self.pulsars)} pulsars, {len(self.failed)} failed, "
                f"{len(self.not_converged)} not converged; in {self.out / 'pulsar_noise.json'}")


@_threaded
def pulsar_noise(source, out, *, settings=None, workers: int = 1, scheduler=None, overwrite: bool = False,
                 figures: bool = True, verbose: bool = False, threads: int | None = None, **options) -> NoiseResult:
    """Fit every pulsar's white and red noise alone (no common process), in ``workers`` processes or on a Dask
    ``scheduler``; returns a :class:`NoiseResult`.

    ``source`` and ``settings``/``options`` as for :func:`fit` (its ``[fit]`` table gives the noise model,
    harmonics, priors and sampler limits).  Writes ``out/pulsars/<name>.h5`` (chains, resumed on a rerun),
    ``out/pulsars/<name>.json``, ``out/pulsar_noise.json`` (for ``[fit] pulsar_noise``) and, unless
    ``figures=False``, ``out/pulsar_noise.png``.  Finished pulsars are skipped when run again.
    """
    from ptares.campaign.noise_stage import run_noise_stage

    dataset, config = _fit_source(source)
    section = _fit_section(source, config, settings, options)
    out = check_output_directory(out, True)
    try:
        if dataset is None:
            dataset = _simulated(config, out, overwrite, verbose)
            out.mkdir(parents=True, exist_ok=True)
            _keep_dataset(dataset, out, overwrite)
        else:
            out.mkdir(parents=True, exist_ok=True)
        try:
            content = run_noise_stage(dataset, section, out, workers=workers, scheduler=scheduler, overwrite=overwrite,
                                      progress=verbose)
        except KeyboardInterrupt:
            raise Interrupted(out / "pulsars") from None
        if figures:
            from ptares.figures.common import save_figure
            from ptares.figures.inference import pulsar_noise_figure

            save_figure(pulsar_noise_figure(content["pulsars"]), out / "pulsar_noise.png")
    except OSError as exc:
        raise _cannot_write(exc, out) from None
    return NoiseResult(content["pulsars"], out)


# ---------------------------------------------------------------- sweep


@dataclass(repr=False)
class SweepResult:
    """A campaign's rows (one dict per task, as in ``results.csv``), its detection rule and where it is.

    ``rule`` (a :class:`~ptares.campaign.detection.DetectionRule`) says which column detects above or
    below which threshold at false-alarm probability ``false_alarm`` and how that was set; ``out``
    holds ``tasks/``, ``results.csv`` and the figures listed in ``figures``.
    """

    rows: list
    rule: object
    false_alarm: float
    out: Path
    figures: list = field(default_factory=list)

    @property
    def failed(self) -> list:
        """The rows of tasks that failed (each with its ``error``)."""
        return [r for r in self.rows if r.get("status") != "ok"]

    def detection_probability(self) -> dict:
        """Injected background amplitude -> :class:`~ptares.campaign.detection.Detection` (share of its
        finished tasks that detect by :attr:`rule`, its binomial standard error, the task count)."""
        from ptares.campaign.detection import detection_probability

        return detection_probability(self.rows, self.rule)

    def __repr__(self) -> str:
        axes = sorted({k[5:] for r in self.rows for k in r if k.startswith("axis:")})
        counts = []
        for key in axes:
            values = {json.dumps(r.get(f"axis:{key}"), default=str) for r in self.rows}
            counts.append(f"{key} ({len(values)} values)")
        lines = [f"SweepResult: {len(self.rows)} tasks, {len(self.rows) - len(self.failed)} ok, "
                 f"{len(self.failed)} failed; in {self.out}"]
        if counts:
            lines.append(f"  axes {', '.join(counts)}")
        lines.append(f"  detection: {self.rule} at false-alarm {self.false_alarm:g} ({self.rule.how})")
        detections = self.detection_probability()
        if detections:
            shown = [f"{a:.3g}: {d.fraction:.2f} +/- {d.error:.2f}" for a, d in list(detections.items())[:6]]
            lines.append(f"  detected by injected A  {', '.join(shown)}{', ...' if len(detections) > 6 else ''}")
        return "\n".join(lines)


@_threaded
def sweep(config, out, *, workers: int = 1, scheduler=None, overwrite: bool = False, figures: bool = True,
          verbose: bool = False, threads: int | None = None) -> SweepResult:
    """Run (or resume) the campaign of a config's ``[sweep]`` table into the folder ``out``; returns a :class:`SweepResult`.

    ``config``: a TOML file with a ``[sweep]`` table, or a dict of sections holding one
    (written to ``out/config.toml`` first; astropy Quantities in it are written with
    their units).  ``workers`` local processes, or ``scheduler`` (a Dask address or
    client) instead.  Finished tasks in ``out/tasks`` are kept and skipped on a rerun;
    ``overwrite=True`` discards them.  Writes ``results.csv``, ``detection.json`` (the detection rule and each
    amplitude's detection probability with its binomial error) and, unless ``figures=False``, the campaign figures.  Ctrl-C raises :class:`Interrupted`.
    ``threads``: BLAS and numba threads of each worker (None: :data:`~ptares.threads.DEFAULT_THREADS`).
    """
    from ptares.campaign.detection import detection_rule
    from ptares.campaign.sweep import run_sweep
    from ptares.campaign.tasks import load_sweep

    out = Path(out)
    if isinstance(config, Mapping):
        raw = copy.deepcopy(dict(config))
        base = raw.get("sweep", {}).get("base") if isinstance(raw.get("sweep"), Mapping) else None
        if isinstance(base, (str, os.PathLike)) and not Path(base).is_absolute():
            raw["sweep"]["base"] = str(Path(base).resolve())  # a dict's files are relative to the working folder
        for wave in raw.get("wave", []) if isinstance(raw.get("wave"), list) else []:  # a wave's table, likewise
            if isinstance(wave, Mapping) and isinstance(wave.get("file"), (str, os.PathLike)) and not Path(wave["file"]).is_absolute():
                wave["file"] = str(Path(wave["file"]).resolve())
        from ptares.campaign.tasks import expand, sweep_from_data

        base_raw, section = sweep_from_data(raw, Path.cwd(), "config")
        expand(base_raw, section, "config: sweep")  # unknown keys refused before anything is written
        check_output_directory(out, True)
        try:
            out.mkdir(parents=True, exist_ok=True)
            path = out / "config.toml"
            from ptares.dataset import atomic_path

            with atomic_path(path) as temporary:
                temporary.write_text(config_text(raw))
        except (TypeError, ValueError) as exc:
            raise InputError(f"cannot be written as TOML ({exc})", "config") from None
        except OSError as exc:
            raise _cannot_write(exc, out) from None
        config = path
    elif not isinstance(config, (str, os.PathLike)):
        raise InputError(f"expected a config file or a dict of sections, got {type(config).__name__}", "config")
    _, section = load_sweep(config)
    check_output_directory(out, True)
    if workers < 1:
        raise InputError("must be at least 1", _option("workers"))
    try:
        rows = run_sweep(config, out, workers=workers, scheduler=scheduler, overwrite=overwrite, progress=verbose)
    except KeyboardInterrupt:
        raise Interrupted(out / "tasks") from None
    except OSError as exc:
        raise _cannot_write(exc, out) from None
    written = []
    if figures:
        from ptares.figures.campaign import sweep_figures
        from ptares.figures.common import save_figure

        for name, fig in sweep_figures(rows, section.false_alarm, section.detection, section.ln_bayes_threshold).items():
            save_figure(fig, out / name)
            written.append(out / name)
    rule = detection_rule(rows, section.false_alarm, section.detection, section.ln_bayes_threshold)
    result = SweepResult(rows, rule, section.false_alarm, out, written)
    from ptares.dataset import write_json

    try:
        write_json(out / "detection.json", {
            "false_alarm": section.false_alarm, "statistic": section.detection, "rule": str(rule), "how": rule.how,
            "tasks": len(rows), "failed": len(result.failed),
            "detection_probability": [{"amplitude": amplitude, "fraction": d.fraction, "error": d.error, "tasks": d.tasks}
                                      for amplitude, d in result.detection_probability().items()],
        })
    except OSError as exc:
        raise _cannot_write(exc, out) from None
    return result


# ---------------------------------------------------------------- check, import, export


def describe(config) -> str:
    """A few lines on what ``config`` (a file, dict or Config) will simulate: pulsars, TOAs, span, signals,
    and the free parameters of its ``[fit]`` when it has one (checked as ``fit`` would check it).

    Nothing is simulated: the array and its schedules are drawn, the signals only described.
    """
    config = config_from(config)
    from ptares.simulation.simulate import outline

    dataset = outline(config)
    counts = [p.mjd.size for p in dataset.pulsars]
    kind = "random isotropic" if config.array.random else \
        f"tables, {config.array.mode} mode" if config.array.table is not None else "listed"
    lines = [
        f"run        {config.run.name} (seed {config.run.seed if config.run.seed is not None else 'fresh each run'})",
        f"pulsars    {len(counts)} ({kind})",
        f"TOAs       {sum(counts)} in all, {min(counts)} to {max(counts)} per pulsar",
        f"span       {dataset.span / 86400 / 365.25:.2f} yr from MJD {dataset.start_mjd:.1f}",
        f"timing fit {', '.join(config.timing_model.fit) or 'none'}",
    ]
    if dataset.radio_summary():
        lines.append(f"radio      {dataset.radio_summary()}")
    red = sum(p.noise["red_amplitude"] > 0 for p in dataset.pulsars)
    for name, description in dataset.signals.items():
        lines.append(f"signal     {describe_signal(name, description, red)}")
    if "fit" in config.model_fields_set:  # checked against the pulsars and signals, as fit and compare will
        from ptares.inference.model import FitModel

        model = FitModel(dataset, config.fit)
        lines.append(f"fit        {model.ndim} free parameters ({', '.join(model.names[:4])}"
                     f"{', ...' if model.ndim > 4 else ''})")
    if config.sweep is not None:
        lines.append(_describe_sweep(config))
    return "\n".join(lines)


def _describe_sweep(config: Config) -> str:
    """One line on a sweep file's campaign; from a file, every task config is validated as ``sweep`` would."""
    from ptares.campaign.tasks import expand, load_sweep

    section = config.sweep
    axes = ", ".join(f"{key} ({len(values)} values)" for key, values in section.axes.items()) or "no axes"
    if config.source_path is not None:
        base, section = load_sweep(config.source_path)
        count = len(expand(base, section, f"{config.source_path}: sweep"))
    else:
        sizes = [len(v) for v in section.axes.values()]
        count = (int(np.prod(sizes)) if section.grid else min(sizes, default=1)) * section.realisations
    return (f"sweep      a campaign file: {count} tasks over {axes}, {section.realisations} realisations each; "
            f"stages {', '.join(section.stages)}; run it with 'ptares sweep'")


@_threaded
def import_tables(config, out=None, *, overwrite: bool = False, threads: int | None = None) -> Dataset:
    """A dataset from the config's TOA table and catalogue as they are (no simulation); written to
    ``out/dataset.h5`` when ``out`` is given.  ``threads`` as in :func:`simulate`."""
    from ptares.dataset import write_dataset
    from ptares.simulation.simulate import import_tables as tables_to_dataset

    config = config_from(config)
    if out is not None:
        out = check_output_directory(out, overwrite, ("dataset.h5",))
    dataset = tables_to_dataset(config)
    if out is not None:
        try:
            write_dataset(dataset, out / "dataset.h5")
        except OSError as exc:
            raise _cannot_write(exc, out) from None
    return dataset


@_threaded
def export_tables(dataset, out, *, overwrite: bool = False, threads: int | None = None) -> list:
    """Write ``toas.csv``, ``pulsars.csv``, ``signals.json`` and ``import.toml`` of a dataset (or a
    dataset file) into ``out``; importing them gives the dataset back.  Returns the paths written.
    ``threads`` as in :func:`simulate`."""
    from ptares.inputs.tables import export_tables as write_tables

    dataset = _dataset(dataset)
    out = check_output_directory(out, overwrite, ("toas.csv", "pulsars.csv", "signals.json", "import.toml"))
    try:
        return write_tables(dataset, out)
    except OSError as exc:
        raise _cannot_write(exc, out) from None

"""From a validated config to a simulated dataset.

The steps, in order: resolve the array (:mod:`ptares.simulation.array`), draw each
pulsar's TOAs, draw every component (:mod:`ptares.simulation.signals`) on them, add the
components, and fit the timing model out of the sum.  Components are stored
before the fit (``injected``), the sum after it (``residuals``).
"""

from __future__ import annotations

import datetime

import numpy as np
from tqdm.auto import tqdm

from ptares.dataset import Dataset, PulsarData
from ptares.errors import InputError
from ptares.inputs.config import Config
from ptares.physics.timing_model import column_names, design_matrix, fit_timing_model
from ptares.rng import fresh_seed
from ptares.simulation.array import build_array, observe
from ptares.simulation.signals import Context, build_components
from ptares.simulation.signals.white import effective_uncertainties, toa_white
from ptares.version import __version__

__all__ = ["simulate", "outline", "run_seed", "import_tables", "config_tables"]


def config_tables(config: Config, columns: int, need_residuals: bool, need_signals: bool = False):
    """The config's tables, read and checked, or None when the array is not given by tables; the injected and
    measured columns only for an import (``need_signals``), else named in the note on unread columns."""
    if config.array.table is None:
        return None
    from ptares.inputs.tables import read_tables

    return read_tables(config.resolve(config.array.table), config.resolve(config.array.catalogue), columns,
                       need_residuals=need_residuals, need_signals=need_signals)


def import_tables(config: Config) -> Dataset:
    """A dataset made from the config's tables as they are: their residuals, no simulation."""
    if config.array.table is None:
        raise InputError("import needs [array] table and catalogue", "array")
    terms = config.timing_model.fit
    tables = config_tables(config, len(column_names(terms)), need_residuals=True, need_signals=True)
    first = min(m[0] for m in tables.mjd.values()) if config.array.window is None else config.array.window[0]
    last = max(m[-1] for m in tables.mjd.values()) if config.array.window is None else config.array.window[1]
    pulsars = []
    for row in tables.pulsars:
        mjd = tables.mjd[row.name]
        pulsars.append(
            PulsarData(
                name=row.name, ra=row.ra, dec=row.dec, distance=row.distance, distance_error=row.distance_error,
                mjd=mjd, residuals=tables.residuals[row.name], errors=tables.errors[row.name],
                design_matrix=design_matrix(mjd, terms), design_columns=column_names(terms),
                injected=tables.injected[row.name], noise=dict(row.noise), measured=tables.measured[row.name],
                frequency_mhz=tables.frequency_mhz.get(row.name), system=tables.system.get(row.name),
            )
        )
    signals = {}
    if config.array.signals:
        from ptares.inputs.tables import read_signals

        signals = read_signals(config.resolve(config.array.signals))
    return Dataset(
        pulsars=pulsars, config=config.source_text, seed=0, ptares_version=__version__,
        created=datetime.datetime.now(datetime.timezone.utc).isoformat(timespec="seconds"),
        start_mjd=float(first), span=(float(last) - float(first)) * 86400.0, signals=signals,
    )


def run_seed(config: Config) -> int:
    """The config's seed, or a fresh one when it names none."""
    return config.run.seed if config.run.seed is not None else fresh_seed()


def _setup(config: Config, seed: int):
    """The resolved pulsars, their TOAs, the drawing context, the components and the tables of ``config``."""
    terms = config.timing_model.fit
    columns = column_names(terms)
    tables = config_tables(config, len(columns), need_residuals=config.array.mode == "inject")
    pulsars = build_array(config, seed, tables)
    observations = observe(pulsars, seed, tables, config.array.window)
    for p, mjd in zip(pulsars, observations.mjd):
        if mjd.size <= len(columns):  # the config's check counts epochs before jitter; jitter can drop a few
            raise InputError(
                f"only {mjd.size} TOAs after jitter and gaps, not more than the {len(columns)} timing-model columns",
                f"pulsar {p.name}",
            )
    context = Context(pulsars=tuple(pulsars), observations=observations, seed=seed)
    components = build_components(config, pulsars)
    if tables is not None and config.array.mode == "inject":  # measured residuals already hold the real noise: add signals only
        components = [c for c in components if c.name not in ("white", "jitter")]
    return pulsars, observations, context, components, tables


def outline(config: Config, seed: int | None = None) -> Dataset:
    """The dataset :func:`simulate` would give, without drawing any signal: the same pulsars, TOAs, errors,
    noise values and signal descriptions, with zero residuals.  Cheap; for checking fit settings against a
    config before simulating it."""
    seed = run_seed(config) if seed is None else int(seed)
    pulsars, observations, context, components, tables = _setup(config, seed)
    zeros = [np.zeros(mjd.size) for mjd in observations.mjd]
    designs = [design_matrix(mjd, config.timing_model.fit) for mjd in observations.mjd]
    return _dataset(config, seed, pulsars, observations, context, components, designs, zeros, {}, tables)


def simulate(config: Config, seed: int | None = None, progress: bool = False) -> Dataset:
    """Simulate the array described by ``config``.

    ``seed`` overrides ``[run] seed``; with neither, a fresh seed is drawn and
    recorded in the dataset.  ``progress`` shows a bar over the components.
    """
    seed = run_seed(config) if seed is None else int(seed)
    pulsars, observations, context, components, tables = _setup(config, seed)
    injected = {}
    for component in tqdm(components, desc="simulating", unit="signal", disable=None if progress else True, leave=False):
        injected[component.name] = component.draw(context)
        if not all(np.all(np.isfinite(series)) for series in injected[component.name]):
            raise InputError("produced non-finite residuals; check its amplitude and spectral index", f"signal {component.name}")

    inject = tables is not None and config.array.mode == "inject"
    residuals = []
    designs = [design_matrix(mjd, config.timing_model.fit) for mjd in observations.mjd]
    for a, p in enumerate(pulsars):
        mjd, errors = observations.mjd[a], observations.toa_errors[a]
        total = np.sum([injected[name][a] for name in injected], axis=0) if injected else np.zeros(mjd.size)
        scale, quadrature, _ = toa_white(p, observations.systems_of(a), mjd.size)
        weights = effective_uncertainties(errors, scale, quadrature)
        fitted, _ = fit_timing_model(total, designs[a], weights)
        # an injection keeps the measured part exactly; only the injected signals pass through the fit
        residuals.append(tables.residuals[p.name] + fitted if inject else fitted)
    return _dataset(config, seed, pulsars, observations, context, components, designs, residuals, injected, tables)


def _dataset(config, seed, pulsars, observations, context, components, designs, residuals, injected, tables) -> Dataset:
    columns = column_names(config.timing_model.fit)
    inject = tables is not None and config.array.mode == "inject"
    data = []
    for a, p in enumerate(pulsars):
        data.append(
            PulsarData(
                name=p.name,
                ra=p.ra,
                dec=p.dec,
                distance=p.distance,
                distance_error=p.distance_error,
                mjd=observations.mjd[a],
                residuals=residuals[a],
                errors=observations.toa_errors[a],
                design_matrix=designs[a],
                design_columns=columns,
                injected={name: series[a] for name, series in injected.items()},
                measured=tables.residuals[p.name] if inject else None,
                frequency_mhz=observations.frequency_mhz[a] if observations.frequency_mhz else None,
                system=observations.systems_of(a),
                noise={
                    "white_scale": p.white_scale,
                    "white_quadrature": p.white_quadrature,
                    "red_amplitude": p.red_amplitude,
                    "red_spectral_index": p.red_spectral_index,
                    "distance": p.true_distance,
                    "white_jitter": p.white_jitter,
                    **{f"{key}:{system}": value for system, *values in p.system_white
                       for key, value in zip(("white_scale", "white_quadrature", "white_jitter"), values)},
                    **{f"{process}_{key}": value for process, *values in p.chromatic
                       for key, value in zip(("amplitude", "spectral_index", "chromatic_index"), values)},
                },
            )
        )
    return Dataset(
        pulsars=data,
        config=config.source_text,
        seed=seed,
        ptares_version=__version__,
        created=datetime.datetime.now(datetime.timezone.utc).isoformat(timespec="seconds"),
        start_mjd=observations.start,
        span=observations.span,
        signals={c.name: c.describe(context) for c in components},
    )

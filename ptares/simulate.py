"""From a validated config to a simulated dataset.

The steps, in order: resolve the array (:mod:`ptares.pulsar_array`), draw each
pulsar's TOAs, draw every component (:mod:`ptares.signals`) on them, add the
components, and fit the timing model out of the sum.  Components are stored
before the fit (``injected``), the sum after it (``residuals``).
"""

from __future__ import annotations

import datetime

import numpy as np
from tqdm.auto import tqdm

from . import __version__
from .pulsar_array import build_array, observe
from .config import Config
from .dataset import Dataset, PulsarData
from .errors import InputError
from .rng import fresh_seed
from .signals import Context, build_components
from .signals.white import effective_uncertainties
from .timing_model import column_names, design_matrix, fit_timing_model

__all__ = ["simulate", "run_seed"]


def run_seed(config: Config) -> int:
    """The config's seed, or a fresh one when it names none."""
    return config.run.seed if config.run.seed is not None else fresh_seed()


def simulate(config: Config, seed: int | None = None, progress: bool = False) -> Dataset:
    """Simulate the array described by ``config``.

    ``seed`` overrides ``[run] seed``; with neither, a fresh seed is drawn and
    recorded in the dataset.  ``progress`` shows a bar over the components.
    """
    seed = run_seed(config) if seed is None else int(seed)
    pulsars = build_array(config, seed)
    observations = observe(pulsars, seed)
    terms = config.timing_model.fit
    columns = column_names(terms)
    for p, mjd in zip(pulsars, observations.mjd):
        if mjd.size <= len(columns):  # the config's check counts epochs before jitter; jitter can drop a few
            raise InputError(
                f"only {mjd.size} TOAs after jitter and gaps, not more than the {len(columns)} timing-model columns",
                f"pulsar {p.name}",
            )

    context = Context(pulsars=tuple(pulsars), observations=observations, seed=seed)
    components = build_components(config, pulsars)
    injected = {}
    for component in tqdm(components, desc="simulating", unit="signal", disable=None if progress else True, leave=False):
        injected[component.name] = component.draw(context)
        if not all(np.all(np.isfinite(series)) for series in injected[component.name]):
            raise InputError("produced non-finite residuals; check its amplitude and spectral index", f"signal {component.name}")

    data = []
    for a, p in enumerate(pulsars):
        mjd, errors = observations.mjd[a], observations.toa_errors[a]
        design = design_matrix(mjd, terms)
        total = np.sum([injected[name][a] for name in injected], axis=0)
        weights = effective_uncertainties(errors, p.white_scale, p.white_quadrature)
        residuals, _ = fit_timing_model(total, design, weights)
        data.append(
            PulsarData(
                name=p.name,
                ra=p.ra,
                dec=p.dec,
                distance=p.distance,
                distance_error=p.distance_error,
                mjd=mjd,
                residuals=residuals,
                errors=errors,
                design_matrix=design,
                design_columns=columns,
                injected={name: series[a] for name, series in injected.items()},
                noise={
                    "white_scale": p.white_scale,
                    "white_quadrature": p.white_quadrature,
                    "red_amplitude": p.red_amplitude,
                    "red_gamma": p.red_gamma,
                    "distance": p.true_distance,
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

"""Noise models from a fit's posterior: the bridge from ``ptares fit`` to a noise-marginalised
optimal statistic (``ptares correlate --noise posterior``)."""

from __future__ import annotations

import json
from pathlib import Path

import h5py
import numpy as np

from ptares.correlation.noise import NoiseModel, per_system_white
from ptares.dataset import Dataset, fingerprint, text_of
from ptares.errors import InputError
from ptares.inference.parameters import (
    CHROMATIC,
    COMMON_AMPLITUDE,
    COMMON_INDEX,
    RED_AMPLITUDE,
    RED_INDEX,
    WHITE_JITTER,
    WHITE_QUADRATURE,
    WHITE_SCALE,
    for_pulsar,
    white_owners,
)
from ptares.inference.samplers.chains import saved_draws

__all__ = ["noise_from_chains"]


def _per_toa(pulsar, values: dict):
    """One pulsar's white noise per TOA where it is per observing system, and its jitter per TOA (or None),
    from a fit's parameter ``values`` (owners as :func:`~ptares.inference.parameters.white_owners`)."""
    owners = white_owners(pulsar)
    return per_system_white(pulsar, [values.get(for_pulsar(WHITE_SCALE, o), 1.0) for o in owners],
                            [10 ** values.get(for_pulsar(WHITE_QUADRATURE, o), -np.inf) for o in owners],
                            [10 ** values.get(for_pulsar(WHITE_JITTER, o), -np.inf) for o in owners])


def noise_from_chains(dataset: Dataset, path, draws: int = 50, seed: int = 0) -> list:
    """Noise models from ``draws`` random posterior samples of a ``ptares fit`` (its ``chains.h5``).

    Parameters the fit held fixed keep the values it held them at; the fit's
    common process (``common_lg_amplitude``, ``common_spectral_index``, on its frequencies) becomes
    the common process, and red noise the fit left out stays out.  Burn-in is
    the fit summary's default (two integrated autocorrelation times, and the Gibbs sampler's adaptation).  The chains
    must come from a fit of this very dataset.
    """

    path = Path(path)
    if not path.is_file():
        raise InputError("chains file not found", str(path))
    try:
        with h5py.File(path, "r") as f:
            names = [text_of(n) for n in f.attrs["parameter_names"]]
            held = json.loads(f.attrs["held_values"])
            common_harmonics = int(f.attrs["common_harmonics"])
            red_harmonics = int(f.attrs["red_harmonics"])
            chromatic = json.loads(f.attrs.get("chromatic", "[]"))
            origin = f.attrs["dataset_fingerprint"]
        samples = saved_draws(path)
    except (OSError, KeyError, ValueError) as exc:
        raise InputError(f"not a ptares chains file ({exc})", str(path)) from None
    if origin != fingerprint(dataset):
        raise InputError("comes from a fit of another dataset", str(path))
    if samples.size == 0:
        raise InputError("holds no samples yet", str(path))
    rng = np.random.default_rng(seed)
    picked = samples[rng.choice(samples.shape[0], size=min(draws, samples.shape[0]), replace=False)]
    held = {k: (float(v) if v is not None else -np.inf) for k, v in held.items()}
    models = []
    for row in picked:
        values = {**held, **dict(zip(names, map(float, row)))}
        toa_white, toa_jitter = zip(*[_per_toa(p, values) for p in dataset.pulsars])
        per_pulsar = {
            "white_scale": [values.get(for_pulsar(WHITE_SCALE, n), 1.0) for n in dataset.names],
            "white_quadrature": [10 ** values.get(for_pulsar(WHITE_QUADRATURE, n), -np.inf) for n in dataset.names],
            "red_amplitude": [10 ** values[for_pulsar(RED_AMPLITUDE, n)] if red_harmonics else 0.0 for n in dataset.names],
            "red_spectral_index": [values[for_pulsar(RED_INDEX, n)] for n in dataset.names],
        }
        models.append(
            NoiseModel(
                red_harmonics=max(red_harmonics, 1),
                common_amplitude=10 ** values[COMMON_AMPLITUDE] if common_harmonics and COMMON_AMPLITUDE in values else 0.0,
                common_spectral_index=values.get(COMMON_INDEX, 13.0 / 3.0),
                common_harmonics=max(common_harmonics, 1),
                toa_white=toa_white if any(w is not None for w in toa_white) else (),
                toa_jitter=toa_jitter if any(j is not None for j in toa_jitter) else (),
                chromatic=tuple(
                    (name, harmonics,
                     np.array([10 ** values[for_pulsar(CHROMATIC[name][0], n)] for n in dataset.names]),
                     np.array([values[for_pulsar(CHROMATIC[name][1], n)] for n in dataset.names]),
                     np.array(indices, dtype=float))
                    for name, harmonics, indices in chromatic),
                **{k: np.array(v, dtype=float) for k, v in per_pulsar.items()},
            )
        )
    return models

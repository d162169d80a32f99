"""The noise model an analysis assumes: white noise, red noise and a common process per pulsar.

An estimator needs each pulsar's auto-covariance.  :class:`NoiseModel` holds the
parameters that build it, one value per pulsar (white-noise scale and
quadrature in seconds, red-noise amplitude and index) plus the common process
(amplitude and index of a background shared by all pulsars, uncorrelated in this
role).  It comes from the dataset's injected truth (:func:`noise_from_dataset`),
from values in a config (:func:`noise_from_values`), or, for a noise-marginalised
analysis, from posterior draws (a list of models).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from ptares.dataset import Dataset
from ptares.errors import InputError

__all__ = ["NoiseModel", "noise_from_dataset", "noise_from_values", "noise_from_chains"]


@dataclass(frozen=True)
class NoiseModel:
    """Per-pulsar noise parameters (arrays of length P) and the common process."""

    white_scale: np.ndarray
    white_quadrature: np.ndarray  #: s
    red_amplitude: np.ndarray
    red_spectral_index: np.ndarray
    red_harmonics: int
    common_amplitude: float
    common_spectral_index: float
    common_harmonics: int = 30

    def white_sigma(self, index: int, toa_errors: np.ndarray) -> np.ndarray:
        """White-noise standard deviation (s) of each TOA of pulsar ``index``."""
        return np.sqrt((self.white_scale[index] * toa_errors) ** 2 + self.white_quadrature[index] ** 2)


def noise_from_dataset(dataset: Dataset) -> NoiseModel:
    """The injected noise of a simulated dataset, with the injected background as the common process."""
    try:
        noise = [p.noise for p in dataset.pulsars]
        white_scale = np.array([n["white_scale"] for n in noise], dtype=float)
        white_quadrature = np.array([n["white_quadrature"] for n in noise], dtype=float)
        red_amplitude = np.array([n["red_amplitude"] for n in noise], dtype=float)
        red_spectral_index = np.array([n["red_spectral_index"] for n in noise], dtype=float)
    except KeyError as exc:
        raise InputError(f"has no injected noise parameter {exc} (not simulated by ptares?)", "dataset") from None
    red = dataset.signals.get("red", {})
    gwb = dataset.signals.get("gwb", {})
    return NoiseModel(
        white_scale=white_scale,
        white_quadrature=white_quadrature,
        red_amplitude=red_amplitude,
        red_spectral_index=red_spectral_index,
        red_harmonics=int(red.get("harmonics", 30)),
        common_amplitude=float(gwb.get("amplitude", 0.0)),
        common_spectral_index=float(gwb.get("gamma", 13.0 / 3.0)),
        common_harmonics=int(gwb.get("harmonics", 30)),
    )


def noise_from_values(
    dataset: Dataset,
    white_scale=1.0,
    white_quadrature=0.0,
    red_amplitude=0.0,
    red_spectral_index=13.0 / 3.0,
    red_harmonics=30,
    common_amplitude=0.0,
    common_spectral_index=13.0 / 3.0,
    common_harmonics=30,
    pulsars: dict | None = None,
) -> NoiseModel:
    """Noise given as values: defaults for every pulsar, ``pulsars`` maps names to per-pulsar overrides.

    ``white_quadrature`` in seconds.
    """
    count = len(dataset.pulsars)
    columns = {
        "white_scale": np.full(count, float(white_scale)),
        "white_quadrature": np.full(count, float(white_quadrature)),
        "red_amplitude": np.full(count, float(red_amplitude)),
        "red_spectral_index": np.full(count, float(red_spectral_index)),
    }
    names = dataset.names
    for name, overrides in (pulsars or {}).items():
        if name not in names:
            raise InputError(f"pulsar {name!r} is not in the dataset", "correlate.noise_values.pulsars")
        for key, value in overrides.items():
            if key not in columns:
                raise InputError(f"unknown noise parameter {key!r}", f"correlate.noise_values.pulsars.{name}")
            columns[key][names.index(name)] = float(value)
    return NoiseModel(
        red_harmonics=int(red_harmonics),
        common_amplitude=float(common_amplitude),
        common_spectral_index=float(common_spectral_index),
        common_harmonics=int(common_harmonics),
        **columns,
    )


def noise_from_chains(dataset: Dataset, path, draws: int = 50, seed: int = 0) -> list:
    """Noise models from ``draws`` random posterior samples of a ``ptares fit`` (its ``chains.h5``).

    Parameters the fit held fixed keep the values it held them at; the fit's
    common process (``common_lg_amplitude``, ``common_spectral_index``, on its frequencies) becomes
    the common process, and red noise the fit left out stays out.  Burn-in is
    two integrated autocorrelation times, as in the fit's summary.  The chains
    must come from a fit of this very dataset.
    """
    import json
    from pathlib import Path

    import emcee
    import h5py

    from ptares.dataset import fingerprint
    from ptares.inference.parameters import (
        COMMON_AMPLITUDE,
        COMMON_INDEX,
        RED_AMPLITUDE,
        RED_INDEX,
        WHITE_QUADRATURE,
        WHITE_SCALE,
        for_pulsar,
    )

    path = Path(path)
    if not path.is_file():
        raise InputError("chains file not found", str(path))
    try:
        with h5py.File(path, "r") as f:
            names = [n.decode() if isinstance(n, bytes) else str(n) for n in f.attrs["parameter_names"]]
            held = json.loads(f.attrs["held_values"])
            common_harmonics = int(f.attrs["common_harmonics"])
            red_harmonics = int(f.attrs["red_harmonics"])
            origin = f.attrs["dataset_fingerprint"]
        backend = emcee.backends.HDFBackend(str(path), name="chains", read_only=True)
        steps = backend.iteration
        with np.errstate(invalid="ignore", divide="ignore"):
            tau = backend.get_autocorr_time(tol=0) if steps > 1 else np.array([np.nan])
    except (OSError, KeyError, ValueError) as exc:
        raise InputError(f"not a ptares chains file ({exc})", str(path)) from None
    if origin != fingerprint(dataset):
        raise InputError("comes from a fit of another dataset", str(path))
    burn = int(2 * np.max(tau)) if np.all(np.isfinite(tau)) else steps // 2
    chain = backend.get_chain(discard=min(burn, max(steps - 1, 0)))
    if chain.size == 0:
        raise InputError("holds no samples yet", str(path))
    samples = chain.reshape(-1, len(names))
    rng = np.random.default_rng(seed)
    picked = samples[rng.choice(samples.shape[0], size=min(draws, samples.shape[0]), replace=False)]
    held = {k: (float(v) if v is not None else -np.inf) for k, v in held.items()}
    models = []
    for row in picked:
        values = {**held, **dict(zip(names, map(float, row)))}
        per_pulsar = {
            "white_scale": [values[for_pulsar(WHITE_SCALE, n)] for n in dataset.names],
            "white_quadrature": [10 ** values[for_pulsar(WHITE_QUADRATURE, n)] for n in dataset.names],
            "red_amplitude": [10 ** values[for_pulsar(RED_AMPLITUDE, n)] if red_harmonics else 0.0 for n in dataset.names],
            "red_spectral_index": [values[for_pulsar(RED_INDEX, n)] for n in dataset.names],
        }
        models.append(
            NoiseModel(
                red_harmonics=max(red_harmonics, 1),
                common_amplitude=10 ** values[COMMON_AMPLITUDE] if common_harmonics and COMMON_AMPLITUDE in values else 0.0,
                common_spectral_index=values.get(COMMON_INDEX, 13.0 / 3.0),
                common_harmonics=max(common_harmonics, 1),
                **{k: np.array(v, dtype=float) for k, v in per_pulsar.items()},
            )
        )
    return models

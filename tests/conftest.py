"""Shared helpers for the ptares tests."""

from __future__ import annotations

import copy

import numpy as np
import pytest

from ptares.inputs.config import Config


def small_config(**overrides) -> Config:
    """A quick random-array config; ``overrides`` replace whole top-level sections."""
    raw = {
        "run": {"name": "test", "seed": 11},
        "array": {"random": {"count": 6}},
        "observing": {"start": 53000.0, "span": 6.0, "cadence": 30.0, "toa_error": 0.5},
        "gwb": {"amplitude": 2e-15, "harmonics": 10},
    }
    raw.update(copy.deepcopy(overrides))
    raw = {k: v for k, v in raw.items() if v is not None}
    return Config.model_validate(raw)


def listed_pulsars(count: int, seed: int, prefix: str) -> list:
    """``count`` pulsar entries named ``<prefix>00``... at isotropic random positions (degrees)."""
    rng = np.random.default_rng(seed)
    return [{"name": f"{prefix}{i:02d}", "ra": float(rng.uniform(0, 360)),
             "dec": float(np.degrees(np.arcsin(rng.uniform(-1, 1))))} for i in range(count)]


@pytest.fixture
def config_factory():
    return small_config


SMALL_TOML = """\
[run]
name = "cli-test"
seed = 5

[array]
pulsars = [
  { name = "Aa", ra = "01:00:00", dec = "10:00:00", distance = "1 kpc" },
  { name = "Bb", ra = 200.0, dec = -30.0, red = { amplitude = 1e-14, spectral_index = 4.0 } },
  { name = "Cc", ra = 300.0, dec = 60.0, toa_error = "900 ns", start = 54000 },
]

[observing]
start = 53000
span = "5 yr"
cadence = "30 d"
cadence_jitter = "2 d"
toa_error = "300 ns"

[gwb]
amplitude = 3e-15
harmonics = 8
"""


@pytest.fixture
def small_toml(tmp_path):
    path = tmp_path / "small.toml"
    path.write_text(SMALL_TOML)
    return path


def assert_same_pulsars(first, second):
    """Every per-pulsar array and attribute of two datasets equal, bit for bit."""
    assert [p.name for p in first.pulsars] == [p.name for p in second.pulsars]
    for a, b in zip(first.pulsars, second.pulsars):
        for key in ("mjd", "residuals", "errors", "design_matrix"):
            np.testing.assert_array_equal(getattr(a, key), getattr(b, key))
        assert (a.ra, a.dec, a.distance, a.distance_error) == (b.ra, b.dec, b.distance, b.distance_error)
        assert a.injected.keys() == b.injected.keys()
        for key in a.injected:
            np.testing.assert_array_equal(a.injected[key], b.injected[key])
        assert a.noise == b.noise
        for key in ("frequency_mhz", "system"):
            assert (getattr(a, key) is None) == (getattr(b, key) is None), key
            if getattr(a, key) is not None:
                np.testing.assert_array_equal(getattr(a, key), getattr(b, key))


def parallel_map(function, items, workers: int = 2) -> list:
    """``[function(item) for item in items]`` in ``workers`` spawned processes with one BLAS/numba thread each,
    for many-realisation tests (CI has two cores); ``function`` must be a module-level function."""
    import multiprocessing
    from concurrent.futures import ProcessPoolExecutor

    from ptares.threads import pin_process

    with ProcessPoolExecutor(workers, mp_context=multiprocessing.get_context("spawn"), initializer=pin_process,
                             initargs=(1,)) as pool:
        return list(pool.map(function, items))

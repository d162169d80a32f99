"""Simulation: determinism, independent streams, and how the pieces add up."""

import numpy as np
import pytest
from conftest import small_config

from ptares.errors import InputError
from ptares.inputs.config import Config
from ptares.physics.patterns import correlation_matrix
from ptares.simulation.array import build_array
from ptares.simulation.signals.background import lower_factor
from ptares.simulation.simulate import simulate

LISTED = [
    {"name": "P1", "ra": 10.0, "dec": 5.0},
    {"name": "P2", "ra": 100.0, "dec": -40.0},
    {"name": "P3", "ra": 250.0, "dec": 60.0},
]


def _config(pulsars, **extra):
    return small_config(array={"pulsars": pulsars}, noise={"red": {"amplitude": 5e-15}}, **extra)


def test_same_seed_bit_identical():
    config = small_config(noise={"red": {"amplitude": {"log_uniform": [1e-16, 1e-14]}}}, observing={"cadence_jitter": 3.0, "toa_error_scatter": 0.2})
    a, b = simulate(config), simulate(config)
    for p, q in zip(a.pulsars, b.pulsars):
        assert p.name == q.name
        assert p.mjd.tobytes() == q.mjd.tobytes()
        assert p.residuals.tobytes() == q.residuals.tobytes()
        assert p.errors.tobytes() == q.errors.tobytes()
        for key in p.injected:
            assert p.injected[key].tobytes() == q.injected[key].tobytes()


def test_different_seeds_differ():
    config = small_config()
    assert not np.array_equal(simulate(config, seed=1).pulsars[0].residuals, simulate(config, seed=2).pulsars[0].residuals)


def test_adding_a_pulsar_leaves_the_others_unchanged():
    """Per-pulsar streams: white and red noise of existing pulsars do not move; the background
    (drawn through a lower-triangular factor) is unchanged for pulsars before the new one."""
    three = simulate(_config(LISTED))
    four = simulate(_config(LISTED + [{"name": "P4", "ra": 300.0, "dec": 0.0}]))
    for p, q in zip(three.pulsars, four.pulsars):
        np.testing.assert_array_equal(p.mjd, q.mjd)
        for key in ("white", "red", "gwb"):
            np.testing.assert_array_equal(p.injected[key], q.injected[key])
    # inserting at the front still keeps white and red noise (not the background) of the others
    front = simulate(_config([{"name": "P0", "ra": 300.0, "dec": 0.0}] + LISTED))
    for p, q in zip(three.pulsars, front.pulsars[1:]):
        np.testing.assert_array_equal(p.injected["white"], q.injected["white"])
        np.testing.assert_array_equal(p.injected["red"], q.injected["red"])


def test_residuals_are_weighted_least_squares_remainder_of_the_sum():
    """Weighted least squares (common practice) is characterised without any solver: the removed part
    lies in the span of the design matrix, and what is left is N^-1-orthogonal to every column."""
    data = simulate(_config(LISTED))
    for p in data.pulsars:
        total = sum(p.injected.values())
        sigma = np.sqrt((p.noise["white_scale"] * p.errors) ** 2 + p.noise["white_quadrature"] ** 2)
        removed = total - p.residuals
        coefficients = np.linalg.lstsq(p.design_matrix, removed, rcond=None)[0]
        np.testing.assert_allclose(p.design_matrix @ coefficients, removed, atol=1e-12 * np.abs(total).max())
        projections = p.design_matrix.T @ (p.residuals / sigma**2)
        scale = np.abs(p.design_matrix).T @ (np.abs(p.residuals) / sigma**2)
        np.testing.assert_array_less(np.abs(projections), 1e-9 * scale)


def test_white_noise_scatter_matches_scaled_errors():
    """Common practice: sigma^2 -> (s sigma)^2 + q^2; the drawn white noise has that variance."""
    config = small_config(
        array={"random": {"count": 3}},
        observing={"start": 53000, "span": 20.0, "cadence": 1.0, "toa_error": 1.0},
        noise={"white": {"scale": 1.5, "quadrature": 2.0}},
        gwb=None,
    )
    data = simulate(config)
    white = np.concatenate([p.injected["white"] for p in data.pulsars])
    expected = (1.5 * 1e-6) ** 2 + (2e-6) ** 2
    n = white.size
    assert np.var(white) == pytest.approx(expected, abs=5 * expected * np.sqrt(2 / n))
    assert "red" not in data.pulsars[0].injected and "gwb" not in data.pulsars[0].injected


@pytest.mark.parametrize("pattern", ["hellings-downs", "monopole", "dipole", "uncorrelated"])
def test_lower_factor_reproduces_correlation_matrix(pattern):
    positions = np.array([p.position for p in build_array(small_config(array={"random": {"count": 25}}), 3)])
    gamma = correlation_matrix(positions, pattern)
    factor = lower_factor(gamma)
    np.testing.assert_allclose(factor @ factor.T, gamma, atol=1e-9)
    assert np.allclose(factor, np.tril(factor))


def test_lower_factor_rejects_indefinite_matrix():
    with pytest.raises(ValueError, match="not positive semi-definite"):
        lower_factor(np.array([[1.0, 2.0], [2.0, 1.0]]))


def test_too_few_toas_for_the_timing_model():
    """Three epochs cannot constrain three timing-model columns plus noise: rejected when the config is read."""
    with pytest.raises(InputError, match="timing-model columns") as caught:
        small_config(observing={"span": 0.2, "cadence": 30.0})
    assert caught.value.where == "observing.span"


def test_fresh_seed_is_recorded():
    raw = small_config().model_dump()
    raw["run"]["seed"] = None
    data = simulate(Config.model_validate(raw))
    assert isinstance(data.seed, int)
    again = simulate(Config.model_validate(raw), seed=data.seed)
    np.testing.assert_array_equal(again.pulsars[0].residuals, data.pulsars[0].residuals)


def test_dataset_files_identical_but_for_creation_time(tmp_path):
    """Same config and seed: every dataset and attribute in the HDF5 file is equal, except `created`."""
    import h5py

    from ptares.dataset import write_dataset

    config = _config(LISTED)
    paths = [write_dataset(simulate(config), tmp_path / f"{i}.h5") for i in range(2)]

    def contents(path):
        items = {}
        with h5py.File(path) as f:
            def visit(name, node):
                items[name] = node[()].tobytes() if isinstance(node, h5py.Dataset) else None
                for key, value in node.attrs.items():
                    items[f"{name}@{key}"] = repr(np.asarray(value).tolist())
            f.visititems(visit)
            for key, value in f.attrs.items():
                if key != "created":
                    items[f"@{key}"] = repr(np.asarray(value).tolist())
        return items

    first, second = (contents(p) for p in paths)
    assert first == second
    assert len(first) > 20

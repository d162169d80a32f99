"""Simulation: determinism, independent streams, and how the pieces add up."""

import numpy as np
import pytest

from ptares.pulsar_array import build_array
from ptares.config import Config
from ptares.errors import InputError
from ptares.signals.background import lower_factor
from ptares.correlations import correlation_matrix
from ptares.simulate import simulate
from ptares.timing_model import fit_timing_model
from ptares.signals.white import effective_uncertainties

from conftest import small_config

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


def test_residuals_are_fitted_sum_of_components():
    data = simulate(_config(LISTED))
    for p in data.pulsars:
        total = sum(p.injected.values())
        weights = effective_uncertainties(p.errors, p.noise["white_scale"], p.noise["white_quadrature"])
        np.testing.assert_allclose(p.residuals, fit_timing_model(total, p.design_matrix, weights)[0], atol=1e-18)
        assert abs(np.sum(p.residuals / weights**2)) < 1e-6 * np.sum(np.abs(p.residuals) / weights**2)


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
    rng = np.random.default_rng(6)
    positions = np.array([p.position for p in build_array(small_config(array={"random": {"count": 25}}), 3)])
    gamma = correlation_matrix(positions, pattern)
    factor = lower_factor(gamma)
    np.testing.assert_allclose(factor @ factor.T, gamma, atol=1e-9)
    assert np.allclose(factor, np.tril(factor))


def test_lower_factor_rejects_indefinite_matrix():
    with pytest.raises(ValueError, match="not positive semi-definite"):
        lower_factor(np.array([[1.0, 2.0], [2.0, 1.0]]))


def test_too_few_toas_for_the_timing_model():
    config = small_config(observing={"span": 0.2, "cadence": 30.0})
    with pytest.raises(InputError, match="timing-model columns"):
        simulate(config)


def test_fresh_seed_is_recorded():
    raw = small_config().model_dump()
    raw["run"]["seed"] = None
    data = simulate(Config.model_validate(raw))
    assert isinstance(data.seed, int)
    again = simulate(Config.model_validate(raw), seed=data.seed)
    np.testing.assert_array_equal(again.pulsars[0].residuals, data.pulsars[0].residuals)

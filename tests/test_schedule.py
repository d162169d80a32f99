"""Observing schedules: cadence, jitter, gaps, per-pulsar windows and the array's union span."""

import numpy as np
import pytest

from ptares.pulsar_array import build_array, observe
from ptares.constants import YEAR
from ptares.schedule import observation_epochs, toa_uncertainties

from conftest import small_config


def test_regular_cadence_without_jitter():
    epochs = observation_epochs(50000.0, 100.0, 10.0, 0.0, (), np.random.default_rng(0))
    np.testing.assert_allclose(epochs, 50000.0 + 10.0 * np.arange(11))


def test_jitter_keeps_epochs_sorted_distinct_and_inside_window():
    epochs = observation_epochs(50000.0, 3000.0, 14.0, 6.0, (), np.random.default_rng(1))
    assert np.all(np.diff(epochs) > 0)
    assert epochs.min() >= 50000.0 and epochs.max() <= 53000.0
    gaps = np.diff(epochs)
    assert gaps.std() > 3.0  # uneven
    assert gaps.mean() == pytest.approx(14.0, rel=0.05)


def test_gaps_are_empty():
    epochs = observation_epochs(50000.0, 2000.0, 5.0, 2.0, ((50500.0, 50800.0), (51200, 51210)), np.random.default_rng(2))
    assert not np.any((epochs >= 50500) & (epochs <= 50800))
    assert not np.any((epochs >= 51200) & (epochs <= 51210))


def test_toa_uncertainty_scatter_is_log_normal():
    errors = toa_uncertainties(20000, 1e-6, 0.2, np.random.default_rng(3))
    assert np.median(errors) == pytest.approx(1e-6, rel=0.02)
    assert np.std(np.log10(errors)) == pytest.approx(0.2, rel=0.03)
    np.testing.assert_array_equal(toa_uncertainties(5, 2e-7, 0.0, None), 2e-7)


def test_per_pulsar_windows_and_union_span():
    config = small_config(
        array={
            "pulsars": [
                {"name": "a", "ra": 10, "dec": 0},
                {"name": "b", "ra": 20, "dec": 0, "start": 53500, "span": "8 yr"},
                {"name": "c", "ra": 30, "dec": 0, "start": 52000, "span": "2 yr", "cadence": 7},
            ]
        }
    )
    pulsars = build_array(config, 1)
    observations = observe(pulsars, 1)
    assert observations.mjd[1].min() >= 53500
    assert observations.mjd[2].max() <= 52000 + 2 * 365.25
    assert np.median(np.diff(observations.mjd[2])) == pytest.approx(7.0)
    assert observations.start == 52000
    assert observations.span == pytest.approx((53500 + 8 * 365.25 - 52000) * 86400)
    assert observations.span == pytest.approx((53500 - 52000) * 86400 + 8 * YEAR)

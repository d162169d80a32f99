"""Observing schedules: cadence, jitter, gaps, per-pulsar windows and the array's union span."""

import numpy as np
import pytest
from conftest import small_config

from ptares.physics.constants import YEAR
from ptares.simulation.array import build_array, observe
from ptares.simulation.schedule import observation_epochs, toa_uncertainties


def test_regular_cadence_without_jitter():
    """Without jitter the epochs are start + k * cadence, k = 0..floor(span / cadence)."""
    epochs = observation_epochs(50000.0, 100.0, 10.0, 0.0, (), np.random.default_rng(0))
    np.testing.assert_allclose(epochs, 50000.0 + 10.0 * np.arange(11))


def test_jitter_keeps_epochs_sorted_distinct_and_inside_window():
    """Gaussian jitter of 6 d on a 14-d cadence: intervals scatter (sd ~ sqrt(2) * 6 d) and their mean
    stays 14 d (standard error ~ 8.5 d / sqrt(214) = 0.6 d, so 5% = 0.7 d is over 1 sigma; the
    mean interval is (last - first) / (n - 1) and so nearly exact)."""
    epochs = observation_epochs(50000.0, 3000.0, 14.0, 6.0, (), np.random.default_rng(1))
    assert np.all(np.diff(epochs) > 0)
    assert epochs.min() >= 50000.0 and epochs.max() <= 53000.0
    gaps = np.diff(epochs)
    assert gaps.std() > 3.0  # uneven
    assert gaps.mean() == pytest.approx(14.0, rel=0.05, abs=0)


def test_gaps_are_empty():
    """No TOA inside a configured gap (the gap bounds are inclusive)."""
    epochs = observation_epochs(50000.0, 2000.0, 5.0, 2.0, ((50500.0, 50800.0), (51200, 51210)), np.random.default_rng(2))
    assert not np.any((epochs >= 50500) & (epochs <= 50800))
    assert not np.any((epochs >= 51200) & (epochs <= 51210))


def test_toa_uncertainty_scatter_is_log_normal():
    """log10 of the uncertainties is normal with sd = scatter (0.2 dex).  With n = 20000 the sample
    median of the errors has relative sd ~ 1.25 * 0.2 * ln(10) / sqrt(n) = 0.4%, and the sample sd of
    log10 has relative sd 1 / sqrt(2 n) = 0.5%: the tolerances 2% and 3% are 5 and 6 sigma."""
    errors = toa_uncertainties(20000, 1e-6, 0.2, np.random.default_rng(3))
    assert np.median(errors) == pytest.approx(1e-6, rel=0.02, abs=0)
    assert np.std(np.log10(errors)) == pytest.approx(0.2, rel=0.03, abs=0)
    np.testing.assert_array_equal(toa_uncertainties(5, 2e-7, 0.0, None), 2e-7)


def test_per_pulsar_windows_and_union_span():
    """Per-pulsar overrides; the array span T is the union of the windows (earliest start to latest end),
    the Julian year of 365.25 d (astropy's yr) converting the spans."""
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
    assert np.median(np.diff(observations.mjd[2])) == pytest.approx(7.0, rel=1e-6, abs=0)
    assert observations.start == 52000
    assert observations.span == pytest.approx((53500 + 8 * 365.25 - 52000) * 86400, rel=1e-6, abs=0)
    assert observations.span == pytest.approx((53500 - 52000) * 86400 + 8 * YEAR, rel=1e-6, abs=0)

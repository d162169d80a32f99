"""Calibration of the cross-correlation analysis over many simulated realisations.

Each check derives its tolerance from the spread of the realisations themselves
(standard errors of means and of variances); seeds are fixed.  The noise model is
the injected truth, as the estimator assumes.
"""

import numpy as np
import pytest
from astropy import units as u
from astropy.coordinates import SkyCoord
from conftest import small_config

from ptares.correlation.analysis import correlate
from ptares.correlation.fourier import fourier_products
from ptares.correlation.noise import noise_from_dataset
from ptares.correlation.pairs import (
    joint_statistic,
    optimal_statistic,
    overlap,
    pair_correlations,
)
from ptares.correlation.scatter import bin_pairs, binned_covariance
from ptares.inputs.config import CorrelateSection
from ptares.physics.patterns import correlation_matrix
from ptares.simulation.simulate import simulate

pytestmark = pytest.mark.statistical

RNG = np.random.default_rng(404)
LISTED = [
    {"name": f"Q{i:02d}", "ra": float(RNG.uniform(0, 360)), "dec": float(np.degrees(np.arcsin(RNG.uniform(-1, 1))))}
    for i in range(12)
]
COMPONENTS = 8
WEAK = 5e-17  # A^2 = 2.5e-33, S/N about 0.04 for this array (sigma about 6e-32)


def config_for(amplitude, correlation="hellings-downs"):
    return small_config(
        array={"pulsars": LISTED},
        observing={"start": 53000, "span": 10.0, "cadence": 30.0, "cadence_jitter": 5.0, "toa_error": 0.2},
        gwb={"amplitude": amplitude, "harmonics": COMPONENTS, "correlation": correlation},
    )


def hellings_downs_independent(angle):
    """Hellings & Downs 1983, written out here."""
    x = (1 - np.cos(angle)) / 2
    return 1.5 * x * np.log(x) - x / 4 + 0.5


def analyse(config, count, first_seed):
    """Per realisation: (dataset, products, pairs, HD statistic)."""
    out = []
    for seed in range(first_seed, first_seed + count):
        data = simulate(config, seed=seed)
        products = fourier_products(data, noise_from_dataset(data), COMPONENTS, 13 / 3)
        pairs = pair_correlations(products, np.array([p.position for p in data.pulsars]))
        out.append((data, products, pairs, optimal_statistic(pairs, overlap(pairs, "hellings-downs"))))
    return out


@pytest.fixture(scope="module")
def weak():
    """A weak background (S/N about 0.04): 300 realisations."""
    return analyse(config_for(WEAK), 300, 100)


@pytest.fixture(scope="module")
def silent():
    """No background: 300 realisations."""
    return analyse(config_for(0.0), 300, 2000)


def test_amplitude_is_unbiased(weak):
    """Mean recovered A^2 within 3 standard errors of the injected A^2 (weak signal; a loud one is
    checked with the binned correlations below)."""
    values = np.array([r[3]["amplitude2"] for r in weak])
    standard_error = values.std(ddof=1) / np.sqrt(values.size)
    assert abs(values.mean() - WEAK**2) < 3 * standard_error


def test_reported_sigma_matches_scatter_in_weak_signal_limit(weak):
    """The reported sigma of A^2 equals the realisation scatter within 15% (the sample sd of 300 values is
    itself uncertain by about 4%)."""
    values = np.array([r[3]["amplitude2"] for r in weak])
    reported = np.mean([r[3]["sigma"] for r in weak])
    assert values.std(ddof=1) == pytest.approx(reported, rel=0.15, abs=0)


def test_no_signal_snr_is_standard_normal(silent):
    """Without a background the S/N has mean 0 (standard error 1/sqrt(300)) and variance 1
    (standard error sqrt(2/300)); 4 standard errors."""
    snr = np.array([r[3]["snr"] for r in silent])
    assert abs(snr.mean()) < 4 / np.sqrt(snr.size)
    assert abs(snr.var(ddof=1) - 1) < 4 * np.sqrt(2 / snr.size)


def test_binned_correlations_follow_hellings_downs_and_their_covariance_matches_isserlis():
    """Binned pair correlations average to A^2 times the bin's weighted mean of Gamma (Hellings & Downs
    1983, pair separations from astropy); their realisation variance equals the diagonal of the
    Isserlis covariance (exact path, and the frequency-diagonal approximation within 25%).  The standard
    error of a sample variance is estimated from the samples: sd((x - mean)^2) / sqrt(n)."""
    amplitude, count = 1.2e-14, 300
    runs = analyse(config_for(amplitude), count, 5000)
    recovered = np.array([r[3]["amplitude2"] for r in runs])  # a loud background: the statistic is unbiased too
    assert abs(recovered.mean() - amplitude**2) < 3 * recovered.std(ddof=1) / np.sqrt(count)
    coords = SkyCoord([p["ra"] for p in LISTED] * u.deg, [p["dec"] for p in LISTED] * u.deg)
    pairs0 = runs[0][2]
    angles = coords[pairs0.a].separation(coords[pairs0.b]).rad
    binned = np.array([bin_pairs(r[2], 6).rho for r in runs])
    reference = bin_pairs(pairs0, 6)
    expected = np.array([np.sum(w * hellings_downs_independent(angles[m])) for m, w in zip(reference.members, reference.weights)])
    standard_error = binned.std(axis=0, ddof=1) / np.sqrt(count)
    np.testing.assert_array_less(np.abs(binned.mean(axis=0) - amplitude**2 * expected), 4 * standard_error)

    positions = np.array([p.position for p in runs[0][0].pulsars])
    covariance, method = binned_covariance(runs[0][1], pairs0, reference, correlation_matrix(positions), amplitude**2, amplitude**2)
    assert method == "exact"
    deviations = (binned - binned.mean(axis=0)) ** 2
    variance = deviations.mean(axis=0)
    variance_error = deviations.std(axis=0, ddof=1) / np.sqrt(count)
    z = (variance - np.diag(covariance)) / variance_error
    assert np.all(np.abs(z) < 4.5), z
    # the weights of the bins change a little between realisations (jittered schedules): check they barely do
    assert all(np.array_equal(bin_pairs(r[2], 6).members[0], reference.members[0]) for r in runs[:5])

    import ptares.correlation.scatter as scatter

    limit = scatter.EXACT_LIMIT
    scatter.EXACT_LIMIT = 0
    try:
        approximate, method = binned_covariance(runs[0][1], pairs0, reference, correlation_matrix(positions), amplitude**2, amplitude**2)
    finally:
        scatter.EXACT_LIMIT = limit
    assert method == "frequency-diagonal"
    np.testing.assert_allclose(np.diag(approximate), np.diag(covariance), rtol=0.25)


def test_phase_shift_null_is_centred(silent):
    """Phase shifts destroy inter-pulsar correlation: the null S/N has mean 0 (standard error from the
    trials' own spread; for one dataset that spread need not be 1, since it follows the realised power)."""
    data = silent[0][0]
    result = correlate(data, noise_from_dataset(data), CorrelateSection(phase_shifts=200, scrambles=50, seed=3))
    null = result.nulls["phase_shifts"]["hellings-downs"]
    assert abs(null.mean()) < 4 * null.std(ddof=1) / np.sqrt(null.size)
    assert result.nulls["sky_scrambles"]["hellings-downs"].size == 50


def test_monopole_is_recovered_and_not_taken_for_hellings_downs():
    """A loud monopole (clock-like) injection: the monopole statistic detects it, and fitted jointly the
    Hellings–Downs amplitude stays consistent with zero."""
    for seed in range(3):
        data = simulate(config_for(3e-14, correlation="monopole"), seed=seed)
        products = fourier_products(data, noise_from_dataset(data), COMPONENTS, 13 / 3)
        pairs = pair_correlations(products, np.array([p.position for p in data.pulsars]))
        monopole = optimal_statistic(pairs, overlap(pairs, "monopole"))
        assert monopole["snr"] > 5
        joint = joint_statistic(pairs, ["hellings-downs", "monopole", "dipole"])
        assert abs(joint["snr"]["hellings-downs"]) < 4
        assert joint["snr"]["monopole"] > 5


def test_fit_quality_p_value_is_calibrated():
    """Data drawn from the model itself: the simulation-calibrated fit p-value falls below 0.1 in about
    10% of 150 realisations (binomial 3-sigma range 2.6% to 17.4%)."""
    values = []
    for seed in range(150):
        data = simulate(config_for(8e-15), seed=9000 + seed)
        result = correlate(data, noise_from_dataset(data), CorrelateSection(scrambles=0, phase_shifts=0, bins=6, fit_trials=300))
        values.append(result.fit["p_calibrated"])
    fraction = np.mean(np.array(values) < 0.1)
    bound = 3 * np.sqrt(0.1 * 0.9 / len(values))
    assert abs(fraction - 0.1) < bound, fraction

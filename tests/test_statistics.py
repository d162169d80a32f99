"""Many-realisation checks of the simulated background and red noise.

Each test compares an average over realisations with its expectation from the
published convention (PHYSICS.md, "Stochastic background": coefficients of
variance S(f_k)/T on f_k = k/T, correlated by Gamma_ab), written out here
independently of ptares' own spectra module.  Tolerances are 4.5 standard
errors, the standard errors computed from Gaussian theory or from the spread
of the realisations themselves; seeds are fixed, so the outcome is reproducible.
"""

import numpy as np
import pytest
from astropy import units as u
from astropy.coordinates import SkyCoord
from conftest import small_config

from ptares.simulation.simulate import simulate

pytestmark = pytest.mark.statistical

YEAR = 365.25 * 86400.0
Z_MAX = 4.5


def power_law_psd(f, amplitude, gamma):
    """Residual PSD, s^2/Hz: A^2 / (12 pi^2) f_yr^-3 (f / f_yr)^-gamma (Jenet et al. 2006)."""
    return amplitude**2 / (12 * np.pi**2) * YEAR**3 * (f * YEAR) ** (-gamma)


def fourier_basis(times, span, harmonics):
    """Columns sin(2 pi k t / T), cos(2 pi k t / T) for k = 1..harmonics."""
    k = np.arange(1, harmonics + 1)
    phase = 2 * np.pi * np.outer(times, k) / span
    return np.hstack([np.sin(phase), np.cos(phase)])


def independent_pattern(name, angle):
    """Hellings & Downs 1983 closed form, monopole 1, dipole cos (common practice), written out here."""
    if name == "hellings-downs":
        x = (1 - np.cos(angle)) / 2
        return 1.5 * x * np.log(x) - x / 4 + 0.5
    return np.ones_like(angle) if name == "monopole" else np.cos(angle)


def pair_angles(listed):
    """Separations of every pair (a < b) with astropy's SkyCoord.separation."""
    coords = SkyCoord([p["ra"] for p in listed] * u.deg, [p["dec"] for p in listed] * u.deg)
    a, b = np.triu_indices(len(listed), 1)
    return a, b, coords[a].separation(coords[b]).rad


def realisations(config, count, first_seed=1000):
    return [simulate(config, seed=first_seed + i) for i in range(count)]


@pytest.mark.parametrize("pattern", ["uncorrelated", "hellings-downs"])
def test_background_variance_matches_sum_of_spectrum(pattern):
    """Mean square of the injected background over many realisations equals sum_k S(f_k)/T.

    For one pulsar, m = (1/n) r^T r with r = B c, c ~ N(0, D): E[m] = tr(B D B^T)/n, which is
    sum_k S(f_k)/T exactly since sin^2 + cos^2 = 1, and Var[m] = 2 tr((B^T B D)^2)/n^2
    (Gaussian quadratic form).  T and the time origin come from the config (12 yr from
    MJD 53000), not from the dataset.  Each pulsar's z-score must be small.
    """
    amplitude, gamma, harmonics, count = 2.4e-15, 13 / 3, 20, 300
    config = small_config(
        array={"random": {"count": 8}},
        observing={"start": 53000, "span": 12.0, "cadence": 20.0, "cadence_jitter": 4.0, "toa_error": 0.1},
        gwb={"amplitude": amplitude, "spectral_index": gamma, "harmonics": harmonics, "correlation": pattern},
    )
    runs = realisations(config, count)
    span, origin = 12 * YEAR, 53000.0
    variance = np.repeat(power_law_psd(np.arange(1, harmonics + 1) / span, amplitude, gamma) / span, 2)
    variance = np.concatenate([variance[0::2], variance[1::2]])  # sine block, then cosine block
    for a in range(len(runs[0].pulsars)):
        # the jittered schedule differs between realisations: take each one's exact moments
        observed, means, variances = [], [], []
        for run in runs:
            pulsar = run.pulsars[a]
            times = (pulsar.mjd - origin) * 86400.0
            basis = fourier_basis(times, span, harmonics)
            weighted_gram = basis.T @ basis * variance[None, :]
            means.append(np.trace(weighted_gram) / times.size)
            variances.append(2 * np.trace(weighted_gram @ weighted_gram) / times.size**2)
            observed.append(np.mean(pulsar.injected["gwb"] ** 2))
        z = (np.mean(observed) - np.mean(means)) / (np.sqrt(np.sum(variances)) / count)
        assert abs(z) < Z_MAX, (a, np.mean(observed), np.mean(means), z)


@pytest.mark.parametrize("pattern", ["hellings-downs", "monopole", "dipole"])
def test_binned_pair_correlations_follow_pattern(pattern):
    """Average over realisations of r_a . r_b / (n sum_k S/T) in angular bins equals the mean Gamma
    of the bin (identical schedules, so the expectation is exactly Gamma_ab)."""
    amplitude, gamma, harmonics, count = 3e-15, 13 / 3, 15, 250
    rng = np.random.default_rng(77)  # fixed pulsar positions: a random array would move with the seed
    listed = [
        {"name": f"S{i:02d}", "ra": float(rng.uniform(0, 360)), "dec": float(np.degrees(np.arcsin(rng.uniform(-1, 1))))}
        for i in range(24)
    ]
    config = small_config(
        array={"pulsars": listed},
        observing={"start": 53000, "span": 10.0, "cadence": 30.0, "toa_error": 0.01},
        gwb={"amplitude": amplitude, "spectral_index": gamma, "harmonics": harmonics, "correlation": pattern},
    )
    runs = realisations(config, count, first_seed=5000)
    span = 10 * YEAR
    power = np.sum(power_law_psd(np.arange(1, harmonics + 1) / span, amplitude, gamma) / span)
    a, b, angles = pair_angles(listed)
    expected_gamma = independent_pattern(pattern, angles)
    edges = np.linspace(0, np.pi, 7)
    which = np.digitize(angles, edges[1:-1])
    binned = []
    for run in runs:
        r = np.array([p.injected["gwb"] for p in run.pulsars])
        rho = np.sum(r[a] * r[b], axis=1) / (r.shape[1] * power)
        binned.append([rho[which == k].mean() for k in range(6)])
    binned = np.array(binned)
    for k in range(6):
        assert np.any(which == k)
        target = expected_gamma[which == k].mean()
        standard_error = binned[:, k].std(ddof=1) / np.sqrt(count)
        assert abs(binned[:, k].mean() - target) < Z_MAX * standard_error, (k, binned[:, k].mean(), target)


def test_red_noise_spectrum_recovered():
    """Least-squares Fourier coefficients of the injected red noise have mean power S(f_k)/T,
    and a straight-line fit of log power against log f recovers -gamma (Lentati et al. 2013 basis)."""
    amplitude, gamma, harmonics, count = 1e-14, 3.5, 12, 400
    config = small_config(
        array={"random": {"count": 1}},
        observing={"start": 53000, "span": 10.0, "cadence": 14.0, "toa_error": 0.01},
        noise={"red": {"amplitude": amplitude, "spectral_index": gamma, "harmonics": harmonics}},
        gwb=None,
    )
    runs = realisations(config, count, first_seed=9000)
    span = 10 * YEAR
    times = (runs[0].pulsars[0].mjd - 53000.0) * 86400.0
    basis = fourier_basis(times, span, harmonics)
    series = np.array([run.pulsars[0].injected["red"] for run in runs])
    coefficients = np.linalg.lstsq(basis, series.T, rcond=None)[0]
    power = 0.5 * (coefficients[:harmonics] ** 2 + coefficients[harmonics:] ** 2).mean(axis=1)
    frequencies = np.arange(1, harmonics + 1) / span
    expected = power_law_psd(frequencies, amplitude, gamma) / span
    # the mean of 2 * count unit-variance chi-squared(1) terms has relative sd 1 / sqrt(count)
    z = (power / expected - 1) * np.sqrt(count)
    assert np.all(np.abs(z) < Z_MAX), z
    slope, _ = np.polyfit(np.log(frequencies), np.log(power), 1)
    x = np.log(frequencies)
    slope_sd = (1 / np.sqrt(count)) / np.sqrt(np.sum((x - x.mean()) ** 2))
    assert abs(-slope - gamma) < Z_MAX * slope_sd


def test_binary_population_background_matches_gaussian_power_and_hellings_downs():
    """A background of binaries ([gwb] source = "binaries"): averaged over realisations, the
    residual variance equals the Gaussian background's sum_k S(f_k)/T and the binned pair
    correlations follow Hellings–Downs (Earth terms correlate, pulsar terms do not).  The
    population is non-Gaussian, so standard errors come from the spread of the realisations."""
    amplitude, gamma, harmonics, count = 2e-15, 13 / 3, 10, 150
    rng = np.random.default_rng(78)
    listed = [
        {"name": f"B{i:02d}", "ra": float(rng.uniform(0, 360)), "dec": float(np.degrees(np.arcsin(rng.uniform(-1, 1))))}
        for i in range(16)
    ]
    config = small_config(
        array={"pulsars": listed},
        observing={"start": 53000, "span": 10.0, "cadence": 30.0, "toa_error": 0.01},
        gwb={"amplitude": amplitude, "spectral_index": gamma, "harmonics": harmonics, "source": "binaries", "binaries": 300},
    )
    runs = realisations(config, count, first_seed=7000)
    span = 10 * YEAR
    power = np.sum(power_law_psd(np.arange(1, harmonics + 1) / span, amplitude, gamma) / span)

    variance = np.array([np.mean([np.mean(p.injected["gwb"] ** 2) for p in run.pulsars]) for run in runs])
    z = (variance.mean() - power) / (variance.std(ddof=1) / np.sqrt(count))
    assert abs(z) < Z_MAX, (variance.mean(), power, z)

    a, b, angles = pair_angles(listed)
    edges = np.linspace(0, np.pi, 5)
    which = np.digitize(angles, edges[1:-1])
    binned = []
    for run in runs:
        r = np.array([p.injected["gwb"] for p in run.pulsars])
        rho = np.sum(r[a] * r[b], axis=1) / (r.shape[1] * power)
        binned.append([rho[which == k].mean() for k in range(4)])
    binned = np.array(binned)
    expected = independent_pattern("hellings-downs", angles)
    for k in range(4):
        standard_error = binned[:, k].std(ddof=1) / np.sqrt(count)
        assert abs(binned[:, k].mean() - expected[which == k].mean()) < Z_MAX * standard_error, k

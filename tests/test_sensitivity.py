"""Forecasts (``ptares sensitivity``): transmission, noise spectra, continuous-wave and background S/N, detection
probability, and the command itself.

Outside references named in each test: numpy's least-squares polynomial fit, scipy's periodogram and
chi-squared quantiles, numerical integration over the sphere, the injection code's own binaries (checked
against integration of the redshift elsewhere), and campaigns of simulated realisations.
"""

import json
from dataclasses import replace

import numpy as np
import pytest
from scipy import signal, stats

from ptares.api import config_from
from ptares.campaign.sweep import run_sweep
from ptares.cli import main
from ptares.correlation.fourier import fourier_products
from ptares.correlation.noise import noise_from_dataset
from ptares.correlation.null_distribution import null_eigenvalues, signal_eigenvalues, tail_probability, threshold
from ptares.correlation.pairs import overlap, pair_correlations, pair_matrices, weak_signal_weights
from ptares.correlation.scatter import ensemble_draws, weighted_covariance
from ptares.forecast import spectral
from ptares.forecast.sensitivity import forecast, sky_grid
from ptares.forecast.statistic import expected_statistic, truncated, with_common_power
from ptares.inputs.config import SensitivitySection
from ptares.physics.constants import F_YR
from ptares.physics.patterns import correlation_matrix
from ptares.physics.sky import unit_vector
from ptares.simulation.signals.continuous import Binary, PulsarLayout
from ptares.simulation.simulate import outline

RNG = np.random.default_rng(77)
LISTED = [
    {"name": f"S{i:02d}", "ra": float(RNG.uniform(0, 360)), "dec": float(np.degrees(np.arcsin(RNG.uniform(-1, 1)))),
     "distance": "1 kpc", "toa_error": f"{RNG.uniform(100, 500):.0f} ns"}
    for i in range(12)
]


def array_config(count=12, red=0.0, extra=None, **observing):
    config = {"run": {"seed": 1}, "array": {"pulsars": LISTED[:count]},
              "observing": {"span": "10 yr", "cadence": "30 d", "toa_error": "200 ns", "cadence_jitter": "4 d",
                            **observing},
              "noise": {"red": {"amplitude": red, "spectral_index": 4.0, "harmonics": 10}}}
    config.update(extra or {})
    return config_from(config)


def test_transmission_is_the_power_a_weighted_least_squares_fit_leaves():
    """Against numpy's weighted polynomial fit: a sine and a cosine of each frequency, quadratic removed; the
    share of their weighted power left, averaged, is the transmission (``|x|^2`` of the complex exponential)."""
    rng = np.random.default_rng(1)
    times = np.sort(rng.uniform(0.0, 3e8, 150))
    weights = 1.0 / rng.uniform(1e-7, 5e-7, times.size) ** 2
    scaled = (times - times.mean()) / times.std()
    design = np.column_stack([np.ones_like(scaled), scaled, scaled**2])
    frequency = np.array([2e-9, 5e-9, 2e-8, 1e-7])
    found = spectral.transmission(times, weights, design, frequency)
    for f, value in zip(frequency, found):
        left = []
        for wave in (np.sin(2 * np.pi * f * times), np.cos(2 * np.pi * f * times)):
            fitted = np.polyval(np.polyfit(scaled, wave, 2, w=np.sqrt(weights)), scaled)
            left.append(np.sum(weights * (wave - fitted) ** 2))
        assert value == pytest.approx(np.sum(left) / np.sum(weights), rel=1e-8)
    assert found[0] < 0.5 < found[-1]  # the fit takes most of the power below 1/T, little above


def test_white_noise_spectrum_is_the_periodogram_level():
    """The white level ``2 T / sum w`` against scipy's one-sided periodogram of white noise (mean over 40
    realisations, tolerance 4 standard errors of that mean)."""
    dataset = outline(array_config(count=2, cadence_jitter="0 d", toa_error_scatter=0.0))
    pulsar = dataset.pulsars[0]
    spectra = spectral.pulsar_spectra(dataset, noise_from_dataset(dataset), np.array([1e-8]))
    step = np.median(np.diff(pulsar.mjd)) * 86400.0
    sigma = pulsar.errors[0]
    rng = np.random.default_rng(3)
    levels = [signal.periodogram(rng.normal(0.0, sigma, pulsar.mjd.size), fs=1.0 / step)[1][1:-1].mean()
              for _ in range(40)]
    error = np.std(levels) / np.sqrt(len(levels))
    assert abs(np.mean(levels) - spectra.white[0]) < 4 * error + 0.01 * spectra.white[0]  # (n - 1) / n of the span


def test_adding_a_common_process_by_woodbury_equals_building_it_in():
    """``Z`` with the common process added to the noise-only products equals the products built with it."""
    dataset = outline(array_config(count=4, red=2e-14))
    noise = noise_from_dataset(dataset)
    base = fourier_products(dataset, replace(noise, common_amplitude=0.0), 8, 13 / 3)
    built = fourier_products(dataset, replace(noise, common_amplitude=5e-15, common_harmonics=8), 8, 13 / 3)
    added = with_common_power(base, 25e-30)
    assert np.allclose(added.Z, built.Z, rtol=1e-9, atol=1e-12 * np.abs(built.Z).max())


def six_pulsar_statistic(a2=16e-30):
    """A 6-pulsar array's products with a background of power ``a2`` in its noise model, its pair correlations,
    weak-signal weights, quoted sigma, positions and Hellings-Downs matrix."""
    dataset = outline(array_config(count=6))
    positions = np.array([p.position for p in dataset.pulsars])
    products = with_common_power(fourier_products(dataset, replace(noise_from_dataset(dataset), common_amplitude=0.0),
                                                  6, 13 / 3), a2)
    pairs = pair_correlations(products, positions)
    weights = weak_signal_weights(pairs, overlap(pairs, "hellings-downs"))
    sigma = float(np.sqrt(np.sum((weights * pairs.sigma) ** 2)))
    return products, pairs, weights, sigma, positions, correlation_matrix(positions)


@pytest.mark.parametrize("limit", [10_000, 1])
def test_signal_eigenvalues_without_a_signal_are_the_null_and_carry_its_moments(limit):
    """Zero background: the null's eigenvalues (both routes).  With one: mean ``A^2 / sigma`` (the estimate is
    unbiased) and variance ``2 sum lambda^2`` equal to the Isserlis variance of the pair sums, computed apart."""
    a2 = 16e-30
    products, pairs, weights, sigma, positions, pattern = six_pulsar_statistic(a2)
    null, method = signal_eigenvalues(products, pairs, weights, sigma, np.eye(6), a2, a2, limit)
    reference, reference_method = null_eigenvalues(products, pairs, weights, sigma)
    if limit > 1:
        assert method == reference_method == "exact"
        assert np.allclose(np.sort(null), np.sort(reference), atol=1e-10 * np.abs(reference).max())
    assert method == ("exact" if limit > 1 else "frequency-diagonal")
    values, _ = signal_eigenvalues(products, pairs, weights, sigma, pattern, a2, a2, limit)
    variance, _ = weighted_covariance(products, pairs, weights, pattern, a2, a2)
    tolerance = 1e-8 if limit > 1 else 0.15  # frequency-diagonal: the basis columns' overlap left out
    assert np.sum(values) == pytest.approx(a2 / sigma, rel=tolerance)
    assert 2 * np.sum(values**2) == pytest.approx(variance.item() / sigma**2, rel=tolerance)


@pytest.mark.statistical
def test_detection_probability_matches_draws_of_the_gaussian_ensemble():
    """The background's tail beyond the null's threshold against 4000 draws of the Fourier-domain data from
    their joint Gaussian (scatter module's sampler): within 4 binomial standard errors."""
    a2 = 16e-30
    products, pairs, weights, sigma, positions, pattern = six_pulsar_statistic(a2)
    null, _ = signal_eigenvalues(products, pairs, weights, sigma, np.eye(6), a2, a2)
    x = threshold(0.05, null)
    forecast_probability = tail_probability(x, signal_eigenvalues(products, pairs, weights, sigma, pattern, a2, a2)[0])
    rng = np.random.default_rng(8)
    for gamma_matrix, expected in ((pattern, forecast_probability), (np.eye(6), 0.05)):
        X = ensemble_draws(products, gamma_matrix, a2, a2, 4000, rng)
        numerator = np.einsum("nai,i,nbi->nab", X, products.phi, X)[:, pairs.a, pairs.b]
        snr = (numerator / pair_matrices(products)[1][pairs.a, pairs.b]) @ weights / sigma
        measured = np.mean(snr > x)
        assert abs(measured - expected) < 4 * np.sqrt(expected * (1 - expected) / snr.size)


def test_threshold_inverts_the_tail_and_matches_chi_squared():
    """scipy's chi-squared quantile for equal eigenvalues (a scaled chi-squared of 7 degrees of freedom)."""
    lam = np.full(7, 0.3)
    for alpha in (0.2, 1e-3):
        assert threshold(alpha, lam) == pytest.approx(0.3 * stats.chi2.isf(alpha, 7), rel=1e-4)
    mixed = np.array([1.0, -0.4, 0.25, 0.1, -0.05])
    assert tail_probability(threshold(0.01, mixed), mixed) == pytest.approx(0.01, rel=1e-3)


def test_truncated_dataset_keeps_only_the_first_years():
    dataset = outline(array_config(count=3))
    part = truncated(dataset, 4.0)
    assert part.span == pytest.approx(4.0 * 365.25 * 86400.0)
    for whole, cut in zip(dataset.pulsars, part.pulsars):
        assert cut.mjd.max() <= dataset.start_mjd + 4 * 365.25 and cut.mjd.size < whole.mjd.size
        assert cut.design_matrix.shape == (cut.mjd.size, whole.design_matrix.shape[1])


def test_sky_average_of_the_antenna_power_is_one_third():
    """``(1 + s.p)^2 / 4`` averaged over the sphere by a fine grid (numerical integration): 1/3."""
    RA, DEC, weight = sky_grid(1.0)
    directions = unit_vector(RA.ravel(), DEC.ravel())
    for pulsar in (np.array([0.0, 0.0, 1.0]), unit_vector(1.0, -0.4)):
        power = 0.25 * (1 + directions @ pulsar) ** 2
        assert np.sum(weight.ravel() * power) == pytest.approx(1.0 / 3.0, rel=1e-3)


@pytest.mark.parametrize("red", [0.0, 1e-14])
def test_continuous_wave_snr_matches_injected_binaries(red):
    """Against the injection code: 2000 binaries at one sky position and frequency (Earth term), random
    polarisation angle, cos(inclination) and phase; the mean of ``r^T C^-1 r`` (timing model marginalised,
    dense covariance) against the forecast.  White noise: within 4 standard errors of the mean.  With steep
    red noise the frequency-domain spectrum misses the leakage of the red noise's low-frequency power
    (about 5% here); the stated accuracy of the curves is 10%."""
    dataset = outline(array_config(count=6, red=red, toa_error_scatter=0.1, cadence="20 d"))
    noise = noise_from_dataset(dataset)
    positions = np.array([p.position for p in dataset.pulsars])
    ra, dec, f = 1.0, 0.3, 2e-8
    spectra = spectral.pulsar_spectra(dataset, noise, np.array([f]))
    predicted = spectral.wave_response(spectra, pulsar_term=False)[:, 0] * 0.25 * (1 + positions @ unit_vector(ra, dec)) ** 2
    inverses = []
    for a, p in enumerate(dataset.pulsars):
        times = (p.mjd - dataset.start_mjd) * 86400.0
        covariance = np.diag(noise.white_sigma(a, p.errors) ** 2)
        if red:
            from ptares.physics.spectra import coefficient_variance, fourier_basis

            F = fourier_basis(times, dataset.span, noise.red_harmonics)
            phi = np.repeat(coefficient_variance(dataset.span, noise.red_harmonics, red, 4.0), 2)
            covariance += F @ np.diag(phi) @ F.T
        inverse = np.linalg.inv(covariance)
        M = p.design_matrix
        inverses.append(inverse - inverse @ M @ np.linalg.solve(M.T @ inverse @ M, M.T @ inverse))
    layout = PulsarLayout.of(positions, np.ones(len(positions)), [(p.mjd - dataset.start_mjd) * 86400.0
                                                                   for p in dataset.pulsars])
    rng = np.random.default_rng(5)
    totals = []
    for _ in range(2000):
        source = Binary("x", ra, dec, f, 1.0, np.arccos(rng.uniform(-1, 1)), rng.uniform(0, np.pi),
                        rng.uniform(0, 2 * np.pi), frequency_evolution=False, pulsar_term=False)
        totals.append(sum(r @ C @ r for r, C in zip(layout.residuals([source]), inverses)))
    totals = np.array(totals)
    error = totals.std() / np.sqrt(totals.size)
    if red:
        assert abs(predicted.sum() / totals.mean() - 1) < 0.10
    else:
        assert abs(predicted.sum() - totals.mean()) < 4 * error


def test_power_law_integrated_curve_touches_every_power_law_of_that_snr():
    """Thrane & Romano 2013: each power law with S/N equal to the curve's lies on or below it and touches it."""
    dataset = outline(array_config())
    frequency = spectral.frequency_grid(dataset, 300)
    spectra = spectral.pulsar_spectra(dataset, noise_from_dataset(dataset), frequency)
    positions = np.array([p.position for p in dataset.pulsars])
    effective = spectral.array_curve(spectra, positions, dataset.span)
    curve = spectral.power_law_integrated(frequency, effective, dataset.span, 2.0)
    for alpha, amplitude in zip(curve["alpha"][::10], curve["amplitude"][::10]):
        h_c = amplitude * (frequency / F_YR) ** alpha
        assert np.all(h_c <= curve["h_c"] * (1 + 1e-12))
        assert np.max(h_c / curve["h_c"]) > 0.97  # touches, up to the spacing of the index grid


def test_frequency_domain_snr_approximates_the_estimator_per_frequency():
    """Above the lowest frequencies (where the timing-model fit mixes Fourier columns), each frequency's
    weak-signal S/N of the frequency-domain sum agrees with the estimator's (``per_frequency_statistics``)
    within 10%, white noise and red noise alike."""
    from ptares.correlation.pairs import per_frequency_statistics

    for red in (0.0, 1e-14):
        dataset = outline(array_config(red=red))
        noise = replace(noise_from_dataset(dataset), common_amplitude=0.0)
        positions = np.array([p.position for p in dataset.pulsars])
        harmonics, amplitude = 12, 1e-15
        products = fourier_products(dataset, noise, harmonics, 13 / 3)
        pairs = pair_correlations(products, positions)
        exact = per_frequency_statistics(products, pairs, overlap(pairs, "hellings-downs"))
        per_frequency_exact = amplitude**2 / exact["sigma"]
        spectra = spectral.pulsar_spectra(dataset, noise, np.geomspace(0.5 / dataset.span, 1e-7, 400))
        approximate = [
            np.sqrt(spectral.background_snr(spectra, positions, dataset.span, k, amplitude, 13 / 3)["weak"][0] ** 2
                    - (spectral.background_snr(spectra, positions, dataset.span, k - 1, amplitude, 13 / 3)["weak"][0] ** 2
                       if k > 1 else 0.0))
            for k in range(1, harmonics + 1)
        ]
        ratio = np.array(approximate) / per_frequency_exact
        assert np.all(np.abs(ratio[3:] - 1) < 0.10), ratio


SWEEP = """
[run]
name = "forecast-check"
[array]
pulsars = {pulsars}
[observing]
span = "10 yr"
cadence = "45 d"
cadence_jitter = "4 d"
toa_error = "200 ns"
[gwb]
amplitude = {amplitude}
spectral_index = 0.0
harmonics = 20
[correlate]
scrambles = 0
phase_shifts = 0
fit_trials = 0
[sweep]
realisations = 100
seed = 3
false_alarm = 0.05
stages = ["simulate", "correlate"]
"""


@pytest.mark.statistical
def test_forecast_matches_a_campaign_of_100_realisations(tmp_path):
    """A campaign of 100 simulated realisations of one array: the mean measured S/N agrees with the expected
    one within 10% and within 4 standard errors of the mean; the share of realisations whose exact
    noise-only p-value is below 0.05 agrees with the forecast detection probability within 3 binomial
    standard errors.  A flat background spreads its power over 20 frequencies, so its S/N scatters less
    (relative standard error about 3.5%) than a steep one's, whose lowest frequency dominates."""
    pulsars = "[" + ", ".join("{" + ", ".join(f'{k} = {json.dumps(v)}' for k, v in p.items()) + "}" for p in LISTED) + "]"
    amplitude = 2.5e-14
    path = tmp_path / "campaign.toml"
    path.write_text(SWEEP.format(pulsars=pulsars, amplitude=amplitude))
    rows = run_sweep(path, tmp_path / "out", workers=1, progress=False)
    assert len(rows) == 100 and all(r["status"] == "ok" for r in rows)
    snr = np.array([r["hd_snr"] for r in rows])
    detected = np.mean([r["hd_p_exact"] < 0.05 for r in rows])

    dataset = outline(config_from(path))
    found = expected_statistic(dataset, noise_from_dataset(dataset), [amplitude], 0.0, 20, 0.05)
    expected, probability = found["snr"][0], found["detection_probability"][0]
    error = snr.std(ddof=1) / np.sqrt(snr.size)
    assert abs(snr.mean() - expected) < 4 * error
    assert abs(snr.mean() / expected - 1) < 0.10
    assert abs(detected - probability) < 3 * np.sqrt(probability * (1 - probability) / snr.size)


def test_sensitivity_command_writes_curves_and_figures(tmp_path, capsys):
    config = tmp_path / "array.toml"
    pulsars = "[" + ", ".join("{" + ", ".join(f'{k} = {json.dumps(v)}' for k, v in p.items()) + "}" for p in LISTED[:5]) + "]"
    config.write_text(f'[array]\npulsars = {pulsars}\n[observing]\nspan = "8 yr"\ncadence = "30 d"\n'
                      f'[gwb]\namplitude = 3e-15\nharmonics = 8\n[sensitivity]\namplitudes = [1e-15, 1e-14]\n'
                      f'curve_points = 40\nmap_step = 15\n')
    assert main(["sensitivity", str(config), "--out", str(tmp_path / "out"), "--years", "4", "8"]) == 0
    printed = capsys.readouterr().out
    assert "expected S/N" in printed and "detection probability" in printed
    content = json.loads((tmp_path / "out" / "sensitivity.json").read_text())
    assert content["background"]["amplitude"] == [1e-15, 1e-14]
    assert content["years"]["years"] == [4.0, 8.0]
    assert len(content["frequency"]) == 40 and len(content["pulsars"]) == 5
    assert content["reference_background"]["injected"] is True
    for name in ("sensitivity.png", "detection.png", "continuous_wave.png", "continuous_wave_sky.png"):
        assert (tmp_path / "out" / name).stat().st_size > 10_000

    # from the dataset the simulation writes: the same forecast
    assert main(["simulate", str(config), "--out", str(tmp_path / "sim"), "--no-figures"]) == 0
    assert main(["sensitivity", str(tmp_path / "sim" / "dataset.h5"), "--out", str(tmp_path / "from-data"),
                 "--config", str(config), "--years", "4", "8", "--no-figures"]) == 0
    again = json.loads((tmp_path / "from-data" / "sensitivity.json").read_text())
    assert np.allclose(again["background"]["snr"], content["background"]["snr"], rtol=1e-10)


@pytest.mark.parametrize("arguments, fragment", [
    (["--years", "40"], "sensitivity.years"),
    (["--false-alarm", "0.7"], "--false-alarm"),
])
def test_bad_sensitivity_settings_are_one_line(tmp_path, capsys, arguments, fragment):
    config = tmp_path / "array.toml"
    config.write_text('[array]\nrandom = {count = 3}\n[observing]\nspan = "5 yr"\ncadence = "60 d"\n'
                      '[sensitivity]\ncurve_points = 20\namplitudes = [1e-15]\n')
    assert main(["sensitivity", str(config), "--out", str(tmp_path / "out"), *arguments]) == 2
    error = capsys.readouterr().err.strip()
    assert "\n" not in error and fragment in error
    assert not (tmp_path / "out").exists() or not any((tmp_path / "out").iterdir())


def test_unknown_sensitivity_key_names_itself(tmp_path, capsys):
    config = tmp_path / "array.toml"
    config.write_text('[array]\nrandom = {count = 3}\n[sensitivity]\nfalse_alarms = 0.01\n')
    assert main(["sensitivity", str(config), "--out", str(tmp_path / "out")]) == 2
    assert "false_alarms" in capsys.readouterr().err


def test_forecast_grows_with_observing_time_and_amplitude():
    """More data and a louder background both raise the expected S/N and the detection probability."""
    result = forecast(outline(array_config(extra={"gwb": {"amplitude": 5e-15, "harmonics": 8}})),
                      SensitivitySection(amplitudes=(1e-15, 4e-15, 1.6e-14), years=(4.0, 7.0, 10.0), curve_points=30,
                                         map_step=20.0))
    for values in (result.background, result.years):
        assert np.all(np.diff(values["snr"]) > 0) and np.all(np.diff(values["detection_probability"]) > 0)
    assert result.reference["injected"] and result.years["amplitude"] == 5e-15
    assert np.all(result.wave["h0_best"] <= result.wave["h0_sky_averaged"])
    assert np.all(result.wave["h0_sky_averaged"] <= result.wave["h0_worst"])


def test_moment_matched_frequency_diagonal_forecast_agrees_with_the_exact_one():
    """Large arrays use the frequency-diagonal shapes moved to the exact mean and variance; on an array small
    enough for the exact distributions (with red noise, which mixes the basis columns most) the two agree:
    detection probabilities within 0.01, thresholds within 2%."""
    dataset = outline(array_config(red=1e-14))
    noise = noise_from_dataset(dataset)
    amplitudes = [1e-15, 6e-15, 1.5e-14]
    exact = expected_statistic(dataset, noise, amplitudes, 13 / 3, 10, 0.01)
    approximate = expected_statistic(dataset, noise, amplitudes, 13 / 3, 10, 0.01, limit=1)
    assert exact["method"] == "exact" and approximate["method"].startswith("frequency-diagonal")
    assert np.allclose(approximate["snr"], exact["snr"]) and np.allclose(approximate["snr_spread"], exact["snr_spread"])
    assert np.allclose(approximate["threshold"], exact["threshold"], rtol=0.02)
    assert np.allclose(approximate["detection_probability"], exact["detection_probability"], atol=0.01)

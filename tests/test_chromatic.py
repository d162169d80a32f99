"""Radio frequencies, observing systems and chromatic noise in simulated arrays.

Chromatic noise (PHYSICS.md, "Radio frequency and chromatic noise", common practice): a power
law ``S(f) = A^2 / (12 pi^2) f_yr^-3 (f / f_yr)^-gamma`` at the reference frequency 1400 MHz on the
Fourier basis ``f_k = k / T`` (coefficient variance ``S(f_k) / T``, so a residual variance of
``sum_k S(f_k) / T`` before the timing-model fit), scaled per TOA by ``(1400 MHz / nu)^chi``.
The expectations below are written from those formulas with astropy's Julian year; the Monte
Carlo tolerance is four standard errors of the mean over realisations (fixed seeds).
"""

import astropy.units as u
import numpy as np
import pytest
from conftest import small_config

from ptares.api import config_from
from ptares.dataset import load_dataset, write_dataset
from ptares.errors import InputError
from ptares.simulation.simulate import simulate

SYSTEMS = [{"name": "Low", "frequencies": [700.0]}, {"name": "Mid", "frequencies": [1300.0, 1500.0]},
           {"name": "High", "frequencies": [3000.0]}]
AMPLITUDE, GAMMA, HARMONICS = 1e-13, 3.0, 10


def chromatic_config(process="dispersion", chromatic_index=None, systems=SYSTEMS):
    noise = {"amplitude": AMPLITUDE, "spectral_index": GAMMA, "harmonics": HARMONICS}
    if chromatic_index is not None:
        noise["chromatic_index"] = chromatic_index
    return small_config(
        array={"random": {"count": 1}},
        observing={"start": 53000.0, "span": 6.0, "cadence": 30.0, "toa_error": 0.5, "systems": systems},
        noise={process: noise},
        gwb=None,
    )


def expected_variance_at_reference(span_s: float) -> float:
    """sum_k S(f_k) / T for the power law above (PHYSICS.md)."""
    year = (1 * u.yr).to_value(u.s)
    f = np.arange(1, HARMONICS + 1) / span_s
    psd = AMPLITUDE**2 / (12 * np.pi**2) * year**3 * (f * year) ** -GAMMA
    return float(np.sum(psd) / span_s)


@pytest.mark.parametrize("process, chromatic_index, chi", [("dispersion", None, 2.0), ("scattering", None, 4.0),
                                                          ("scattering", 3.3, 3.3)])
def test_chromatic_variance_in_each_band_matches_the_power_law(process, chromatic_index, chi):
    config = chromatic_config(process, chromatic_index)
    ratios = {}
    for seed in range(200):
        data = simulate(config, seed=seed)
        p = data.pulsars[0]
        series = p.injected[process]
        expected = expected_variance_at_reference(data.span)
        for band in np.unique(p.frequency_mhz):
            here = p.frequency_mhz == band
            ratios.setdefault(band, []).append(np.mean(series[here] ** 2) / (expected * (1400.0 / band) ** (2 * chi)))
    assert sorted(ratios) == [700.0, 1300.0, 1500.0, 3000.0]
    for band, values in ratios.items():
        values = np.array(values)
        error = values.std(ddof=1) / np.sqrt(values.size)
        assert abs(values.mean() - 1.0) < 4 * error, (band, values.mean(), error)


def test_every_band_of_an_epoch_sees_the_same_process_scaled_by_frequency():
    data = simulate(chromatic_config("scattering", 3.3), seed=1)
    p = data.pulsars[0]
    series = p.injected["scattering"]
    for mjd in np.unique(p.mjd)[:20]:
        here = np.flatnonzero(p.mjd == mjd)
        assert here.size == 4  # one TOA per sub-band of every system
        at_reference = series[here] * (p.frequency_mhz[here] / 1400.0) ** 3.3
        np.testing.assert_allclose(at_reference, at_reference[0], rtol=1e-12)


def test_toas_of_an_epoch_are_ordered_by_system_and_frequency_and_carry_their_system_errors():
    systems = [{"name": "Zed", "frequencies": [800.0], "toa_error": 2.0},
               {"name": "Alpha", "frequencies": [1500.0, 1300.0], "toa_error": 0.25}]
    data = simulate(chromatic_config(systems=systems), seed=2)
    p = data.pulsars[0]
    assert list(p.system[:3]) == ["Alpha", "Alpha", "Zed"]
    assert list(p.frequency_mhz[:3]) == [1300.0, 1500.0, 800.0]
    np.testing.assert_array_equal(p.errors[:3], [0.25e-6, 0.25e-6, 2e-6])
    assert p.systems == ["Alpha", "Zed"]


def test_radio_frequencies_and_systems_survive_the_dataset_file(tmp_path):
    data = simulate(chromatic_config(), seed=4)
    path = write_dataset(data, tmp_path / "d.h5")
    again = load_dataset(path).pulsars[0]
    np.testing.assert_array_equal(again.frequency_mhz, data.pulsars[0].frequency_mhz)
    np.testing.assert_array_equal(again.system, data.pulsars[0].system)
    assert again.noise["dispersion_chromatic_index"] == 2.0


def test_a_single_band_array_records_its_radio_frequency_and_no_system():
    config = small_config(observing={"start": 53000.0, "span": 3.0, "cadence": 30.0, "radio_frequency": "820 MHz"})
    p = simulate(config, seed=1).pulsars[0]
    assert np.all(p.frequency_mhz == 820.0) and p.system is None


@pytest.mark.parametrize("observing, words", [
    ({"systems": [{"name": "A", "frequencies": [1400]}, {"name": "A", "frequencies": [800]}]}, "system 'A' is listed twice"),
    ({"systems": [{"name": "A", "frequencies": [1400, 1400]}]}, "a frequency is listed twice"),
    ({"systems": [{"name": "A", "frequencies": []}]}, "observing.systems[0] (A).frequencies: lists no sub-band"),
    ({"systems": [{"name": "a/b", "frequencies": [1400]}]}, "observing.systems[0] (a/b).name: name 'a/b'"),
    ({"radio_frequency": -5}, "observing.radio_frequency"),
    # 365 epochs a year for 20 years, 200 sub-bands each: beyond the per-pulsar TOA limit only with the sub-bands
    ({"span": 20.0, "cadence": 1.0, "systems": [{"name": "A", "frequencies": list(range(100, 300))}]},
     "TOAs per pulsar is more than ptares handles"),
])
def test_bad_observing_systems_are_refused_naming_the_key(observing, words):
    with pytest.raises(InputError) as caught:
        config_from({"array": {"random": {"count": 2}},
                     "observing": {"start": 53000.0, "span": 3.0, "cadence": 30.0, **observing}})
    assert words in caught.value.line(), caught.value.line()


def test_a_dataset_with_a_bad_radio_frequency_or_system_name_is_refused(tmp_path):
    import h5py

    data = simulate(chromatic_config(), seed=4)
    path = write_dataset(data, tmp_path / "d.h5")
    name = data.pulsars[0].name
    with h5py.File(path, "r+") as f:
        f[f"pulsars/{name}/frequency_mhz"][0] = -1.0
    with pytest.raises(InputError, match="frequency_mhz\\[0\\] is -1.0; radio frequencies must be positive"):
        load_dataset(path)
    path = write_dataset(data, tmp_path / "e.h5")
    with h5py.File(path, "r+") as f:
        f[f"pulsars/{name}/system"][0] = b"=cmd"
    with pytest.raises(InputError, match="system name '=cmd'"):
        load_dataset(path)


# --- the likelihood with chromatic columns ---------------------------------------------------

def _dense_log_density(data, white, red, chromatic, common, gamma_ab):
    """log N(G^T r; 0, G^T C G) with scipy.stats.multivariate_normal: C written out TOA by TOA from the
    formulas above (white errors; red and common power laws on sin/cos of k/T; each chromatic process on the
    same columns times (1400 / nu)^chi), G the complement of each pulsar's timing model (numpy's SVD)."""
    import scipy.linalg
    import scipy.stats

    year = (1 * u.yr).to_value(u.s)
    span = data.span

    def columns(t, k):
        phase = 2 * np.pi * np.outer(t, np.arange(1, k + 1)) / span
        return np.hstack([np.sin(phase), np.cos(phase)])

    def variances(k, amplitude, gamma):
        f = np.arange(1, k + 1) / span
        return np.tile(amplitude**2 / (12 * np.pi**2) * year**3 * (f * year) ** -gamma / span, 2)

    sizes = np.cumsum([0] + [p.mjd.size for p in data.pulsars])
    C = np.zeros((sizes[-1], sizes[-1]))
    times = [(p.mjd - data.start_mjd) * 86400.0 for p in data.pulsars]
    k_common, amplitude, gamma = common
    for a, p in enumerate(data.pulsars):
        for b, q in enumerate(data.pulsars):
            block = gamma_ab[a, b] * (columns(times[a], k_common) * variances(k_common, amplitude, gamma)) @ columns(times[b], k_common).T
            if a == b:
                k_red, red_amplitude, red_gamma = red[a]
                F = columns(times[a], k_red)
                block += np.diag(white[a] ** 2 * p.errors**2) + (F * variances(k_red, red_amplitude, red_gamma)) @ F.T
                for k, chi, proc_amplitude, proc_gamma in chromatic[a]:
                    F = columns(times[a], k) * ((1400.0 / p.frequency_mhz) ** chi)[:, None]
                    block += (F * variances(k, proc_amplitude, proc_gamma)) @ F.T
            C[sizes[a]:sizes[a + 1], sizes[b]:sizes[b + 1]] = block
    G = scipy.linalg.block_diag(*[np.linalg.svd(p.design_matrix)[0][:, p.design_matrix.shape[1]:] for p in data.pulsars])
    r = np.concatenate([p.residuals for p in data.pulsars])
    return scipy.stats.multivariate_normal(mean=np.zeros(G.shape[1]), cov=G.T @ C @ G).logpdf(G.T @ r)


@pytest.mark.parametrize("correlated", [False, True])
def test_likelihood_with_chromatic_noise_equals_the_dense_gaussian_density(correlated):
    """Dispersion (chi = 2) and scattering (chi = 4) columns beside red noise and a common process: 1e-8 relative."""
    from ptares.inference.likelihood import Likelihood
    from ptares.physics.patterns import correlation_matrix

    config = small_config(
        array={"random": {"count": 3}},
        observing={"start": 53000.0, "span": 5.0, "cadence": 45.0, "toa_error": 0.5,
                   "systems": [{"name": "Low", "frequencies": [600.0, 800.0]}, {"name": "High", "frequencies": [2000.0]}]},
        noise={"dispersion": {"amplitude": 2e-14, "harmonics": 5}, "scattering": {"amplitude": 1e-15, "harmonics": 4},
               "red": {"amplitude": 1e-15, "harmonics": 6}},
        gwb={"amplitude": 3e-15, "harmonics": 5},
    )
    data = simulate(config, seed=9)
    likelihood = Likelihood(data, 5, 6, correlated, chromatic=(("dispersion", 5, 2.0), ("scattering", 4, 4.0)))
    dispersion = (np.array([2e-14, 0.0, 5e-14]), np.array([2.5, 3.0, 4.0]))
    scattering = (np.array([1e-15, 3e-15, 0.0]), np.array([4.0, 3.0, 2.0]))
    white = np.array([1.1, 0.9, 1.0])
    red_amplitude, red_index = np.array([1e-15, 2e-15, 0.0]), np.array([3.0, 4.0, 5.0])
    ours = likelihood(white, np.zeros(3), red_amplitude, red_index, 4e-15, 13 / 3,
                      chromatic={"dispersion": dispersion, "scattering": scattering})
    # ptares's Hellings–Downs matrix: it is checked against the written-out curve in test_likelihood.py
    gamma_ab = correlation_matrix(np.array([p.position for p in data.pulsars])) if correlated else np.eye(3)
    chromatic = [[(5, 2.0, dispersion[0][a], dispersion[1][a]), (4, 4.0, scattering[0][a], scattering[1][a])]
                 for a in range(3)]
    dense = _dense_log_density(data, white, [(6, red_amplitude[a], red_index[a]) for a in range(3)], chromatic,
                               (5, 4e-15, 13 / 3), gamma_ab)
    assert ours == pytest.approx(dense, rel=1e-8)
    without = likelihood(white, np.zeros(3), red_amplitude, red_index, 4e-15, 13 / 3)
    assert abs(without - ours) > 1.0  # the chromatic columns matter for these data


def test_modelling_chromatic_noise_needs_radio_frequencies():
    from ptares.inference.likelihood import Likelihood

    data = simulate(small_config(array={"random": {"count": 2}}), seed=1)
    data.pulsars[1].frequency_mhz = None
    with pytest.raises(InputError, match="has no radio frequencies"):
        Likelihood(data, 5, 0, False, chromatic=(("dispersion", 5, 2.0),))


# --- fits -------------------------------------------------------------------------------------

def _wide_band_array(seed, dispersion=3e-14):
    config = small_config(
        array={"random": {"count": 2}},
        observing={"start": 53000.0, "span": 8.0, "cadence": 30.0, "toa_error": 0.3,
                   "systems": [{"name": "Low", "frequencies": [430.0]}, {"name": "Mid", "frequencies": [1400.0]},
                               {"name": "High", "frequencies": [2600.0]}]},
        noise={"dispersion": {"amplitude": dispersion, "spectral_index": 3.0, "harmonics": 10}},
        gwb={"amplitude": 2e-15, "harmonics": 5},
    )
    return simulate(config, seed=seed)


def test_a_fit_recovers_the_injected_dispersion_amplitude(tmp_path):
    """One pulsar's dispersion-measure noise free (amplitude and spectral index; ensemble sampler), the rest held
    at the injection: the injected lg amplitude lies inside the 95% credible interval and the chain converged."""
    from ptares.inference.model import FitModel
    from ptares.inference.samplers import run_sampler
    from ptares.inference.samplers.chains import summarise
    from ptares.inputs.config import FitSection

    data = _wide_band_array(seed=12)
    name = data.pulsars[0].name
    section = FitSection(common="none", dispersion="free", chromatic_harmonics=10, pulsars=(name,), max_steps=6000,
                         seed=3)
    model = FitModel(data, section)
    assert model.names == [f"dispersion_lg_amplitude@{name}", f"dispersion_spectral_index@{name}"]
    summary = summarise(model, run_sampler(model, tmp_path / "c.h5"))
    entry = summary["parameters"][f"dispersion_lg_amplitude@{name}"]
    low, high = entry["interval95"]
    assert summary["converged"]
    assert low < np.log10(3e-14) < high, entry
    assert high - low < 1.5  # the three bands measure it: far narrower than the prior's 9 decades


def test_chromatic_noise_is_modelled_when_injected():
    from ptares.inference.model import FitModel
    from ptares.inputs.config import FitSection

    data = _wide_band_array(seed=1)
    model = FitModel(data, FitSection(common="uncorrelated"))
    assert model.chromatic_modes == {"dispersion": "injected"}
    assert model.likelihood.width == model.likelihood.size + 2 * 10
    with pytest.raises(InputError, match="fit.fixed.scattering_lg_amplitude"):
        FitModel(data, FitSection(fixed={"scattering_lg_amplitude": -14}))
    # the chromatic index of the model's columns: the injected one, or [fit] chromatic_indices for every pulsar
    # (cosine columns: the sine of the first frequency vanishes at the first TOA)
    scale = model.likelihood.pulsars[0].basis[:, model.likelihood.size + 1] / model.likelihood.pulsars[0].basis[:, 1]
    np.testing.assert_allclose(scale, (1400.0 / data.pulsars[0].frequency_mhz) ** 2.0)
    other = FitModel(data, FitSection(scattering="free", chromatic_indices={"scattering": 3.5}))
    column = other.likelihood.chromatic_columns["scattering"].start
    scale = other.likelihood.pulsars[1].basis[:, column + 1] / other.likelihood.pulsars[1].basis[:, 1]
    np.testing.assert_allclose(scale, (1400.0 / data.pulsars[1].frequency_mhz) ** 3.5)


# --- the optimal statistic and the common process with chromatic noise ---------------------------

def _chromatic_array(amplitude, count=8):
    rng = np.random.default_rng(77)
    pulsars = [{"name": f"C{i:02d}", "ra": float(rng.uniform(0, 360)),
                "dec": float(np.degrees(np.arcsin(rng.uniform(-1, 1))))} for i in range(count)]
    return small_config(
        array={"pulsars": pulsars},
        observing={"start": 53000.0, "span": 8.0, "cadence": 30.0, "toa_error": 0.3,
                   "systems": [{"name": "Low", "frequencies": [430.0]}, {"name": "Mid", "frequencies": [1400.0]},
                               {"name": "High", "frequencies": [2600.0]}]},
        noise={"dispersion": {"amplitude": 1e-14, "spectral_index": 3.0, "harmonics": 10}},
        gwb={"amplitude": amplitude, "harmonics": 6},
    )


def _statistics(amplitude, realisations, without_chromatic=False):
    """(A^2 estimate, weak-signal sigma) of the Hellings–Downs optimal statistic over realisations, with the
    injected noise model (or that model without its chromatic processes)."""
    import dataclasses

    from ptares.correlation.fourier import fourier_products
    from ptares.correlation.noise import noise_from_dataset
    from ptares.correlation.pairs import optimal_statistic, overlap, pair_correlations

    config = _chromatic_array(amplitude)
    out = []
    for seed in range(realisations):
        data = simulate(config, seed=seed)
        noise = noise_from_dataset(data)
        assert noise.chromatic and noise.chromatic[0][0] == "dispersion"
        if without_chromatic:
            noise = dataclasses.replace(noise, chromatic=())
        pairs = pair_correlations(fourier_products(data, noise, 6, 13 / 3), np.array([p.position for p in data.pulsars]))
        statistic = optimal_statistic(pairs, overlap(pairs, "hellings-downs"))
        out.append((statistic["amplitude2"], statistic["sigma"]))
    return np.array(out).T


@pytest.mark.statistical
def test_optimal_statistic_with_chromatic_noise_modelled_is_unbiased_and_its_null_sigma_holds():
    """Strong dispersion-measure noise, 150 realisations each.  No background: with the chromatic noise in the
    noise model the quoted (weak-signal) sigma equals the scatter of A^2 within 3 x 1/sqrt(2(n-1)) (the
    relative error of a standard deviation from n draws, Gaussian approximation), and its mean is within 3
    standard errors of zero; left out of the noise model, the quoted sigma falls far below the scatter.  A
    weak background (A = 5e-16): the mean A^2 is within 3 standard errors of the injected A^2.  (With a
    background the weak-signal sigma understates the scatter by the background's own variance, which the
    signal-aware sigma covers; it is not checked here.)"""
    values, sigmas = _statistics(0.0, 150)
    tolerance = 3 / np.sqrt(2 * (values.size - 1))
    assert abs(values.std(ddof=1) / sigmas.mean() - 1) < tolerance, (values.std(ddof=1), sigmas.mean())
    assert abs(values.mean()) < 3 * values.std(ddof=1) / np.sqrt(values.size)
    values, sigmas = _statistics(0.0, 150, without_chromatic=True)
    assert values.std(ddof=1) / sigmas.mean() > 1 + 3 * tolerance, (values.std(ddof=1), sigmas.mean())
    values, _ = _statistics(5e-16, 150)
    assert abs(values.mean() - 5e-16**2) < 3 * values.std(ddof=1) / np.sqrt(values.size)


def test_the_common_amplitude_is_biased_when_chromatic_noise_is_injected_but_not_modelled(tmp_path):
    """One realisation (fixed seed) of 8 pulsars with strong dispersion-measure noise and a background at
    A = 2e-15; an uncorrelated common process fitted (amplitude and index free, ensemble sampler). With the
    dispersion noise modelled (held at its injection) the injected lg A lies inside the 95% interval;
    without it the dispersion power is taken for common power and the whole 95% interval lies above it."""
    from ptares.inference.model import FitModel
    from ptares.inference.samplers import run_sampler
    from ptares.inference.samplers.chains import summarise
    from ptares.inputs.config import FitSection

    data = simulate(_chromatic_array(2e-15), seed=5)
    intervals = {}
    for mode in ("injected", "none"):
        model = FitModel(data, FitSection(common="uncorrelated", dispersion=mode, max_steps=6000, seed=2,
                                          effective_samples=200, autocorr_factor=30))
        summary = summarise(model, run_sampler(model, tmp_path / f"{mode}.h5"))
        assert summary["converged"], mode
        intervals[mode] = summary["parameters"]["common_lg_amplitude"]["interval95"]
    truth = np.log10(2e-15)
    assert intervals["injected"][0] < truth < intervals["injected"][1], intervals
    assert intervals["none"][0] > truth, intervals


def test_gibbs_sampling_of_dispersion_noise_matches_quadrature(tmp_path):
    """One pulsar's dispersion-measure noise free (lg amplitude, spectral index) beside its red noise and white
    noise held at the injection: the Gibbs sampler's chromatic block (Metropolis steps with the pulsar's
    coefficients integrated out, then an exact coefficient draw) gives the posterior that direct numerical
    integration of likelihood x prior on a 2-D grid gives (trapezoid rule, numpy; the likelihood itself is
    checked against the dense Gaussian density above): the 16th, 50th and 84th percentiles of the lg
    amplitude within 4 Monte Carlo standard errors sqrt(q (1 - q) / N_eff) / p(x_q)."""
    from ptares.inference.model import FitModel
    from ptares.inference.samplers import run_sampler
    from ptares.inference.samplers.chains import posterior_draws, summarise
    from ptares.inputs.config import FitSection

    config = small_config(
        array={"random": {"count": 1}},
        observing={"start": 53000.0, "span": 6.0, "cadence": 30.0, "toa_error": 0.4,
                   "systems": [{"name": "Low", "frequencies": [500.0]}, {"name": "High", "frequencies": [1500.0]}]},
        noise={"dispersion": {"amplitude": 1e-14, "spectral_index": 3.0, "harmonics": 8},
               "red": {"amplitude": 1e-15, "harmonics": 8}},
        gwb=None,
    )
    data = simulate(config, seed=21)
    section = FitSection(common="none", dispersion="free", chromatic_harmonics=8, sampler="gibbs", max_steps=6000,
                         seed=5)
    model = FitModel(data, section)
    run = run_sampler(model, tmp_path / "c.h5")
    summary = summarise(model, run)
    assert summary["converged"]
    draws = posterior_draws(run.chain, run.convergence.burn)[:, 0]

    amplitudes, indices = np.linspace(-20.0, -11.0, 361), np.linspace(0.0, 7.0, 141)  # the default priors' ranges
    log_posterior = np.array([[model.log_likelihood(np.array([a, g])) for g in indices] for a in amplitudes])
    density = np.trapezoid(np.exp(log_posterior - log_posterior.max()), indices, axis=1)
    cumulative = np.concatenate([[0.0], np.cumsum((density[1:] + density[:-1]) / 2 * np.diff(amplitudes))])
    cumulative /= cumulative[-1]
    density /= np.trapezoid(density, amplitudes)
    effective = summary["effective_samples"]
    for q in (0.16, 0.5, 0.84):
        exact = float(np.interp(q, cumulative, amplitudes))
        error = np.sqrt(q * (1 - q) / effective) / float(np.interp(exact, amplitudes, density))
        assert abs(np.quantile(draws, q) - exact) < 4 * error, (q, np.quantile(draws, q), exact, error)

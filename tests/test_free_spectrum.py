"""A free spectrum of the common process: one variance per frequency (PHYSICS.md, "Gibbs sampling").

The Gibbs sampler's draw of each variance rho_k given the Fourier coefficients is checked against the
conditional density computed by direct numerical integration over lg rho (numpy trapezoid rule on a fine
grid): the conjugate inverse-gamma route (prior uniform in lg rho, no other process at that frequency)
and the slice-sampling route (a pulsar's red noise sharing the frequency; correlated pulsars).  Quantiles
of many draws agree within 4 Monte Carlo standard errors sqrt(q (1 - q) / n) / p(x_q).
"""

import numpy as np
import pytest
from conftest import small_config

from ptares.inference.model import FitModel
from ptares.inference.samplers.gibbs import GibbsSampler
from ptares.inputs.config import FitSection
from ptares.simulation.simulate import simulate


def _sampler(common, red):
    data = simulate(small_config(array={"random": {"count": 5}}, gwb={"amplitude": 5e-15, "harmonics": 3},
                                 noise={"red": {"amplitude": 2e-15, "harmonics": 3}} if red else {}), seed=2)
    model = FitModel(data, FitSection(common=common, common_spectrum="free", harmonics=3,
                                      red="injected" if red else "none"))
    return model, GibbsSampler(model)


@pytest.mark.parametrize("common, red", [("uncorrelated", False), ("hellings-downs", False), ("uncorrelated", True),
                                         ("hellings-downs", True)])
def test_each_variance_is_drawn_from_its_conditional_given_the_coefficients(common, red):
    model, sampler = _sampler(common, red)
    P = len(model.dataset.pulsars)
    rng = np.random.default_rng(7)
    truth = 1e-14
    gamma = sampler.likelihood.gamma_matrix if common == "hellings-downs" else np.eye(P)
    own = np.zeros((P, sampler.likelihood.width))
    if red:  # pulsars' own variances at the frequencies, a few of them large
        own[:, :6] = np.repeat(np.array([[3e-15, 0.0, 1e-14, 0.0, 5e-15]]).T, 6, axis=1)
    covariance = truth * gamma + np.diag(own[:, 0])
    coefficients = np.zeros((P, sampler.likelihood.width))
    coefficients[:, :6] = np.linalg.cholesky(covariance) @ rng.standard_normal((P, 6))
    grid = np.linspace(-20.0, -8.0, 24001)
    k = 2  # the second frequency: columns 2 and 3
    pair = coefficients[:, 2:4]
    log_density = []
    for y in grid:
        C = 10.0**y * gamma + np.diag(own[:, 2])
        sign, log_det = np.linalg.slogdet(C)
        log_density.append(-0.5 * float(np.sum(pair * np.linalg.solve(C, pair))) - log_det)  # two columns
    density = np.exp(np.array(log_density) - max(log_density))
    cumulative = np.concatenate([[0.0], np.cumsum((density[1:] + density[:-1]) / 2 * np.diff(grid))])
    density /= cumulative[-1]
    cumulative /= cumulative[-1]

    draws = []
    x = np.array([model.values[n] for n in model.names])
    for _ in range(3000):
        sampler._spectrum_step(x, coefficients, own, rng)
        draws.append(x[model.names.index(f"common_lg_variance_{k}")])
    draws = np.array(draws)
    # slice updates are correlated: count effective draws from the lag-one autocorrelation (AR(1) approximation)
    lag = np.corrcoef(draws[:-1], draws[1:])[0, 1]
    effective = draws.size * (1 - lag) / (1 + lag) if lag > 0 else draws.size
    for q in (0.05, 0.5, 0.95):
        exact = float(np.interp(q, cumulative, grid))
        error = np.sqrt(q * (1 - q) / effective) / float(np.interp(exact, grid, density))
        assert abs(np.quantile(draws, q) - exact) < 4 * error, (q, np.quantile(draws, q), exact, error)


@pytest.mark.parametrize("common", ["uncorrelated", "hellings-downs"])
def test_gibbs_coefficients_see_the_correlations_of_a_free_spectrum(common, monkeypatch):
    """A correlated common process on a free spectrum has no power-law amplitude; the Gibbs coefficient blocks
    must still condition on the other pulsars through the inter-pulsar correlation (the common inverse), as the
    spectrum step above assumes, and without correlations they need none."""
    model, sampler = _sampler(common, False)
    calls = []
    original = sampler._common_inverse
    monkeypatch.setattr(sampler, "_common_inverse", lambda *args: calls.append(1) or original(*args))
    x = np.array([model.values[n] for n in model.names])
    sampler.iterate(x, np.random.default_rng(1), sampler.proposals())
    assert bool(calls) == (common == "hellings-downs")


def test_a_power_law_refitted_from_the_free_spectrum_agrees_with_a_direct_fit(tmp_path):
    """A loud background (8 pulsars, 6 frequencies, noise held): a free-spectrum Gibbs fit, then the power law
    refitted from its per-frequency marginals (Lamb, Taylor & van Haasteren 2023), against a direct power-law fit
    of the same data.  The refit is an approximation (frequencies treated as independent, kernel density
    estimates), so the check allows a quarter of the direct posterior's width between medians and 25% between
    the widths of the 68% intervals (Monte Carlo errors are a few per cent of the width here)."""
    from ptares.inference.samplers import run_sampler
    from ptares.inference.samplers.chains import posterior_draws, summarise
    from ptares.inference.spectral_models import refit

    data = simulate(small_config(array={"random": {"count": 8}},
                                 observing={"start": 53000, "span": 10.0, "cadence": 30.0, "toa_error": 0.2},
                                 gwb={"amplitude": 5e-15, "harmonics": 6}), seed=3)
    free = FitModel(data, FitSection(common_spectrum="free", harmonics=6, red="none", sampler="gibbs", seed=1,
                                     effective_samples=500))
    run = run_sampler(free, tmp_path / "free.h5")
    summary = summarise(free, run)
    assert summary["converged"]
    refitted = refit(posterior_draws(run.chain, summary["burn"], summary["thin"]), free.priors, data.span, "power_law",
                     steps=2000)
    direct = FitModel(data, FitSection(harmonics=6, red="none", seed=1, effective_samples=500))
    direct_summary = summarise(direct, run_sampler(direct, tmp_path / "direct.h5"))
    assert direct_summary["converged"]
    for ours, theirs in (("lg_amplitude", "common_lg_amplitude"), ("spectral_index", "common_spectral_index")):
        a, b = refitted["parameters"][ours], direct_summary["parameters"][theirs]
        width = b["interval68"][1] - b["interval68"][0]
        assert abs(a["median"] - b["median"]) < 0.25 * width, (ours, a, b)
        assert a["interval68"][1] - a["interval68"][0] == pytest.approx(width, rel=0.25), (ours, a, b)


def test_fit_command_writes_the_free_spectrum_and_its_refits(tmp_path, capsys):
    """`ptares fit` of a free spectrum writes spectrum.json (each frequency k/T with its posterior of lg rho_k and
    the injected value; each refitted model) and spectrum.png, and prints the refits."""
    import json

    from ptares.cli import main

    config = tmp_path / "free.toml"
    config.write_text('[run]\nseed = 3\n[array]\nrandom = { count = 4 }\n[observing]\nspan = 6.0\ncadence = 30.0\n'
                      'toa_error = 0.2\n[gwb]\namplitude = 5e-15\nharmonics = 4\n'
                      '[fit]\ncommon_spectrum = "free"\nred = "none"\nsampler = "gibbs"\nmax_steps = 600\n'
                      'spectral_models = ["power_law", "turnover"]\n')
    out = tmp_path / "out"
    assert main(["fit", str(config), "--out", str(out)]) == 0
    content = json.loads((out / "spectrum.json").read_text())
    span = content["span"]
    assert [b["k"] for b in content["bins"]] == [1, 2, 3, 4]
    assert [b["frequency"] for b in content["bins"]] == pytest.approx([k / span for k in range(1, 5)])
    assert all(b["interval95"][0] <= b["median"] <= b["interval95"][1] and "injected" in b for b in content["bins"])
    assert set(content["refits"]) == {"power_law", "turnover"}
    assert set(content["refits"]["turnover"]["parameters"]) == {"lg_amplitude", "spectral_index", "lg_bend_frequency",
                                                                 "bend_index"}
    assert (out / "spectrum.png").read_bytes()[:4] == b"\x89PNG"
    assert "power law refitted from the free spectrum" in capsys.readouterr().out


def _turnover_evidence(tmp_path, bend):
    """ln B of a turnover against a pure power law (Savage–Dickey at the lower edge of lg f_bend, where the
    turnover lies below every frequency and the model is the power law; common practice for nested models),
    from the turnover refitted to a free-spectrum fit of a loud background."""
    from ptares.inference.priors import Uniform
    from ptares.inference.samplers import run_sampler
    from ptares.inference.samplers.chains import posterior_draws, summarise
    from ptares.inference.spectral_models import MODELS, refit
    from ptares.inference.upper_limits import savage_dickey

    gwb = {"amplitude": 3e-14, "harmonics": 8, **({"bend_frequency": bend, "bend_index": 4.0} if bend else {})}
    data = simulate(small_config(array={"random": {"count": 6}},
                                 observing={"start": 53000, "span": 10.0, "cadence": 30.0, "toa_error": 0.1},
                                 gwb=gwb), seed=5)
    model = FitModel(data, FitSection(common_spectrum="free", harmonics=8, red="none", sampler="gibbs", seed=2,
                                      effective_samples=200))
    run = run_sampler(model, tmp_path / f"free-{bend}.h5")
    summary = summarise(model, run)
    assert summary["converged"]
    result = refit(posterior_draws(run.chain, summary["burn"], summary["thin"]), model.priors, data.span, "turnover",
                   steps=2000)
    bend_range = MODELS["turnover"].ranges[2]
    effective = len(result["draws"]) / max(result["autocorr_time"][2], 1.0)
    return savage_dickey(result["draws"][:, 2], Uniform(*bend_range), effective, width=0.25)


@pytest.mark.statistical
def test_a_loud_turnover_is_preferred_over_a_power_law_and_a_power_law_is_not(tmp_path):
    """A background turning over below 10 nHz (kappa = 4; [gwb] bend_frequency) is preferred over a pure power law
    by ln B > 3 (Jeffreys' "strong"; or a lower bound above it); a pure power-law background gives ln B < 1."""
    bent = _turnover_evidence(tmp_path, "10 nHz")
    value = bent["ln_bayes_factor"] if bent["ln_bayes_factor"] is not None else bent["ln_bayes_factor_lower_bound"]
    assert value > 3, bent
    straight = _turnover_evidence(tmp_path, None)
    assert straight["ln_bayes_factor"] is not None and straight["ln_bayes_factor"] < 1, straight


def test_a_turnover_injection_bends_the_injected_variances():
    """The injected free-spectrum variances of a background with [gwb] bend_frequency are
    S(f_k) / T / (1 + (f_bend / f_k)^kappa), the power law written out here (PHYSICS.md)."""
    data = simulate(small_config(gwb={"amplitude": 5e-15, "harmonics": 5, "bend_frequency": "8 nHz", "bend_index": 3}),
                    seed=1)
    model = FitModel(data, FitSection(common_spectrum="free", harmonics=5, red="none"))
    year = 365.25 * 86400.0
    f = np.arange(1, 6) / data.span
    expected = 5e-15**2 / (12 * np.pi**2) * year**3 * (f * year) ** (-13 / 3) / data.span / (1 + (8e-9 / f) ** 3)
    np.testing.assert_allclose([10 ** model.values[f"common_lg_variance_{k}"] for k in range(1, 6)], expected, rtol=1e-10)


PRIOR_RANGE = (-15.5, -13.5)  #: of lg rho_k in the calibration test: injections are drawn from the same prior


def _calibration_run(seed):
    """One injection drawn from the prior (each lg rho_k uniform on PRIOR_RANGE, coefficients N(0, rho_k) for every
    pulsar, uncorrelated), its fit by the free-spectrum Gibbs sampler (240 iterations after 60 burnt, every 4th
    kept), and the share of draws below each injected lg rho_k."""
    from ptares.inference.samplers.gibbs import GibbsSampler
    from ptares.physics.spectra import fourier_basis
    from ptares.physics.timing_model import fit_timing_model

    rng = np.random.default_rng(seed)
    data = simulate(small_config(array={"random": {"count": 4}},
                                 observing={"start": 53000, "span": 6.0, "cadence": 30.0, "toa_error": 0.3}, gwb=None),
                    seed=seed)
    truth = rng.uniform(*PRIOR_RANGE, 3)
    for p in data.pulsars:
        basis = fourier_basis((p.mjd - data.start_mjd) * 86400.0, data.span, 3)
        signal = basis @ (np.sqrt(np.repeat(10.0**truth, 2)) * rng.standard_normal(6))
        fitted, _ = fit_timing_model(signal, p.design_matrix, p.errors)
        p.residuals = p.residuals + fitted
    data.signals["gwb"] = {"harmonics": 3}
    model = FitModel(data, FitSection(common_spectrum="free", harmonics=3, red="none",
                                      priors={"common_lg_variance": {"uniform": list(PRIOR_RANGE)}}))
    sampler = GibbsSampler(model)
    x = rng.uniform(*PRIOR_RANGE, 3)
    proposals = sampler.proposals()
    draws = []
    for i in range(300):
        sampler.iterate(x, rng, proposals)
        if i >= 60 and i % 4 == 0:
            draws.append(x.copy())
    return np.mean(np.array(draws) < truth, axis=0)


@pytest.mark.statistical
def test_free_spectrum_intervals_cover_injections_drawn_from_the_prior():
    """Simulation-based calibration (Cook, Gelman & Rubin 2006; Talts et al. 2018): over 80 injections drawn from
    the prior, the share of posterior draws below the truth is uniform, so each frequency's central 68% and 95%
    intervals cover at their nominal rates, within 4 binomial standard errors over the 240 (frequency,
    injection) pairs; a Kolmogorov–Smirnov test of uniformity (scipy.stats) does not reject at 1e-3."""
    import scipy.stats
    from conftest import parallel_map

    quantiles = np.concatenate(parallel_map(_calibration_run, list(range(80))))
    for level in (0.68, 0.95):
        inside = np.mean(np.abs(quantiles - 0.5) < level / 2)
        assert abs(inside - level) < 4 * np.sqrt(level * (1 - level) / quantiles.size), (level, inside)
    assert scipy.stats.kstest(quantiles, "uniform").pvalue > 1e-3


@pytest.mark.parametrize("common", ["uncorrelated", "hellings-downs"])
def test_the_turnover_model_is_the_free_spectrum_at_its_variances(common):
    """``common_spectrum = "turnover"`` fitted directly: its likelihood at (lg A, gamma, lg f_bend, kappa) equals the
    free-spectrum likelihood at the variances A^2 / (12 pi^2) f_yr^-3 (f_k / f_yr)^-gamma / T / (1 + (f_bend / f_k)^kappa),
    written out here (PHYSICS.md's power law; the turnover from memory, Sampson, Cornish & McWilliams 2015); the
    Gibbs sampler's log posterior equals the model's at each new point."""
    data = simulate(small_config(array={"random": {"count": 5}},
                                 gwb={"amplitude": 5e-15, "harmonics": 5, "bend_frequency": "8 nHz", "bend_index": 3}),
                    seed=1)
    bent = FitModel(data, FitSection(common=common, common_spectrum="turnover", harmonics=5, red="none"))
    assert bent.names == ["common_lg_amplitude", "common_spectral_index", "common_lg_bend_frequency", "common_bend_index"]
    assert bent.values["common_lg_bend_frequency"] == pytest.approx(np.log10(8e-9))
    free = FitModel(data, FitSection(common=common, common_spectrum="free", harmonics=5, red="none"))
    year = 365.25 * 86400.0
    f = np.arange(1, 6) / data.span
    theta = np.array([-14.5, 3.5, -8.3, 2.5])
    variances = ((10**theta[0]) ** 2 / (12 * np.pi**2) * year**3 * (f * year) ** -theta[1] / data.span
                 / (1 + (10**theta[2] / f) ** theta[3]))
    assert bent.log_likelihood(theta) == pytest.approx(free.log_likelihood(np.log10(variances)), rel=1e-12)
    sampler = GibbsSampler(bent)
    rng = np.random.default_rng(3)
    proposals = sampler.proposals()
    for _ in range(3):
        value, _ = sampler.iterate(theta, rng, proposals)
        assert value == pytest.approx(bent(theta), rel=1e-10)


def test_a_pulsars_free_red_spectrum_sampled_by_gibbs_matches_quadrature(tmp_path):
    """One pulsar's red noise as a free spectrum on 2 frequencies (``[fit] red_spectrum = "free"``: the Gibbs sampler
    takes a slice step of each variance with the pulsar's coefficients integrated out), nothing else free: the
    marginal of the first variance against likelihood x prior integrated on a 2-D grid (numpy trapezoid rule),
    its 16th, 50th and 84th percentiles within 4 Monte Carlo standard errors."""
    from ptares.inference.samplers import run_sampler
    from ptares.inference.samplers.chains import posterior_draws, summarise

    data = simulate(small_config(array={"random": {"count": 1}},
                                 observing={"start": 53000, "span": 6.0, "cadence": 20.0, "toa_error": 0.3},
                                 noise={"red": {"amplitude": 1e-14, "spectral_index": 3.0, "harmonics": 2}}, gwb=None),
                    seed=6)
    model = FitModel(data, FitSection(common="none", red="free", red_spectrum="free", red_harmonics=2, sampler="gibbs",
                                      seed=4, priors={"red_lg_variance": {"uniform": [-17.0, -11.0]}}))
    name = data.pulsars[0].name
    assert model.names == [f"red_lg_variance_1@{name}", f"red_lg_variance_2@{name}"]
    run = run_sampler(model, tmp_path / "c.h5")
    summary = summarise(model, run)
    assert summary["converged"]
    draws = posterior_draws(run.chain, summary["burn"], summary["thin"])[:, 0]
    first, second = np.linspace(-17, -11, 241), np.linspace(-17, -11, 97)
    log_posterior = np.array([[model.log_likelihood(np.array([a, b])) for b in second] for a in first])
    density = np.trapezoid(np.exp(log_posterior - log_posterior.max()), second, axis=1)
    density /= np.trapezoid(density, first)
    cumulative = np.concatenate([[0.0], np.cumsum((density[1:] + density[:-1]) / 2 * np.diff(first))])
    cumulative /= cumulative[-1]
    for q in (0.16, 0.5, 0.84):
        exact = float(np.interp(q, cumulative, first))
        error = np.sqrt(q * (1 - q) / summary["effective_samples"]) / float(np.interp(exact, first, density))
        assert abs(np.quantile(draws, q) - exact) < 4 * error, (q, np.quantile(draws, q), exact, error)

"""The blocked Gibbs sampler: its kernels against Gaussian densities, its posterior against emcee's,
its calibration over injections, exact resumption, and the convergence numbers it reports."""

import h5py
import numpy as np
import pytest
import scipy.linalg
import scipy.stats
from conftest import parallel_map, small_config

from ptares.errors import InputError
from ptares.inference import kernels
from ptares.inference.model import FitModel
from ptares.inference.samplers import choose_sampler, run_sampler
from ptares.inference.samplers.chains import posterior_draws, summarise
from ptares.inference.samplers.convergence import autocorr_times, split_rhat
from ptares.inference.samplers.gibbs import GibbsSampler
from ptares.inputs.config import FitSection
from ptares.simulation.simulate import simulate


def _problem(rng, n=40, m=3, size=8):
    times = np.sort(rng.uniform(0, 1, n))
    design = np.column_stack([np.ones(n), times, times**2])[:, :m]
    basis = rng.standard_normal((n, size))
    errors = rng.uniform(0.5, 2.0, n)
    residual = rng.standard_normal(n) * 2
    return design, basis, errors, residual


def _projector(design):
    """Orthonormal complement G of the design matrix (numpy SVD): G^T r is free of the timing model."""
    u = np.linalg.svd(design, full_matrices=True)[0]
    return u[:, design.shape[1]:]


def test_white_kernel_is_the_projected_gaussian_density():
    """ln p(r | white noise) with the timing model integrated out equals the Gaussian density of G^T r
    (scipy.stats.multivariate_normal), and the numba kernel equals its numpy twin."""
    rng = np.random.default_rng(1)
    design, _, errors, residual = _problem(rng)
    scale, quadrature = 1.3, 0.7
    G = _projector(design)
    N = np.diag((scale * errors) ** 2 + quadrature**2)
    expected = scipy.stats.multivariate_normal(cov=G.T @ N @ G).logpdf(G.T @ residual)
    log_det_mtm = np.linalg.slogdet(design.T @ design)[1]
    reference = kernels.white_log_likelihood_reference(errors, residual, design, scale, quadrature, log_det_mtm)
    fast = kernels.white_log_likelihood(errors, residual, design, scale, quadrature, log_det_mtm)
    assert reference == pytest.approx(expected, rel=1e-9)
    assert fast == pytest.approx(reference, rel=1e-12)


@pytest.mark.parametrize("with_mean", [False, True])
def test_collapsed_kernel_is_the_marginal_gaussian_density(with_mean):
    """Integrating coefficients a ~ N(mean, diag v) out: the kernel plus the white-noise terms equals
    log N(G^T r; G^T F mean, G^T (N + F V F^T) G) (scipy.stats), columns with zero variance dropped; its draw
    equals mean + Sigma^-1 (d - FNF mean) + L^-T z written densely with numpy; numba equals the numpy twin."""
    rng = np.random.default_rng(2)
    design, basis, errors, residual = _problem(rng)
    G = _projector(design)
    N = np.diag(errors**2)
    variance = rng.uniform(0.1, 2.0, basis.shape[1])
    variance[-2:] = 0.0
    mean = rng.standard_normal(basis.shape[1]) * with_mean
    mean[-2:] = 0.0
    Nproj = G @ np.linalg.inv(G.T @ N @ G) @ G.T  # N'^-1
    FNF, FNr, rNr = basis.T @ Nproj @ basis, basis.T @ Nproj @ residual, float(residual @ Nproj @ residual)
    cov = G.T @ (N + basis @ np.diag(variance) @ basis.T) @ G
    expected = scipy.stats.multivariate_normal(mean=G.T @ basis @ mean, cov=cov).logpdf(G.T @ residual)
    white_terms = -0.5 * (np.linalg.slogdet(G.T @ N @ G)[1] + G.shape[1] * np.log(2 * np.pi))
    noise = rng.standard_normal(basis.shape[1])
    value, draw = kernels.collapsed(FNF, FNr, rNr, mean, variance, noise)
    assert value + white_terms == pytest.approx(expected, rel=1e-9)
    ref_value, ref_draw = kernels.collapsed_reference(FNF, FNr, rNr, mean, variance, noise)
    assert value == pytest.approx(ref_value, rel=1e-12)
    np.testing.assert_allclose(draw, ref_draw, rtol=1e-10, atol=1e-12)
    kept = variance > 0
    sigma = FNF[np.ix_(kept, kept)] + np.diag(1 / variance[kept])
    lower = np.linalg.cholesky(sigma)
    dense = mean.copy()
    dense[kept] += np.linalg.solve(sigma, (FNr - FNF @ mean)[kept]) + scipy.linalg.solve_triangular(
        lower, noise[: kept.sum()], lower=True, trans="T")
    np.testing.assert_allclose(draw, dense, rtol=1e-9, atol=1e-12)
    total = kernels.collapsed_total(FNF[None], FNr[None], [rNr], variance[None])
    assert total == pytest.approx(kernels.collapsed(FNF, FNr, rNr, np.zeros_like(mean), variance)[0], rel=1e-12)


def test_autocorrelation_time_and_rhat_against_known_processes():
    """An AR(1) chain x_t = rho x_(t-1) + e_t has integrated autocorrelation time (1 + rho) / (1 - rho)
    (a textbook result, e.g. Sokal 1997); chains of one distribution give split R-hat near 1, chains about
    means shifted by 0..3 give R-hat ~ sqrt(1 + var(shifts) / var(x)) with var(x) = 1 / (1 - rho^2)
    (the ratio of pooled to within-chain variance, Gelman et al. 2013, sec. 11.4)."""
    rng = np.random.default_rng(3)
    rho, steps, chains = 0.8, 20000, 4
    x = np.zeros((steps, chains, 1))
    noise = rng.standard_normal((steps, chains))
    for t in range(1, steps):
        x[t, :, 0] = rho * x[t - 1, :, 0] + noise[t]
    tau = autocorr_times(x)[0]
    expected = (1 + rho) / (1 - rho)
    assert tau == pytest.approx(expected, rel=0.1)  # the estimate's scatter is ~ sqrt(2 * 5 tau / (N chains)) ~ 3%
    assert split_rhat(x)[0] < 1.01
    shifted = x + np.arange(chains)[None, :, None]
    halves = np.repeat(np.arange(chains), 2)  # split R-hat halves each chain
    expected_rhat = np.sqrt(1 + np.var(halves, ddof=1) * (1 - rho**2))
    assert split_rhat(shifted)[0] == pytest.approx(expected_rhat, rel=0.03)  # within-chain variance known to ~2%


def six_pulsars(seed=4, count=6, span=8.0):
    config = small_config(
        array={"random": {"count": count}},
        observing={"start": 53000, "span": span, "cadence": 30.0, "toa_error": 0.3},
        noise={"red": {"amplitude": 3e-15, "spectral_index": 3.0, "harmonics": 10}},
        gwb={"amplitude": 5e-15, "harmonics": 8},
    )
    return simulate(config, seed=seed)


def test_sampler_is_chosen_by_size_and_refuses_what_it_cannot_sample():
    """``sampler = "auto"``: emcee for small models, Gibbs above 20 free parameters; a Gibbs fit of a
    continuous wave is refused with one line naming fit.sampler."""
    data = six_pulsars(count=6)
    assert choose_sampler(FitModel(data, FitSection(red="free"))) == "ensemble"  # 14 parameters
    assert choose_sampler(FitModel(data, FitSection(red="free", white="free"))) == "gibbs"  # 26
    with pytest.raises(InputError, match="fit.sampler"):
        GibbsSampler(FitModel(data, FitSection(sampler="gibbs", binary=True, binary_values={"lg_frequency": -8.0, "right_ascension": 1.0, "declination_sine": 0.1})))


def _run(job):
    model, path = job
    return run_sampler(model, path)


@pytest.mark.statistical
def test_gibbs_posterior_of_the_common_process_agrees_with_emcee(tmp_path):
    """6 pulsars, each pulsar's red noise and a Hellings–Downs common process free (14 parameters; the
    uncorrelated model is the P-P test's): the Gibbs posterior mean
    and standard deviation of the common amplitude and index agree with a long emcee run's within Monte-Carlo
    error (4 combined standard errors, each from its chain's effective sample size of that parameter).

    emcee starts near the maximum posterior and runs a fixed 7000 steps x 32 walkers: with prior starts or on
    wide red-noise priors its walkers take thousands of steps to forget where they began (the reason the Gibbs
    sampler exists), so the red-noise priors here are narrow and we require at least 200 effective emcee
    samples of each compared parameter rather than its full convergence rule."""
    config = small_config(
        array={"random": {"count": 6}},
        observing={"start": 53000, "span": 10.0, "cadence": 60.0, "toa_error": 0.3},
        noise={"red": {"amplitude": 1e-14, "spectral_index": 3.0, "harmonics": 6}},
        gwb={"amplitude": 2e-14, "harmonics": 6},
    )
    data = simulate(config, seed=4)
    priors = {"red_lg_amplitude": {"uniform": [-14.6, -13.4]}, "red_spectral_index": {"uniform": [2.0, 4.0]}}
    common = dict(common="hellings-downs", red="free", red_harmonics=6, effective_samples=1500, seed=3, priors=priors)
    gibbs = FitModel(data, FitSection(sampler="gibbs", gibbs_chains=2, max_steps=6000, **common))
    ensemble = FitModel(data, FitSection(sampler="ensemble", start="map", walkers=32, max_steps=7000, **common))
    g_run, e_run = parallel_map(_run, [(gibbs, tmp_path / "g.h5"), (ensemble, tmp_path / "e.h5")])
    g_summary, e_summary = summarise(gibbs, g_run), summarise(ensemble, e_run)
    assert g_summary["converged"], g_summary["not_converged_because"]
    g, e = posterior_draws(g_run.chain, g_summary["burn"]), posterior_draws(e_run.chain, e_summary["burn"])
    for name in ("common_lg_amplitude", "common_spectral_index"):
        i = gibbs.names.index(name)
        ess_g = g_summary["parameters"][name]["effective_samples"]
        ess_e = e_summary["parameters"][name]["effective_samples"]
        assert ess_e >= 200, (name, ess_e)
        sd_g, sd_e = np.std(g[:, i]), np.std(e[:, i])
        error = np.sqrt(sd_g**2 / ess_g + sd_e**2 / ess_e)
        assert abs(np.mean(g[:, i]) - np.mean(e[:, i])) < 4 * error, name
        assert abs(sd_g - sd_e) < 4 * np.sqrt(sd_g**2 / (2 * ess_g) + sd_e**2 / (2 * ess_e)), name


PP_PRIORS = {"white_scale": {"uniform": [0.5, 2.0]}, "red_lg_amplitude": {"uniform": [-14.5, -13.0]},
             "red_spectral_index": {"uniform": [2.0, 5.0]}, "common_lg_amplitude": {"uniform": [-14.5, -13.5]},
             "common_spectral_index": {"uniform": [3.0, 5.5]}}


def _posterior_quantiles(job) -> dict:
    """One P-P injection (a worker of the calibration test): quantity -> quantiles of the true values."""
    injection, folder = job
    rng = np.random.default_rng([20, injection])
    lg_a, index = rng.uniform(-14.5, -13.5), rng.uniform(3.0, 5.5)
    config = small_config(
        run={"name": "pp", "seed": 1000 + injection},
        array={"random": {"count": 3}},
        observing={"start": 53000, "span": 6.0, "cadence": 40.0, "toa_error": 0.5},
        noise={"white": {"scale": {"uniform": [0.5, 2.0]}},
               "red": {"amplitude": {"log_uniform": [10**-14.5, 1e-13]}, "spectral_index": {"uniform": [2.0, 5.0]},
                       "harmonics": 6}},
        gwb={"amplitude": 10**lg_a, "spectral_index": index, "harmonics": 6},
    )
    data = simulate(config)
    section = FitSection(sampler="gibbs", white="free", red="free", red_harmonics=6, harmonics=6, gibbs_chains=1,
                         max_steps=800, effective_samples=0, priors=PP_PRIORS, seed=injection,
                         fixed={"white_lg_quadrature": -np.inf})
    model = FitModel(data, section)
    run = run_sampler(model, folder / f"pp{injection}.h5")
    draws = posterior_draws(run.chain, run.convergence.burn)
    quantiles = {}
    for i, name in enumerate(model.names):
        quantiles.setdefault(name.split("@")[0], []).append(float(np.mean(draws[:, i] < model.injected[name])))
    return quantiles


@pytest.mark.statistical
def test_gibbs_posteriors_are_calibrated_over_injections(tmp_path):
    """P-P test: 40 injections drawn from the fit's priors (3 pulsars; white scale, red noise and the common
    process free: 11 parameters).  The posterior quantile of each true value is uniform when the posterior is
    calibrated; a Kolmogorov-Smirnov test (scipy.stats.kstest) of each quantity's pooled quantiles must not
    reject uniformity at 0.2% (5 quantities: a 1% family-wise false-alarm rate, Bonferroni)."""
    quantiles = {key: [] for key in PP_PRIORS}
    for result in parallel_map(_posterior_quantiles, [(i, tmp_path) for i in range(40)]):
        for key, values in result.items():
            quantiles[key] += values
    for key, values in quantiles.items():
        assert scipy.stats.kstest(values, "uniform").pvalue > 0.002, (key, sorted(np.round(values, 2)))


def test_resumed_gibbs_chain_equals_an_uninterrupted_one(tmp_path):
    """Stopping a Gibbs run part-way (as Ctrl-C or a kill would) and running it again gives, step for step,
    the chain of a run that was never stopped."""
    data = six_pulsars(count=3, span=5.0)
    section = FitSection(sampler="gibbs", red="free", white="free", red_harmonics=6, harmonics=6, max_steps=400,
                         autocorr_factor=1e6, seed=5, gibbs_chains=2)
    whole = run_sampler(FitModel(data, section), tmp_path / "whole.h5")

    calls = {"n": 0}
    original = GibbsSampler.iterate

    def stopping(self, *args):
        calls["n"] += 1
        if calls["n"] > 2 * 100 + 30:  # two chains: after the second segment has started
            raise KeyboardInterrupt
        return original(self, *args)

    GibbsSampler.iterate = stopping
    try:
        with pytest.raises(KeyboardInterrupt):
            run_sampler(FitModel(data, section), tmp_path / "resumed.h5")
    finally:
        GibbsSampler.iterate = original
    with h5py.File(tmp_path / "resumed.h5") as f:
        assert int(f["chains"].attrs["iteration"]) == 100
    resumed = run_sampler(FitModel(data, section), tmp_path / "resumed.h5")
    assert resumed.steps == whole.steps == 400
    np.testing.assert_array_equal(resumed.chain, whole.chain)
    np.testing.assert_array_equal(resumed.log_prob, whole.log_prob)


def test_gibbs_summary_reports_convergence_numbers(tmp_path):
    """posterior.json of a Gibbs fit: every parameter's effective samples and split R-hat, the sampler, and
    why it has not converged when it has not."""
    data = six_pulsars(count=3, span=5.0)
    model = FitModel(data, FitSection(sampler="gibbs", red="free", red_harmonics=6, harmonics=6, max_steps=200, seed=1))
    summary = summarise(model, run_sampler(model, tmp_path / "c.h5"))
    assert summary["sampler"] == "gibbs" and summary["walkers"] == 2
    entry = summary["parameters"]["common_lg_amplitude"]
    assert {"effective_samples", "rhat", "autocorr_time"} <= set(entry)
    assert not summary["converged"] and "effective samples" in summary["not_converged_because"]


def test_progress_length_follows_the_convergence_rule():
    """The progress bar's total is what the rule still asks for: max(factor x tau, burn + wanted ESS x tau / chains)."""
    from ptares.inference.samplers.convergence import Convergence, steps_needed

    verdict = Convergence(False, np.array([10.0, 40.0]), np.array([5.0, 1.0]), None, 80, "")
    assert steps_needed(verdict, 300, chains=2, autocorr_factor=50, effective_samples=10) == 50 * 40
    assert steps_needed(verdict, 300, chains=2, autocorr_factor=5, effective_samples=400) == 80 + 400 * 40 // 2


def test_command_line_gibbs_fit_says_why_it_has_not_converged(tmp_path, capsys):
    """``ptares fit --sampler gibbs`` on a short run: the summary line names the sampler, the fewest effective
    samples and R-hat, and what the convergence rule still misses; trace.png and posterior.json are written."""
    import json

    from ptares.cli import main
    from ptares.dataset import write_dataset

    dataset = write_dataset(six_pulsars(count=3, span=5.0), tmp_path / "d.h5")
    settings = tmp_path / "s.toml"
    settings.write_text('[fit]\nred = "free"\nred_harmonics = 6\nharmonics = 6\n')
    assert main(["fit", str(dataset), "--config", str(settings), "--sampler", "gibbs", "--max-steps", "200",
                 "--out", str(tmp_path / "o")]) == 0
    printed = capsys.readouterr().out
    assert "gibbs sampler, 200 steps" in printed and "R-hat" in printed and "NOT converged:" in printed
    summary = json.loads((tmp_path / "o" / "posterior.json").read_text())
    assert summary["sampler"] == "gibbs" and summary["not_converged_because"]
    assert (tmp_path / "o" / "trace.png").is_file()


def test_gibbs_fits_white_noise_alone(tmp_path):
    """A model with no Fourier columns at all (white noise free, no red or common process) samples; the white
    scale's posterior holds the injected 1.4 within 4 posterior standard deviations."""
    config = small_config(array={"random": {"count": 2}},
                          observing={"start": 53000, "span": 4.0, "cadence": 10.0, "toa_error": 1.0},
                          noise={"white": {"scale": 1.4}}, gwb=None)
    data = simulate(config, seed=1)
    model = FitModel(data, FitSection(sampler="gibbs", white="free", red="none", common="none", max_steps=600,
                                      fixed={"white_lg_quadrature": -np.inf}))
    run = run_sampler(model, tmp_path / "c.h5")
    draws = posterior_draws(run.chain, run.convergence.burn)
    assert np.all(np.abs(draws.mean(axis=0) - 1.4) < 4 * draws.std(axis=0))


def test_hellings_downs_inverse_update_survives_red_noise_falling_away():
    """Phi_k = Gamma phi_k + diag(red_k): after pulsar 0's red noise drops from 1e8 times the common
    power to nothing, the updated inverse equals numpy's inverse of the new Phi_k (a plain
    Sherman–Morrison update would cancel to no digits here)."""
    data = simulate(small_config(array={"random": {"count": 4}}, gwb={"amplitude": 2e-15, "harmonics": 3}))
    model = FitModel(data, FitSection(common="hellings-downs", red="free", red_harmonics=3, harmonics=3))
    sampler = GibbsSampler(model)
    size = model.likelihood.size
    common = np.full(size, 1e-20)
    red = np.full((4, size), 1e-19)
    red[0] = 1e-12
    inverse = sampler._common_inverse(red, common)
    new = red.copy()
    new[0] = 1e-30
    sampler._update_inverse(inverse, 0, (new[0] - red[0])[0::2][:3], new, common)
    expected = sampler._common_inverse(new, common)
    assert np.all(np.isfinite(inverse))
    np.testing.assert_allclose(inverse, expected, rtol=1e-6)
    # a moderate change takes the Sherman–Morrison route and is exact to rounding
    moderate = new.copy()
    moderate[1] = 3e-19
    sampler._update_inverse(inverse, 1, (moderate[1] - new[1])[0::2][:3], moderate, common)
    np.testing.assert_allclose(inverse, sampler._common_inverse(moderate, common), rtol=1e-9)

"""Upper limits, the Savage–Dickey density ratio, and the prior uniform in an amplitude's value.

References: sample-quantile error sqrt(q (1 - q) / N) / p(x_q) (common practice); the Savage–Dickey ratio
(Dickey 1971) checked against the evidence ratio by adaptive quadrature (scipy.integrate.quad); the normal
distribution's 95th percentile and the uniform distribution from scipy.stats.
"""

import numpy as np
import pytest
import scipy.integrate
import scipy.stats
from conftest import small_config

from ptares.inference.model import FitModel
from ptares.inference.priors import Uniform, UniformInValue
from ptares.inference.samplers import run_sampler
from ptares.inference.samplers.chains import posterior_draws, summarise
from ptares.inference.upper_limits import savage_dickey, upper_limit
from ptares.inputs.config import FitSection
from ptares.simulation.simulate import simulate


def test_uniform_in_value_prior_is_uniform_in_the_amplitude():
    """Its density on x integrates to 1 (quad), 10^x of its draws is uniform on [10^low, 10^high] (Kolmogorov–Smirnov,
    scipy.stats, fixed seed) and its ppf inverts its cumulative distribution."""
    prior = UniformInValue(-18.0, -13.0)
    total, _ = scipy.integrate.quad(lambda x: np.exp(prior.log_pdf(x)), -18.0, -13.0, points=[-14.0], limit=200)
    assert total == pytest.approx(1.0, rel=1e-8)
    draws = prior.sample(np.random.default_rng(3), 20000)
    assert scipy.stats.kstest(10.0**draws, scipy.stats.uniform(1e-18, 1e-13 - 1e-18).cdf).pvalue > 1e-3
    for q in (0.1, 0.5, 0.9):
        mass, _ = scipy.integrate.quad(lambda x: np.exp(prior.log_pdf(x)), -18.0, float(prior.ppf(q)), limit=200)
        assert mass == pytest.approx(q, rel=1e-7)
    assert prior.log_pdf(-12.9) == -np.inf


def test_upper_limit_and_its_error_match_repeated_draws():
    """From 2000 independent draws of N(0, 1) the 95% upper limit scatters about 1.6449 (scipy.stats.norm) as its
    quoted error says: over 300 repetitions the mean is within 4 standard errors and the quoted error matches the
    scatter within 15% (about 4 x the 1/sqrt(2 x 299) relative error of a standard deviation)."""
    rng = np.random.default_rng(8)
    limits, errors = [], []
    for _ in range(300):
        result = upper_limit(rng.standard_normal(2000), effective=2000)
        limits.append(result["value"])
        errors.append(result["error"])
    limits = np.array(limits)
    assert abs(limits.mean() - scipy.stats.norm.ppf(0.95)) < 4 * limits.std(ddof=1) / np.sqrt(limits.size)
    assert np.mean(errors) == pytest.approx(limits.std(ddof=1), rel=0.15)


def test_savage_dickey_on_draws_of_a_known_posterior():
    """Draws of a posterior whose density at the prior's edge is known: uniform prior on [-18, -12] and posterior
    uniform on [-18, -15], so B = prior density / posterior density = (1/6) / (1/3) = 1/2 exactly, within its quoted
    error; with no draws at the edge only a lower bound is given."""
    rng = np.random.default_rng(2)
    draws = rng.uniform(-18.0, -15.0, 40000)
    result = savage_dickey(draws, Uniform(-18.0, -12.0), effective=40000)
    assert abs(result["ln_bayes_factor"] - np.log(0.5)) < 4 * result["ln_bayes_factor_error"]
    far = savage_dickey(rng.uniform(-14.0, -13.0, 1000), Uniform(-18.0, -12.0), effective=500)
    assert far["ln_bayes_factor"] is None and far["ln_bayes_factor_lower_bound"] == pytest.approx(np.log(0.5 / 6 * 500))


def test_savage_dickey_agrees_with_the_evidence_ratio_by_quadrature(tmp_path):
    """A weak background (A = 1e-15, ln B about 1.5; 12 pulsars, noise fixed at the truth, index fixed, lg A free
    on [-18, -12]).  The exact ln [Z(common) / L(no common process)]: Z by adaptive quadrature
    (scipy.integrate.quad), L at A = 0 (the likelihood at lg A = -18 differs from it by far less than the quoted
    error, checked here).  The Savage–Dickey ln B from 20000 independent draws of the exact posterior (inverse
    cumulative distribution on a fine grid) agrees within 4 quoted errors; a short fit's ``posterior.json``
    carries the entry and the 95% upper limit of its draws."""
    data = simulate(small_config(run={"seed": 29}, array={"random": {"count": 12}},
                                 observing={"start": 53000.0, "span": 10.0, "cadence": 30.0, "toa_error": 1.0},
                                 gwb={"amplitude": 1e-15, "harmonics": 5}))
    section = FitSection(red="none", harmonics=5, fixed={"common_spectral_index": 13.0 / 3.0}, walkers=8,
                         effective_samples=200, autocorr_factor=20, max_steps=4000, seed=3)
    model = FitModel(data, section)

    low, high = -18.0, -12.0
    grid = np.linspace(low, high, 1201)
    values = np.array([model.log_likelihood([x]) for x in grid])
    top = values.max()
    integral, _ = scipy.integrate.quad(lambda x: np.exp(model.log_likelihood([x]) - top), low, high,
                                       points=[grid[np.argmax(values)]], limit=400, epsrel=1e-9)
    none = FitModel(data, FitSection(common="none", red="none", white="free", fixed={"white_lg_quadrature": -np.inf}))
    log_none = none.log_likelihood_at(none.values)
    exact = np.log(integral / (high - low)) + top - log_none
    assert abs(model.log_likelihood([low]) - log_none) < 0.01

    density = np.exp(values - top)
    cumulative = np.concatenate([[0.0], np.cumsum((density[1:] + density[:-1]) / 2 * np.diff(grid))])
    draws = np.interp(np.random.default_rng(4).uniform(0, cumulative[-1], 20000), cumulative, grid)
    entry = savage_dickey(draws, model.priors[0], effective=draws.size)
    assert entry["ln_bayes_factor_error"] < 0.2, entry  # enough draws at the edge for the check to bite
    assert abs(entry["ln_bayes_factor"] - exact) < 4 * entry["ln_bayes_factor_error"], (entry, exact)

    run = run_sampler(model, tmp_path / "c.h5")
    summary = summarise(model, run)
    common = summary["common_process"]
    assert np.isfinite(common["savage_dickey"]["ln_bayes_factor"] or common["savage_dickey"]["ln_bayes_factor_lower_bound"])
    fitted = posterior_draws(run.chain, summary["burn"], summary["thin"])[:, 0]
    limit = common["upper_limit"]
    assert limit["value"] == pytest.approx(np.quantile(fitted, 0.95)) and limit["amplitude"] == 10 ** limit["value"]

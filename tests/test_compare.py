"""``ptares compare``: Bayes factors by reweighting against direct numerical integration of the evidence,
their rise with the signal, the reweighting arithmetic, and the command's outputs and refusals."""

import json

import numpy as np
import pytest
import scipy.integrate
from conftest import small_config

import ptares
from ptares.cli import main
from ptares.correlation.analysis import correlate
from ptares.correlation.noise import noise_from_dataset
from ptares.inference.model import FitModel
from ptares.inference.reweighting import bridge, reweight, weighted_quantiles
from ptares.inputs.config import CorrelateSection, FitSection
from ptares.simulation.simulate import simulate

#: Noise fixed at the truth, spectral index fixed, amplitude free: a one-dimensional evidence integral.
ONE_PARAMETER = {"red": "none", "harmonics": 5, "fixed": {"common_spectral_index": 13.0 / 3.0},
                 "effective_samples": 300, "autocorr_factor": 25, "walkers": 8}


def _array(amplitude: float):
    return simulate(small_config(run={"seed": 29}, array={"random": {"count": 12}},
                                 observing={"start": 53000.0, "span": 10.0, "cadence": 30.0, "toa_error": 1.0},
                                 gwb={"amplitude": amplitude, "harmonics": 5}))


def _evidence(dataset, common: str) -> float:
    """ln of the evidence over the default uniform prior on lg A (width 6), by adaptive quadrature (scipy.integrate.quad)."""
    model = FitModel(dataset, FitSection(common=common, **ONE_PARAMETER))
    (low, high), = [(p.low, p.high) for p in model.priors]
    grid = np.linspace(low, high, 121)
    values = np.array([model.log_likelihood([x]) for x in grid])
    peak, top = grid[np.argmax(values)], values.max()
    integral, error = scipy.integrate.quad(lambda x: np.exp(model.log_likelihood([x]) - top), low, high,
                                           points=[peak], limit=400, epsabs=0, epsrel=1e-9)
    assert error < 1e-6 * integral
    return float(np.log(integral / (high - low)) + top)


@pytest.mark.statistical
def test_reweighted_bayes_factor_agrees_with_quadrature_and_rises_with_the_signal():
    """Hourihane et al. 2023 (arXiv:2212.06276): with equal priors B = E_U[L_HD / L_U].  Here the
    evidence of each model is integrated directly over its one free parameter; the reweighted
    ln B, and the bridge between both posteriors, must agree within four of their quoted standard
    errors plus the bias of ln of a mean (about var/2, negligible here).  From no background to a
    loud one ln B must rise."""
    found = []
    for amplitude in (1e-16, 2e-15, 8e-15):
        dataset = _array(amplitude)
        exact = _evidence(dataset, "hellings-downs") - _evidence(dataset, "uncorrelated")
        result = ptares.compare(dataset, fit_options={**ONE_PARAMETER, "seed": 3}, samples=1000, direct_fit="never")
        assert result.content["draws"] >= 100
        assert result.reliable, result.content["warning"]
        assert abs(result.ln_bayes_factor - exact) < 4.0 * result.ln_bayes_factor_error + 1e-3, (amplitude, exact)
        # the bridge between both posteriors (Meng & Wong 1996), with the correlated model fitted directly
        bridged = ptares.compare(dataset, fit_options={**ONE_PARAMETER, "seed": 3}, samples=1000, direct_fit="always")
        assert bridged.content["method"] == "bridge" and bridged.reliable, bridged.content["warning"]
        assert abs(bridged.ln_bayes_factor - exact) < 4.0 * bridged.ln_bayes_factor_error + 1e-3, (amplitude, exact)
        snr = correlate(dataset, noise_from_dataset(dataset), CorrelateSection(scrambles=0, phase_shifts=0, fit_trials=0))
        found.append((exact, result.ln_bayes_factor, snr.estimates["hellings-downs"]["snr"]))
    exact, reweighted, snr = np.array(found).T
    assert np.all(np.diff(snr) > 0), snr  # the injections are ordered in S/N as intended
    assert np.all(np.diff(reweighted) > 0), reweighted
    assert reweighted[-1] > 1.5  # a loud background favours Hellings–Downs


def test_reweighting_arithmetic():
    """Equal weights: ln B = ln w, no error, every draw effective.  Two draws, weights 1 and 3:
    B = 2, effective samples (1 + 3)^2 / (1 + 9) = 1.6, standard error sd / (sqrt(2) mean) = 0.5."""
    flat = reweight(np.full(10, 0.7))
    assert flat.ln_bayes_factor == pytest.approx(0.7) and flat.ln_bayes_factor_error == pytest.approx(0.0, abs=1e-12)
    assert flat.effective_samples == pytest.approx(10.0)
    two = reweight(np.log([1.0, 3.0]) + 800.0)  # far beyond exp's range: computed in logs
    assert two.ln_bayes_factor == pytest.approx(np.log(2.0) + 800.0)
    assert two.effective_samples == pytest.approx(1.6)
    assert two.ln_bayes_factor_error == pytest.approx(np.std([1.0, 3.0], ddof=1) / (np.sqrt(2.0) * 2.0))
    with pytest.raises(ValueError):
        reweight([0.0, np.inf])


def test_bridge_recovers_the_ratio_of_two_gaussian_integrals_with_a_calibrated_error():
    """Two unnormalised Gaussian densities, q1 = c exp(-x^2 / 2 s^2) and q2 = exp(-(x - m)^2 / 2), have
    Z1 / Z2 = c s (closed form).  Over 400 repetitions with draws of both, the bridge estimate of ln(c s)
    is unbiased to within its scatter's standard error, and its quoted standard error matches its scatter
    to within 15% (the scatter of 400 values is known to about 4%).  Where the densities do not overlap
    at all the effective draws say so."""
    shift, width, scale = 2.0, 0.5, 3.0

    def log_ratio(x, shift=shift):
        return np.log(scale) - x**2 / (2 * width**2) + (x - shift) ** 2 / 2

    rng = np.random.default_rng(5)
    found = np.array([[(b := bridge(log_ratio(rng.normal(0, width, 300)), log_ratio(rng.normal(shift, 1, 300)))).ln_bayes_factor,
                       b.ln_bayes_factor_error] for _ in range(400)])
    truth = np.log(scale * width)
    scatter = found[:, 0].std(ddof=1)
    assert abs(found[:, 0].mean() - truth) < 4 * scatter / np.sqrt(len(found))
    assert abs(found[:, 1].mean() / scatter - 1) < 0.15
    apart = bridge(log_ratio(rng.normal(0, width, 300), 12.0), log_ratio(rng.normal(12.0, 1, 300), 12.0))
    assert apart.effective_samples < 5


def test_weighted_quantiles_match_repeated_draws():
    """Integer weights are the same as repeating the draws (numpy's percentile of the repeated sample)."""
    values = np.array([3.0, 1.0, 2.0, 5.0])
    counts = np.array([1, 4, 2, 3])
    repeated = np.repeat(values, counts)
    weights = counts / counts.sum()
    assert weighted_quantiles(values, weights, [0.5])[0] == pytest.approx(np.median(repeated))
    assert weighted_quantiles(values, weights, [0.0, 1.0]).tolist() == [1.0, 5.0]


COMPARE_TOML = """\
[run]
seed = 11
[array.random]
count = 5
[observing]
span = "8 yr"
cadence = "40 d"
toa_error = "200 ns"
[gwb]
amplitude = 4e-15
harmonics = 3
[fit]
red = "none"
harmonics = 3
fixed = { common_spectral_index = 4.3333333333 }
effective_samples = 100
autocorr_factor = 20
max_steps = 500
[compare]
patterns = ["hellings-downs", "dipole"]
samples = 300
"""


def test_compare_command_writes_its_outputs_and_resumes(tmp_path, capsys):
    config = tmp_path / "compare.toml"
    config.write_text(COMPARE_TOML)
    out = tmp_path / "out"
    assert main(["compare", str(config), "--out", str(out)]) == 0
    printed = capsys.readouterr().out
    assert "hellings-downs  ln B =" in printed and "dipole" in printed
    content = json.loads((out / "comparison.json").read_text())
    for key in ("ln_bayes_factor", "ln_bayes_factor_error", "effective_samples", "posterior", "patterns", "reliable"):
        assert key in content
    assert set(content["patterns"]) == {"hellings-downs", "dipole"}
    entry = content["posterior"]["common_lg_amplitude"]
    assert entry["interval95"][0] <= entry["interval68"][0] <= entry["median"] <= entry["interval68"][1]
    assert (out / "comparison.png").stat().st_size > 10_000
    assert (out / "uncorrelated" / "chains.h5").exists() and (out / "dataset.h5").exists()
    steps = json.loads((out / "uncorrelated" / "posterior.json").read_text())["steps"]
    # run again: the fit, which has used its max_steps, is resumed, not redone, and the answer is the same
    assert main(["compare", str(config), "--out", str(out)]) == 0
    again = json.loads((out / "comparison.json").read_text())
    assert json.loads((out / "uncorrelated" / "posterior.json").read_text())["steps"] == steps
    assert again["ln_bayes_factor"] == pytest.approx(content["ln_bayes_factor"], rel=1e-9)


@pytest.mark.parametrize("arguments, expected", [
    (["--samples", "3"], "--samples"),
    (["--patterns", "quadrupole"], "invalid choice"),
])
def test_compare_refuses_bad_options_in_one_line(tmp_path, capsys, arguments, expected):
    config = tmp_path / "compare.toml"
    config.write_text(COMPARE_TOML)
    with pytest.raises(SystemExit) if expected == "invalid choice" else _no_exit():
        code = main(["compare", str(config), "--out", str(tmp_path / "out"), *arguments])
        assert code == 2
    error = capsys.readouterr().err.strip()
    assert expected in error and len(error.splitlines()) == 1
    assert not (tmp_path / "out").exists()


def test_compare_settings_file_needs_a_fit_or_compare_table(tmp_path, capsys):
    config = tmp_path / "compare.toml"
    config.write_text(COMPARE_TOML)
    settings = tmp_path / "settings.toml"
    settings.write_text("[correlate]\nbins = 4\n")
    assert main(["compare", str(config), "--out", str(tmp_path / "out"), "--config", str(settings)]) == 2
    error = capsys.readouterr().err.strip()
    assert "settings.toml" in error and "[fit] or [compare]" in error and len(error.splitlines()) == 1


class _no_exit:
    def __enter__(self):
        return self

    def __exit__(self, *exc):
        return False


def test_likelihood_ratios_on_a_dask_cluster_and_local_workers_match_this_process():
    """The chunks of likelihood ratios give the same weights on a dask.distributed LocalCluster and in two local
    worker processes as here."""
    import distributed

    from ptares.campaign.comparison import compare_models
    from ptares.inputs.config import CompareSection

    dataset = simulate(small_config(array={"random": {"count": 4}}, gwb={"amplitude": 3e-15, "harmonics": 3}))
    model = FitModel(dataset, FitSection(red="none", harmonics=3, fixed={"common_spectral_index": 13.0 / 3.0}))
    chain = np.random.default_rng(1).normal(-14.5, 0.1, (40, 4, 1))
    summary = {"burn": 0, "converged": True, "parameters": {"common_lg_amplitude": {"autocorr_time": 1.0}}}
    settings = CompareSection(samples=60, min_effective_samples=20, patterns=("hellings-downs", "monopole"), workers=2)
    here = compare_models(model, chain, summary, settings.model_copy(update={"workers": 1}))
    with distributed.LocalCluster(n_workers=1, threads_per_worker=1, processes=False, dashboard_address=None) as cluster:
        with distributed.Client(cluster) as client:
            remote = compare_models(model, chain, summary, settings, scheduler=client)
    local = compare_models(model, chain, summary, settings)  # two local worker processes
    for pattern in ("hellings-downs", "monopole"):
        np.testing.assert_allclose(remote.weights[pattern], here.weights[pattern], rtol=1e-12)
        np.testing.assert_allclose(local.weights[pattern], here.weights[pattern], rtol=1e-12)
    assert remote.content["ln_bayes_factor"] == pytest.approx(here.content["ln_bayes_factor"], rel=1e-12)


def test_compare_checks_fit_settings_before_writing(tmp_path, capsys):
    """A [fit] the model refuses (a pulsar not in the array) is one line, and nothing is written."""
    config = tmp_path / "compare.toml"
    config.write_text(COMPARE_TOML.replace('red = "none"', 'red = "none"\npulsars = ["Nowhere"]'))
    assert main(["compare", str(config), "--out", str(tmp_path / "out")]) == 2
    error = capsys.readouterr().err.strip()
    assert "fit.pulsars" in error and "Nowhere" in error and len(error.splitlines()) == 1
    assert not (tmp_path / "out").exists()


def test_compare_settings_are_consistent_and_workers_come_from_the_config(tmp_path, capsys):
    from ptares.cli import build_parser

    assert build_parser().parse_args(["compare", "c.toml", "--out", "o"]).workers is None  # [compare] workers rules
    config = tmp_path / "compare.toml"
    config.write_text(COMPARE_TOML.replace("samples = 300", "samples = 50"))
    assert main(["compare", str(config), "--out", str(tmp_path / "out")]) == 2
    error = capsys.readouterr().err.strip()
    assert "compare" in error and "min_effective_samples" in error and len(error.splitlines()) == 1

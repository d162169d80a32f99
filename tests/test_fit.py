"""`ptares fit`: posteriors against analytic forms, coverage, resuming, outputs and bad input."""

import json
import os
import signal
import subprocess
import sys
import time

import h5py
import numpy as np
import pytest
from conftest import parallel_map, small_config
from scipy import stats

from ptares.cli import main
from ptares.dataset import write_dataset
from ptares.errors import InputError
from ptares.inference.model import FitModel
from ptares.inference.samplers import run_sampler
from ptares.inference.samplers.chains import summarise
from ptares.inputs.config import FitSection, parse_config
from ptares.simulation.simulate import simulate


def white_only(seed=1):
    config = small_config(
        array={"random": {"count": 1}},
        observing={"start": 53000, "span": 4.0, "cadence": 10.0, "toa_error": 1.0, "toa_error_scatter": 0.3},
        noise={"white": {"scale": 1.4}},
        gwb=None,
        timing_model={"fit": ["offset"]},
    )
    return simulate(config, seed=seed)


def test_white_noise_scale_matches_analytic_posterior(tmp_path):
    """One pulsar with white noise only, the offset marginalised, a flat prior on the scale s in
    [0.1, 5]: p(s) is proportional to s^-(n-1) exp(-Q / 2 s^2) with Q = r^T N'^-1 r for unit scale, so
    u = s^2 follows an inverse gamma of shape n/2 - 1 and scale Q/2 (conjugate form; scipy.stats).
    Quantiles agree within 4 Monte-Carlo standard errors sqrt(q (1 - q) / N_eff) / p(s_q)."""
    data = white_only()
    p = data.pulsars[0]
    name = p.name
    section = FitSection(common="none", red="none", white="free", fixed={f"white_lg_quadrature@{name}": -np.inf},
                         max_steps=4000, seed=5)
    model = FitModel(data, section)
    assert model.names == [f"white_scale@{name}"]
    run = run_sampler(model, tmp_path / "c.h5")
    summary = summarise(model, run)
    # Q: residuals whitened by the quoted errors, offset projected out (weighted mean removed)
    w = 1 / p.errors**2
    residual = p.residuals - np.sum(w * p.residuals) / np.sum(w)
    Q = np.sum(w * residual**2)
    n = p.mjd.size
    posterior_u = stats.invgamma(n / 2 - 1, scale=Q / 2)
    entry = summary["parameters"][f"white_scale@{name}"]
    for q, value in zip((0.15865, 0.5, 0.84135), (entry["interval68"][0], entry["median"], entry["interval68"][1])):
        s_q = np.sqrt(posterior_u.ppf(q))
        density = posterior_u.pdf(s_q**2) * 2 * s_q
        error = np.sqrt(q * (1 - q) / summary["effective_samples"]) / density
        assert abs(value - s_q) < 4 * error, (q, value, s_q, error)
    assert summary["converged"]


def loud_background(seed):
    config = small_config(
        array={"random": {"count": 5}},
        observing={"start": 53000, "span": 10.0, "cadence": 30.0, "toa_error": 0.1},
        gwb={"amplitude": 1e-14, "harmonics": 8},
    )
    return simulate(config, seed=seed)


def test_loud_background_interval_contains_injected(tmp_path):
    """Hellings–Downs model, amplitude and index free: the 95% interval of log10 A holds the injection."""
    data = loud_background(3)
    model = FitModel(data, FitSection(common="hellings-downs", max_steps=3000, seed=2))
    summary = summarise(model, run_sampler(model, tmp_path / "c.h5"))
    low, high = summary["parameters"]["common_lg_amplitude"]["interval95"]
    assert low < -14 < high
    assert summary["parameters"]["common_lg_amplitude"]["injected"] == pytest.approx(-14, rel=1e-6, abs=0)


def _amplitude_inside(job) -> bool:
    """Whether one realisation's 68% interval of lg A holds the injected -14 (a worker of the coverage test)."""
    seed, folder = job
    data = loud_background(100 + seed)
    model = FitModel(data, FitSection(fixed={"common_spectral_index": 13 / 3}, max_steps=2500, walkers=8, seed=seed))
    summary = summarise(model, run_sampler(model, folder / f"c{seed}.h5"))
    low, high = summary["parameters"]["common_lg_amplitude"]["interval68"]
    return low < -14 < high


@pytest.mark.statistical
def test_credible_intervals_cover(tmp_path):
    """68% intervals of log10 A (index fixed at 13/3) over 16 realisations: the count inside is
    binomial(16, 0.68); we require it inside the central 99.8% range, 6 to 15."""
    inside = sum(parallel_map(_amplitude_inside, [(seed, tmp_path) for seed in range(16)]))
    low_bound, high_bound = stats.binom(16, 0.68).ppf([0.001, 0.999])
    assert low_bound <= inside <= high_bound, inside


class Stop(Exception):
    pass


def test_resume_after_interruption_continues_the_same_chain(tmp_path):
    """Stopping after 150 steps (as Ctrl-C would) and running again gives the chain of an uninterrupted run."""
    data = loud_background(4)
    section = FitSection(max_steps=300, autocorr_factor=1e6, seed=9)
    whole = run_sampler(FitModel(data, section), tmp_path / "whole.h5")

    model = FitModel(data, section)
    calls = {"n": 0}
    original = model.log_likelihood

    def interrupted(x):
        calls["n"] += 1
        if calls["n"] > 16 * 150 + 40:
            raise KeyboardInterrupt
        return original(x)

    model.log_likelihood = interrupted
    with pytest.raises(KeyboardInterrupt):
        run_sampler(model, tmp_path / "resumed.h5")
    with h5py.File(tmp_path / "resumed.h5") as f:
        saved = int(f["chains"].attrs["iteration"])
    assert 100 < saved < 300
    resumed = run_sampler(FitModel(data, section), tmp_path / "resumed.h5")
    assert resumed.steps == whole.steps == 300
    np.testing.assert_array_equal(resumed.chain, whole.chain)


def test_resume_after_kill(tmp_path):
    """A `ptares fit` process killed with SIGKILL and started again ends with the same chain as an
    uninterrupted run: nothing lost, nothing repeated."""
    data = loud_background(5)
    dataset = write_dataset(data, tmp_path / "d.h5")
    settings = tmp_path / "fit.toml"
    settings.write_text("[fit]\nmax_steps = 800\nautocorr_factor = 1e6\nseed = 4\n")
    command = [sys.executable, "-m", "ptares", "fit", str(dataset), "--config", str(settings)]
    environment = {**os.environ, "HDF5_USE_FILE_LOCKING": "FALSE"}
    killed = subprocess.Popen(command + ["--out", str(tmp_path / "a")], stdout=subprocess.DEVNULL,
                              stderr=subprocess.DEVNULL, env=environment)
    chains = tmp_path / "a" / "chains.h5"
    deadline = time.time() + 120
    saved = 0
    while time.time() < deadline and saved < 200:
        time.sleep(0.3)
        try:
            with h5py.File(chains, "r", locking=False) as f:
                saved = int(f["chains"].attrs["iteration"])
        except (OSError, KeyError):
            pass
    killed.send_signal(signal.SIGKILL)
    killed.wait()
    assert 200 <= saved < 800
    for out in ("a", "b"):
        assert subprocess.run(command + ["--out", str(tmp_path / out)], capture_output=True, env=environment).returncode == 0
    with h5py.File(tmp_path / "a" / "chains.h5") as fa, h5py.File(tmp_path / "b" / "chains.h5") as fb:
        assert fa["chains"].attrs["iteration"] == fb["chains"].attrs["iteration"] == 800
        np.testing.assert_array_equal(fa["chains/chain"][:], fb["chains/chain"][:])


def test_fit_command_outputs(tmp_path, capsys):
    config = tmp_path / "c.toml"
    config.write_text(
        "[run]\nseed = 2\n[array]\nrandom = {count = 4}\n[observing]\nspan = 8\ncadence = 30\ntoa_error = 0.1\n"
        "[gwb]\namplitude = 1e-14\nharmonics = 6\n[fit]\nmax_steps = 400\nfixed = {common_spectral_index = 4.3333}\n"
    )
    out = tmp_path / "o"
    assert main(["fit", str(config), "--out", str(out)]) == 0
    summary = json.loads((out / "posterior.json").read_text())
    entry = summary["parameters"]["common_lg_amplitude"]
    assert set(entry) >= {"median", "interval68", "interval95", "autocorr_time", "injected"}
    assert set(summary) >= {"acceptance_fraction", "effective_samples", "converged"}
    limit = summary["common_process"]["upper_limit"]
    assert limit["level"] == 0.95 and limit["value"] > entry["interval68"][1] and "prior" in limit["caveat"]
    printed = capsys.readouterr().out
    assert "95% upper limit: lg A < " in printed and "Savage-Dickey" in printed
    for name in ("corner.png", "trace.png"):
        assert (out / name).read_bytes()[:4] == b"\x89PNG"
    assert (out / "dataset.h5").exists()
    # the posterior feeds the noise-marginalised optimal statistic
    assert main(["correlate", str(out / "dataset.h5"), "--out", str(tmp_path / "c"), "--noise", "posterior",
                 "--chains", str(out / "chains.h5"), "--draws", "5", "--scrambles", "0", "--phase-shifts", "0"]) == 0
    assert json.loads((tmp_path / "c" / "correlations.json").read_text())["settings"]["noise_draws"] == 5


@pytest.mark.parametrize(
    "table, words",
    [
        ("[fit]\npriors = {common_lg_amplitude = {uniform = [-12, -18]}}", "lower < upper"),
        ("[fit]\npriors = {common_lg_amplitude = {log_uniform = [0, 1]}}", "positive"),
        ("[fit]\npriors = {common_lg_amplitude = {normal = [-14, -1]}}", "positive sd"),
        ("[fit]\nfixed = {common_spin = 3}", "fit.fixed.common_spin: the model has no parameter"),
        ("[fit]\npriors = {binary_orbital_phase = {uniform = [0, 1]}}", "not a free parameter"),
        ('[fit]\npulsars = ["RP001", "Nowhere"]', "fit.pulsars: the dataset has no pulsar(s) Nowhere"),
        ('[fit]\ncommon = "quadrupole"', "fit.common"),
        ("[fit]\nwalkers = 2", "fewer than twice"),
    ],
)
def test_bad_fit_settings_one_line(tmp_path, capsys, table, words):
    data = loud_background(6)
    dataset = write_dataset(data, tmp_path / "d.h5")
    settings = tmp_path / "fit.toml"
    settings.write_text(table + "\n")
    assert main(["fit", str(dataset), "--out", str(tmp_path / "o"), "--config", str(settings)]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and words in err and "Traceback" not in err


def test_continuous_wave_model_reproduces_injection():
    """With every parameter at its injected value, the fit's continuous-wave signal is the injected one
    (fixed frequency, Earth and pulsar terms at the same distances).  Tolerance 1e-9: the pulsar-term
    phase 2 pi f L (1 - s.p) / c ~ 1e4 rad amplifies the ~1e-14 round-off of 10^(log10 f)."""
    config = small_config(
        array={"random": {"count": 3}},
        gwb=None,
        binary=[{"name": "b", "chirp_mass": 1e9, "distance": 30.0, "frequency": 15.0, "ra": 40.0, "dec": -20.0,
             "inclination": 0.8, "polarization": 0.3, "phase": 1.2, "frequency_evolution": False}],
    )
    data = simulate(config)
    model = FitModel(data, FitSection(common="none", binary=True, binary_pulsar_term=True))
    signal = model._signal(model.values)
    for p, s in zip(data.pulsars, signal):
        np.testing.assert_allclose(s, p.injected["binary"], rtol=0, atol=1e-9 * np.abs(p.injected["binary"]).max())
    assert model.names == ["binary_lg_strain", "binary_orbital_phase", "binary_inclination_cosine",
                           "binary_polarization_angle"]


def test_unknown_binary_values_and_missing_values():
    data = loud_background(7)
    with pytest.raises(InputError, match="needs values"):
        FitModel(data, FitSection(binary=True))
    with pytest.raises(InputError, match=r"fit.binary_values.spin: Input should be 'lg_strain'"):
        parse_config("[array]\nrandom = {count = 3}\n[fit]\nbinary_values = {spin = 1.0}")


@pytest.mark.parametrize(
    "table, words",
    [
        ("[fit]\nfixed = {common_spectral_index = nan}", "outside the allowed range"),
        ("[fit]\nfixed = {common_spectral_index = inf}", "outside the allowed range"),
        ('[fit]\nwhite = "free"\nfixed = {"white_scale@RP001" = 0}', "outside the allowed range"),
        ('[fit]\nred = "none"\nfixed = {"red_lg_amplitude@RP001" = -12.5}', "not used by this model"),
        ("[fit]\npriors = {common_lg_amplitude = {uniform = [-20, 400]}}", "outside the allowed"),
        ('[fit]\nwhite = "free"\npriors = {white_scale = {normal = [1, 0.5]}}', "outside the allowed"),
        ('[fit]\nbinary = true\nbinary_free = ["orbital_phase", "orbital_phase"]', "listed twice"),
    ],
)
def test_fixed_values_and_priors_are_checked(tmp_path, capsys, table, words):
    dataset = write_dataset(loud_background(6), tmp_path / "d.h5")
    settings = tmp_path / "fit.toml"
    settings.write_text(table + "\n")
    assert main(["fit", str(dataset), "--out", str(tmp_path / "o"), "--config", str(settings)]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and words in err, err


@pytest.mark.parametrize("option, value", [("--seed", "-1"), ("--max-steps", "0"), ("--walkers", "-1"), ("--workers", "0")])
def test_command_line_overrides_are_validated(tmp_path, capsys, option, value):
    dataset = write_dataset(loud_background(6), tmp_path / "d.h5")
    assert main(["fit", str(dataset), "--out", str(tmp_path / "o"), option, value]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and option in err


def test_resume_refuses_chains_of_another_dataset(tmp_path, capsys):
    """Same settings, different data: the saved chains are not continued."""
    out = tmp_path / "o"
    first = write_dataset(loud_background(6), tmp_path / "a.h5")
    second = write_dataset(loud_background(7), tmp_path / "b.h5")
    settings = tmp_path / "fit.toml"
    settings.write_text("[fit]\nmax_steps = 100\n")
    assert main(["fit", str(first), "--out", str(out), "--config", str(settings)]) == 0
    assert main(["fit", str(second), "--out", str(out), "--config", str(settings)]) == 2
    assert "holds chains of a different fit" in capsys.readouterr().err


def test_converged_fit_is_not_extended_by_a_rerun(tmp_path):
    data = loud_background(8)
    section = FitSection(max_steps=5000, autocorr_factor=10, seed=1)
    first = run_sampler(FitModel(data, section), tmp_path / "c.h5")
    assert first.converged
    again = run_sampler(FitModel(data, section), tmp_path / "c.h5")
    assert again.steps == first.steps


def test_posterior_draws_keep_what_the_fit_held_fixed(tmp_path):
    """noise_from_chains: the fixed index and the fit's frequency count carry over; other data are refused."""
    from ptares.inference.posterior_noise import noise_from_chains

    data = loud_background(9)
    model = FitModel(data, FitSection(fixed={"common_spectral_index": 3.0}, harmonics=4, max_steps=200))
    run_sampler(model, tmp_path / "c.h5")
    draws = noise_from_chains(data, tmp_path / "c.h5", draws=5)
    assert len(draws) == 5
    assert all(d.common_spectral_index == 3.0 and d.common_harmonics == 4 for d in draws)
    assert len({d.common_amplitude for d in draws}) == 5
    with pytest.raises(InputError, match="another dataset"):
        noise_from_chains(loud_background(10), tmp_path / "c.h5")


def test_short_run_writes_valid_json(tmp_path):
    """A run too short for an autocorrelation estimate still writes strict JSON (null, never NaN)."""
    dataset = write_dataset(loud_background(6), tmp_path / "d.h5")
    assert main(["fit", str(dataset), "--out", str(tmp_path / "o"), "--max-steps", "12"]) == 0
    text = (tmp_path / "o" / "posterior.json").read_text()
    assert "NaN" not in text and "Infinity" not in text
    json.loads(text)


def test_parameter_names_separate_pulsar_and_quantity():
    """Pulsar names may hold ``_ . - +``: every free parameter splits back into its quantity and pulsar."""
    from ptares.inference.parameters import split

    names = ["J0437-4715", "B1937+21.a", "odd_name-2"]
    config = small_config(
        array={"pulsars": [{"name": n, "ra": 10.0 * i, "dec": 5.0 * i} for i, n in enumerate(names)]},
        observing={"start": 53000, "span": 3.0, "cadence": 20.0},
        gwb={"amplitude": 1e-14, "harmonics": 4},
    )
    model = FitModel(simulate(config, seed=1), FitSection(white="free", red="free"))
    per_pulsar = [split(n) for n in model.names if "@" in n]
    assert {pulsar for _, pulsar in per_pulsar} == set(names)
    assert {q for q, _ in per_pulsar} == {"white_scale", "white_lg_quadrature", "red_lg_amplitude", "red_spectral_index"}
    assert "common_lg_amplitude" in model.names and "common_spectral_index" in model.names


def test_binary_frequency_prior_comes_from_the_data():
    """Default prior on lg f_GW: uniform over [1/T, 1/(2 x cadence)] (common practice: the lowest
    frequency the span resolves and the Nyquist frequency of the sampling)."""
    from ptares.inference.model import binary_frequency_prior

    data = loud_background(7)  # 30-day cadence, no jitter
    prior = binary_frequency_prior(data)
    assert 10**prior.low == pytest.approx(1.0 / data.span, rel=1e-12)
    assert 10**prior.high == pytest.approx(0.5 / (30 * 86400.0), rel=1e-9)
    model = FitModel(data, FitSection(binary=True, binary_free=["lg_frequency"], common="none",
                                      binary_values={"lg_strain": -14, "orbital_phase": 0, "inclination_cosine": 0,
                                                     "polarization_angle": 0, "right_ascension": 1, "declination_sine": 0}))
    assert model.priors == [prior]


@pytest.mark.parametrize("first_generic", [True, False])
def test_a_pulsars_own_fixed_value_wins_over_the_all_pulsars_one(first_generic):
    """``fixed`` with both ``red_spectral_index`` and ``red_spectral_index@P``: P's own value wins, in either order."""
    data = loud_background(7)
    name = data.names[0]
    entries = [("red_spectral_index", 3.0), (f"red_spectral_index@{name}", 5.0)]
    fixed = dict(entries if first_generic else entries[::-1])
    model = FitModel(data, FitSection(red="free", fixed=fixed))
    assert model.values[f"red_spectral_index@{name}"] == 5.0
    assert all(model.values[f"red_spectral_index@{n}"] == 3.0 for n in data.names[1:])


def test_normal_prior_on_a_bounded_quantity_needs_bounds():
    """The README's example prior: a normal on a pulsar's lg amplitude is taken with bounds and refused without."""
    data = loud_background(7)
    key = f"red_lg_amplitude@{data.names[0]}"
    model = FitModel(data, FitSection(red="free", priors={key: {"normal": [-14, 0.5], "bounds": [-20, -11]}}))
    assert model.priors[model.names.index(key)].high == -11
    with pytest.raises(InputError, match="give the normal prior 'bounds'"):
        FitModel(data, FitSection(red="free", priors={key: {"normal": [-14, 0.5]}}))


def test_binary_strain_prior_comes_from_the_data():
    """Default lg h0 prior: residual amplitudes h0 / (2 pi f) (PHYSICS.md) from a thousandth of the
    smallest TOA error at f = 1/T up to ten times the largest residual scatter at the Nyquist frequency."""
    from ptares.inference.model import binary_strain_prior

    data = loud_background(7)  # 30-day cadence, no jitter
    prior = binary_strain_prior(data)
    assert 10**prior.low / (2 * np.pi / data.span) == pytest.approx(
        1e-3 * min(p.errors.min() for p in data.pulsars), rel=1e-9)
    assert 10**prior.high / (2 * np.pi * 0.5 / (30 * 86400.0)) == pytest.approx(
        10 * max(p.residuals.std() for p in data.pulsars), rel=1e-9)
    assert -20 < prior.low < prior.high <= -9


def test_no_injected_index_without_its_process():
    """A pulsar simulated without red noise has no injected red-noise index to draw or compare against."""
    data = loud_background(7)  # no red noise in any pulsar
    model = FitModel(data, FitSection(red="free"))
    assert not any(name.startswith("red_") for name in model.injected)
    assert "common_spectral_index" in model.injected


SEEDLESS_TOML = """\
[array.random]
count = 3
[observing]
span = "5 yr"
cadence = "60 d"
[gwb]
amplitude = 5e-15
harmonics = 3
[fit]
red = "none"
harmonics = 3
fixed = { common_spectral_index = 4.3333333333 }
walkers = 8
"""


def test_config_without_a_seed_records_it_and_a_rerun_resumes(tmp_path, capsys):
    """No [run] seed: the first run draws one (said, and kept in dataset.h5); the same command again
    reuses it, so the chains are continued rather than refused as another dataset's."""
    config = tmp_path / "seedless.toml"
    config.write_text(SEEDLESS_TOML)
    out = tmp_path / "o"
    assert main(["fit", str(config), "--out", str(out), "--max-steps", "60"]) == 0
    assert "drew seed" in capsys.readouterr().out
    first = json.loads((out / "posterior.json").read_text())
    assert main(["fit", str(config), "--out", str(out), "--max-steps", "120"]) == 0
    assert "so the run resumes" in capsys.readouterr().out
    second = json.loads((out / "posterior.json").read_text())
    assert (first["steps"], second["steps"]) == (60, 120)

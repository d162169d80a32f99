"""The per-pulsar noise stage: each pulsar's noise fitted alone on the campaign engines, resumable, and its
results fixing or setting the priors of an array fit."""

import json

import numpy as np
import pytest
from conftest import small_config

from ptares.campaign import noise_stage
from ptares.errors import InputError
from ptares.inference.model import FitModel
from ptares.inference.priors import Normal
from ptares.inputs.config import FitSection
from ptares.simulation.simulate import simulate


def noisy_array(seed=2):
    config = small_config(
        array={"random": {"count": 3}},
        observing={"start": 53000, "span": 6.0, "cadence": 30.0, "toa_error": 0.5},
        noise={"white": {"scale": 1.5}, "red": {"amplitude": 3e-14, "spectral_index": 3.0, "harmonics": 6}},
        gwb=None,
    )
    return simulate(config, seed=seed)


SETTINGS = dict(white="free", red="free", red_harmonics=6, fixed={"white_lg_quadrature": -np.inf}, max_steps=6000,
                autocorr_factor=20,
                effective_samples=200, seed=1)


@pytest.fixture(scope="module")
def stage(tmp_path_factory):
    out = tmp_path_factory.mktemp("noise")
    data = noisy_array()
    content = noise_stage.run_noise_stage(data, FitSection(**SETTINGS), out, workers=2, progress=False)
    return data, out, content


def test_every_pulsar_is_fitted_alone_and_recovers_its_noise(stage):
    """White scale 1.5 and red amplitude 3e-14 injected: each pulsar's 99.7% range (mean +/- 3 sd; the
    posteriors are close to normal here) holds the injected white scale, and every fit converged."""
    data, out, content = stage
    assert set(content["pulsars"]) == set(data.names)
    for name, row in content["pulsars"].items():
        assert row["status"] == "ok" and row["converged"], row
        scale = row["parameters"][f"white_scale@{name}"]
        assert abs(scale["mean"] - 1.5) < 3 * scale["sd"], scale
        assert (out / "pulsars" / f"{name}.h5").is_file()
    written = json.loads((out / "pulsar_noise.json").read_text())
    assert written["pulsars"].keys() == content["pulsars"].keys()


def test_a_rerun_skips_finished_pulsars(stage, monkeypatch):
    """Rerunning the same stage runs no fit again."""
    data, out, _ = stage

    def refuse(task):
        raise AssertionError(f"{task.pulsar} was fitted again")

    monkeypatch.setattr(noise_stage, "run_noise_task", refuse)
    again = noise_stage.run_noise_stage(data, FitSection(**SETTINGS), out, workers=1, progress=False)
    assert set(again["pulsars"]) == set(data.names)


def test_array_fit_fixes_or_samples_under_the_stage_results(stage):
    """By default the stage fixes each pulsar's white noise at its medians and leaves red noise free (its
    single-pulsar posterior has absorbed the common process); listing red quantities fixes them too;
    ``pulsar_noise_use = "prior"`` keeps them free under normal priors of the stage's mean and standard
    deviation; a prior set in [fit] priors wins over the stage's."""
    data, out, content = stage
    path = str(out / "pulsar_noise.json")
    base = dict(white="free", red="free", red_harmonics=6, fixed={"white_lg_quadrature": -np.inf}, common="uncorrelated",
                harmonics=6, pulsar_noise=path)
    name = data.names[0]
    white_only = FitModel(data, FitSection(**base))
    assert not any(n.startswith("white_") for n in white_only.names)
    assert f"red_lg_amplitude@{name}" in white_only.names
    assert white_only.values[f"white_scale@{name}"] == content["pulsars"][name]["parameters"][f"white_scale@{name}"]["median"]
    everything = FitModel(data, FitSection(**base, pulsar_noise_quantities=("white_scale", "red_lg_amplitude",
                                                                           "red_spectral_index")))
    assert everything.names == ["common_lg_amplitude", "common_spectral_index"]
    assert everything.values[f"red_lg_amplitude@{name}"] == \
        content["pulsars"][name]["parameters"][f"red_lg_amplitude@{name}"]["median"]
    prior = FitModel(data, FitSection(**base, pulsar_noise_use="prior",
                                      priors={"red_lg_amplitude": {"uniform": [-16, -12]}},
                                      pulsar_noise_quantities=("white_scale", "red_lg_amplitude")))
    chosen = prior.priors[prior.names.index(f"white_scale@{name}")]
    summary = content["pulsars"][name]["parameters"][f"white_scale@{name}"]
    assert isinstance(chosen, Normal) and chosen.mean == summary["mean"] and chosen.sd == summary["sd"]
    assert not isinstance(prior.priors[prior.names.index(f"red_lg_amplitude@{name}")], Normal)


def test_results_of_other_data_are_refused(stage):
    """A noise-stage file fitted to another realisation is refused with one line naming the file."""
    _, out, _ = stage
    other = noisy_array(seed=3)
    with pytest.raises(InputError, match="pulsar_noise.json") as caught:
        FitModel(other, FitSection(white="free", red="free", red_harmonics=6, pulsar_noise=str(out / "pulsar_noise.json")))
    assert "fitted to other data" in caught.value.line()


def test_command_line_noise_stage_then_array_fit(stage, tmp_path, capsys):
    """``ptares noise DATASET --config S.toml --out DIR`` (resumed here: every pulsar is done) writes the summary
    and its figure; an array fit whose settings file names ``pulsar_noise`` relative to its own folder uses it."""
    from ptares.cli import main
    from ptares.dataset import write_dataset

    data, out, _ = stage
    dataset = write_dataset(data, tmp_path / "d.h5")
    settings = tmp_path / "s.toml"
    settings.write_text('[fit]\nwhite = "free"\nred = "free"\nred_harmonics = 6\nmax_steps = 6000\nautocorr_factor = 20\n'
                        'effective_samples = 200\nseed = 1\nfixed = { white_lg_quadrature = -inf }\n')
    assert main(["noise", str(dataset), "--config", str(settings), "--out", str(out)]) == 0
    assert "3 pulsars; wrote" in capsys.readouterr().out
    assert (out / "pulsar_noise.png").is_file()
    relative = tmp_path / "array.toml"
    relative.write_text(f'[fit]\nwhite = "free"\nred = "free"\nred_harmonics = 6\ncommon = "uncorrelated"\nharmonics = 6\n'
                        f'fixed = {{ white_lg_quadrature = -inf }}\npulsar_noise = "{out.name}/pulsar_noise.json"\n'
                        f'pulsar_noise_use = "fix"\nmax_steps = 200\n')
    (tmp_path / out.name).symlink_to(out, target_is_directory=True)
    import ptares

    result = ptares.fit(dataset, settings=relative, figures=False)
    assert not any(n.startswith("white_") for n in result.names) and "common_lg_amplitude" in result.names


def test_noise_stage_on_a_dask_cluster_matches_local_processes(tmp_path):
    """The same pulsars fitted on a dask.distributed LocalCluster give the same posterior summaries as local
    worker processes (each fit is seeded, so the engines must not matter)."""
    import distributed

    data = noisy_array()
    settings = FitSection(**{**SETTINGS, "max_steps": 300, "pulsars": tuple(data.names[:2])})
    local = noise_stage.run_noise_stage(data, settings, tmp_path / "local", workers=1, progress=False)
    with distributed.LocalCluster(n_workers=1, threads_per_worker=1, processes=False, dashboard_address=None) as cluster:
        with distributed.Client(cluster) as client:
            remote = noise_stage.run_noise_stage(data, settings, tmp_path / "dask", scheduler=client, progress=False)
    for name in data.names[:2]:
        assert remote["pulsars"][name]["parameters"] == local["pulsars"][name]["parameters"]

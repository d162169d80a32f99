"""`ptares correlate` as a user meets it: outputs, settings, and bad datasets."""

import json

import numpy as np
import pytest

from ptares.cli import main
from ptares.dataset import load_dataset, write_dataset


@pytest.fixture(scope="module")
def dataset_path(tmp_path_factory):
    from conftest import small_config

    from ptares.simulation.simulate import simulate

    config = small_config(array={"random": {"count": 7}}, gwb={"amplitude": 1e-14, "harmonics": 8})
    return write_dataset(simulate(config), tmp_path_factory.mktemp("d") / "dataset.h5")


def test_correlate_writes_json_and_figures(dataset_path, tmp_path, capsys):
    out = tmp_path / "c"
    assert main(["correlate", str(dataset_path), "--out", str(out), "--scrambles", "20", "--phase-shifts", "20", "--overlays"]) == 0
    summary = json.loads((out / "correlations.json").read_text())
    assert len(summary["pairs"]) == 21
    assert set(summary["pairs"][0]) == {"a", "b", "angle", "rho", "sigma"}
    assert 0 <= summary["pairs"][0]["angle"] <= np.pi
    assert set(summary["estimates"]) == {"hellings-downs", "monopole", "dipole", "joint", "per_frequency"}
    for name in ("hellings-downs", "monopole", "dipole"):
        assert {"amplitude2", "sigma", "snr", "p_value"} <= set(summary["estimates"][name])
    assert set(summary["fit_quality"]) >= {"chi2", "dof", "p"}
    for name in ("correlations.png", "nulls.png"):
        assert (out / name).read_bytes()[:4] == b"\x89PNG"
    assert "hellings-downs: A^2 =" in capsys.readouterr().out


def test_correlate_config_section_and_values_noise(dataset_path, tmp_path):
    config = tmp_path / "c.toml"
    config.write_text(
        '[correlate]\nnoise = "values"\nscrambles = 0\nphase_shifts = 0\nbins = 5\nharmonics = 6\n'
        '[correlate.noise_values]\nwhite_quadrature = "10 ns"\ncommon_amplitude = 1e-14\n'
        "[correlate.noise_values.pulsars.RP001]\nred_amplitude = 1e-15\n"
    )
    out = tmp_path / "c"
    assert main(["correlate", str(dataset_path), "--out", str(out), "--config", str(config)]) == 0
    summary = json.loads((out / "correlations.json").read_text())
    assert summary["settings"]["noise"] == "values" and summary["settings"]["harmonics"] == 6
    assert "p_value" not in summary["estimates"]["hellings-downs"]
    assert not (out / "nulls.png").exists()


def _broken(dataset_path, tmp_path, change):
    data = load_dataset(dataset_path)
    change(data)
    return write_dataset(data, tmp_path / "broken.h5")


@pytest.mark.parametrize(
    "change, words",
    [
        (lambda d: d.pulsars.__delitem__(slice(1, None)), "at least 2"),
        (lambda d: setattr(d.pulsars[2], "residuals", d.pulsars[2].residuals[:-3]), "residuals has 71 values but mjd 74"),
        (lambda d: d.pulsars[1].residuals.__setitem__(4, np.nan), "NaN"),
        (lambda d: d.pulsars[3].errors.__setitem__(0, 0.0), "must be positive"),
        (lambda d: d.pulsars[3].errors.__setitem__(0, -1e-6), "must be positive"),
    ],
)
def test_bad_datasets_one_line_exit_2(dataset_path, tmp_path, capsys, change, words):
    broken = _broken(dataset_path, tmp_path, change)
    out = tmp_path / "out"
    assert main(["correlate", str(broken), "--out", str(out)]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and words in err and "Traceback" not in err
    assert not out.exists()


@pytest.mark.parametrize(
    "args, words",
    [
        (["--bins", "1"], "--bins"),
        (["--scrambles", "-4"], "--scrambles"),
        (["--config", "/nonexistent.toml"], "file not found"),
    ],
)
def test_bad_settings(dataset_path, tmp_path, capsys, args, words):
    assert main(["correlate", str(dataset_path), "--out", str(tmp_path / "o"), *args]) == 2
    assert words in capsys.readouterr().err


def test_config_without_correlate_table(dataset_path, tmp_path, capsys):
    config = tmp_path / "plain.toml"
    config.write_text("[run]\nseed = 1\n")
    assert main(["correlate", str(dataset_path), "--out", str(tmp_path / "o"), "--config", str(config)]) == 2
    assert "has no [correlate] table" in capsys.readouterr().err
    config.write_text("[correlate]\nbinz = 3\n")
    assert main(["correlate", str(dataset_path), "--out", str(tmp_path / "o"), "--config", str(config)]) == 2
    assert "correlate.binz: unknown key" in capsys.readouterr().err


@pytest.mark.parametrize(
    "change, words",
    [
        (lambda d: d.pulsars[1].design_matrix.__setitem__((0, 0), np.nan), "design_matrix[0, 0] is NaN"),
        (lambda d: setattr(d, "span", float("nan")), "attribute 'span' is NaN"),
        (lambda d: setattr(d, "span", -5.0), "attribute 'span' is -5.0 s; it must be positive"),
        (lambda d: setattr(d.pulsars[0], "ra", float("nan")), "attribute 'ra' is NaN"),
        (lambda d: d.pulsars[0].noise.__setitem__("white_quadrature", float("nan")), "noise parameter"),
        (lambda d: d.signals["gwb"].__setitem__("amplitude", float("nan")), "signal parameter amplitude"),
        (lambda d: d.signals["gwb"].__setitem__("harmonics", 7.5), "whole number"),
    ],
)
def test_more_broken_datasets(dataset_path, tmp_path, capsys, change, words):
    broken = _broken(dataset_path, tmp_path, change)
    assert main(["correlate", str(broken), "--out", str(tmp_path / "out")]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and words in err


@pytest.mark.parametrize(
    "table, words",
    [
        ("[correlate.noise_values.pulsars.RP001]\nwhite_scale = -1", "white_scale: must be positive"),
        ("[correlate.noise_values.pulsars.RP001]\nwhite_scale = 0", "must be positive"),
        ("[correlate.noise_values.pulsars.RP001]\nred_amplitude = 1e-3", "at most"),
        ("[correlate.noise_values.pulsars.RP001]\nspin = 1", "unknown key"),
        ("[correlate.noise_values.pulsars.Nowhere]\nred_amplitude = 1e-15", "'Nowhere' is not in the dataset"),
    ],
)
def test_bad_noise_values(dataset_path, tmp_path, capsys, table, words):
    config = tmp_path / "c.toml"
    config.write_text('[correlate]\nnoise = "values"\n' + table + "\n")
    assert main(["correlate", str(dataset_path), "--out", str(tmp_path / "o"), "--config", str(config)]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and words in err, err


def test_usage_mistakes_are_one_line(dataset_path, tmp_path):
    import subprocess
    import sys

    result = subprocess.run([sys.executable, "-m", "ptares", "correlate", str(dataset_path), "--out", str(tmp_path),
                             "--spectral-index", "abc"], capture_output=True, text=True)
    assert result.returncode == 2 and result.stderr.count("\n") == 1 and "--spectral-index" in result.stderr


def test_posterior_noise_without_chains_is_one_line(dataset_path, tmp_path, capsys):
    """A check across options (``--noise posterior`` needs ``--chains``) names the options, no traceback."""
    out = tmp_path / "o"
    assert main(["correlate", str(dataset_path), "--out", str(out), "--noise", "posterior"]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "chains" in err and "Traceback" not in err and not out.exists()

"""The command line: what a user sees, exit codes, and nothing written on bad input."""

import subprocess
import sys

import h5py
import pytest
from conftest import SMALL_TOML

from ptares.cli import main


def run_cli(*args):
    return subprocess.run([sys.executable, "-m", "ptares", *map(str, args)], capture_output=True, text=True)


def test_simulate_writes_dataset_and_figures(small_toml, tmp_path):
    out = tmp_path / "out"
    result = run_cli("simulate", small_toml, "--out", out)
    assert result.returncode == 0, result.stderr
    for name in ("dataset.h5", "residuals.png", "sky.png", "correlation.png"):
        assert (out / name).stat().st_size > 0
        assert (out / name).read_bytes()[:4] in (b"\x89PNG", b"\x89HDF")
    assert not list(out.glob(".*.tmp"))
    with h5py.File(out / "dataset.h5") as f:
        assert list(f["pulsars"]) == ["Aa", "Bb", "Cc"]


@pytest.mark.parametrize(
    "old, new, words",
    [
        ("[gwb]", "[gwb]\ncolour = 3", "gwb.colour: unknown key"),
        ('dec = "10:00:00"', "dec = 99", "array.pulsars[0] (Aa).dec: declination 99 is outside"),
        ("amplitude = 3e-15", "amplitude = nan", "gwb.amplitude"),
        ('span = "5 yr"', 'span = "3 d"', "observing.span"),
        ('toa_error = "300 ns"', 'toa_error = "3 m"', "observing.toa_error: '3 m' does not convert"),
    ],
)
def test_bad_config_one_line_exit_2_nothing_written(tmp_path, capsys, old, new, words):
    config = tmp_path / "bad.toml"
    config.write_text(SMALL_TOML.replace(old, new, 1))
    out = tmp_path / "out"
    assert main(["simulate", str(config), "--out", str(out)]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and err.startswith("ptares: error: ")
    assert words in err
    assert "Traceback" not in err
    assert not out.exists()


def test_a_second_run_into_a_folder_in_use_stops_in_one_line(small_toml, tmp_path):
    """While one run holds an output folder, another process's run into it stops at once, writes nothing
    and names the folder; once the first has finished (here: its lock released) the folder is free."""
    from ptares.locking import LOCK_NAME, folder_lock

    out = tmp_path / "out"
    with folder_lock(out):
        result = run_cli("simulate", small_toml, "--out", out)
        assert result.returncode == 2 and result.stderr.count("\n") == 1, result.stderr
        assert f"{out}: is in use by another ptares run" in result.stderr
        assert [p.name for p in out.iterdir()] == [LOCK_NAME]
    assert not out.exists()  # the folder the lock made is gone again, empty
    assert run_cli("simulate", small_toml, "--out", out, "--no-figures").returncode == 0
    assert not (out / LOCK_NAME).exists()


def test_missing_config_file(tmp_path, capsys):
    assert main(["check", str(tmp_path / "nope.toml")]) == 2
    err = capsys.readouterr().err
    assert err.strip() == f"ptares: error: {tmp_path / 'nope.toml'}: file not found"


def test_real_process_exit_status_and_no_traceback(tmp_path):
    config = tmp_path / "bad.toml"
    config.write_text("[array]\npulsars = []\n")
    result = run_cli("simulate", config, "--out", tmp_path / "out")
    assert result.returncode == 2
    assert result.stderr.strip().endswith("array: the array has no pulsars")
    assert "Traceback" not in result.stderr
    assert not (tmp_path / "out").exists()


def test_check_prints_summary(small_toml, capsys):
    assert main(["check", str(small_toml)]) == 0
    out = capsys.readouterr().out
    assert "valid" in out
    assert "pulsars    3" in out
    assert "background A = 3e-15" in out
    assert "red noise in 1 pulsars" in out


def test_existing_dataset_is_not_overwritten_without_flag(small_toml, tmp_path, capsys):
    out = tmp_path / "out"
    assert main(["simulate", str(small_toml), "--out", str(out), "--no-figures"]) == 0
    before = (out / "dataset.h5").read_bytes()
    assert main(["simulate", str(small_toml), "--out", str(out), "--no-figures"]) == 2
    assert "--overwrite" in capsys.readouterr().err
    assert (out / "dataset.h5").read_bytes() == before
    assert main(["simulate", str(small_toml), "--out", str(out), "--no-figures", "--overwrite"]) == 0


def test_unusable_output_directory_is_one_line(small_toml, tmp_path, capsys):
    blocker = tmp_path / "file"
    blocker.write_text("x")
    assert main(["simulate", str(small_toml), "--out", str(blocker / "sub")]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "exists and is not a directory" in err


def test_check_and_simulate_agree_on_an_empty_schedule(tmp_path, capsys):
    """Gaps covering a pulsar's whole window are caught by `check` itself, naming the key."""
    config = tmp_path / "gaps.toml"
    config.write_text(SMALL_TOML.replace("start = 54000", "start = 54000, gaps = [[50000, 60000]]"))
    for command in (["check", str(config)], ["simulate", str(config), "--out", str(tmp_path / "o")]):
        assert main(command) == 2
        assert "array.pulsars[2] (Cc).gaps: leaves 0 TOAs" in capsys.readouterr().err
    assert not (tmp_path / "o").exists()


def test_zero_amplitude_background_and_many_pulsars_figures(tmp_path, recwarn):
    """Every pulsar appears in a residuals figure (20 per page: 21 pulsars need two); a silent background draws
    no warnings."""
    config = tmp_path / "many.toml"
    config.write_text(
        '[run]\nseed = 1\n[array]\nrandom = {count = 21}\n[observing]\nspan = 3\ncadence = 60\n'
        "[gwb]\namplitude = 0\nharmonics = 3\n"
    )
    out = tmp_path / "out"
    assert main(["simulate", str(config), "--out", str(out)]) == 0
    assert (out / "residuals.png").exists() and (out / "residuals-2.png").exists()
    assert not [w for w in recwarn if issubclass(w.category, RuntimeWarning)]
    assert main(["simulate", str(config), "--out", str(out)]) == 2  # outputs present, no --overwrite

"""A corpus of bad inputs, one parametrised test per kind: each must end with one line naming the file
and, where there is one, the key; exit status 2; no traceback; nothing written (README, "A mistake in
the input")."""

import os

import pytest
from conftest import SMALL_TOML

from ptares.cli import main
from ptares.limits import FILE_LIMIT, NESTING_LIMIT


def _refused(capsys, arguments, *words, out=None):
    """Run the command line; it must refuse in one line containing every one of ``words``."""
    assert main([str(a) for a in arguments]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and err.startswith("ptares: error: "), err
    assert "Traceback" not in err
    for word in words:
        assert word in err, (word, err)
    if out is not None:
        assert not out.exists()
    return err


@pytest.mark.parametrize("old, new, words", [
    ("amplitude = 3e-15", "amplitude = 1e400", ("gwb.amplitude", "1e400 overflows")),
    ("amplitude = 3e-15", "amplitude = 3e-400", ("gwb.amplitude", "3e-400 underflows")),
    ("harmonics = 8", "harmonics = 8\nspectral_index = 1" + "0" * 400 + ".0", ("gwb.spectral_index", "overflows")),
    ('cadence = "30 d"', "cadence = 1e-300", ("observing.cadence", "TOAs per pulsar is more than")),
    ('cadence = "30 d"', "cadence = 5e-324", ("observing.cadence", "an unbounded number of TOAs")),
])
def test_numbers_beyond_double_precision_and_endless_schedules(tmp_path, capsys, old, new, words):
    """A literal that overflows or underflows a double, or a schedule of unbounded length, names its key."""
    config = tmp_path / "bad.toml"
    config.write_text(SMALL_TOML.replace(old, new, 1))
    out = tmp_path / "out"
    _refused(capsys, ["simulate", config, "--out", out], str(config), *words, out=out)


@pytest.mark.parametrize("old, new, suggestion", [
    ("amplitude = 3e-15", "amplitud = 3e-15", "gwb.amplitud: unknown key; did you mean 'amplitude'?"),
    ("[observing]", "[observign]", "observign: unknown key; did you mean 'observing'?"),
    ("harmonics = 8", "harmonic = 8", "did you mean 'harmonics'?"),
])
def test_a_misspelt_key_gets_the_nearest_known_one(tmp_path, capsys, old, new, suggestion):
    config = tmp_path / "bad.toml"
    config.write_text(SMALL_TOML.replace(old, new, 1))
    _refused(capsys, ["check", config], suggestion)


def test_an_unrelated_unknown_key_gets_no_guess(tmp_path, capsys):
    config = tmp_path / "bad.toml"
    config.write_text(SMALL_TOML.replace("[gwb]", "[gwb]\ncolour = 3", 1))
    err = _refused(capsys, ["check", config], "gwb.colour: unknown key")
    assert "did you mean" not in err


def _special(kind, tmp_path):
    if kind == "directory":
        path = tmp_path / "folder.toml"
        path.mkdir()
        return path, "is a directory"
    if kind == "pipe":
        path = tmp_path / "pipe.toml"
        os.mkfifo(path)  # reading it would block forever
        return path, "is a pipe"
    if kind == "stream":
        return "/dev/zero", "is a character device"  # reading it would never end
    if kind == "too large":
        path = tmp_path / "huge.toml"
        with open(path, "wb") as handle:
            handle.truncate(FILE_LIMIT + 1)  # sparse: no disk used
        return path, "more than ptares reads"
    if kind == "not text":
        path = tmp_path / "latin.toml"
        path.write_bytes(b"[run]\nname = \"caf\xe9\"\n")
        return path, "not UTF-8 text (byte 18 is 0xe9)"
    if kind == "nested":
        path = tmp_path / "deep.toml"
        path.write_text("x = " + "[" * (NESTING_LIMIT + 5) + "]" * (NESTING_LIMIT + 5) + "\n")
        return path, f"more than {NESTING_LIMIT} deep"
    if kind == "nested without end":
        path = tmp_path / "deeper.toml"
        path.write_text("x = " + "[" * 100_000 + "]" * 100_000 + "\n")  # deeper than Python's recursion
        return path, f"more than {NESTING_LIMIT} deep"
    raise ValueError(kind)


@pytest.mark.parametrize("kind", ["directory", "pipe", "stream", "too large", "not text", "nested",
                                  "nested without end"])
def test_files_that_are_not_configs_are_refused_by_what_they_are(tmp_path, capsys, kind):
    """Special files are refused unread (a stream or a pipe would hang or exhaust memory), large files unread."""
    path, words = _special(kind, tmp_path)
    out = tmp_path / "out"
    _refused(capsys, ["simulate", path, "--out", out], str(path), words, out=out)


def test_too_many_toas_in_all_are_refused_before_anything_is_built(tmp_path, capsys):
    config = tmp_path / "big.toml"
    config.write_text('[array.random]\ncount = 100000\n[observing]\nspan = "20 yr"\ncadence = "1 d"\n')
    _refused(capsys, ["check", config], "array.random.count", "TOAs in all")


def test_a_campaign_of_too_many_tasks_is_counted_not_expanded(tmp_path, capsys):
    """10^3 x 10^3 axis values x 10^4 realisations: 10^10 tasks, refused at once (expanding would exhaust memory)."""
    sweep = tmp_path / "sweep.toml"
    values = ", ".join(str(1e-15 * (1 + i / 1000)) for i in range(1000))
    indices = ", ".join(str(2 + i / 1000) for i in range(1000))
    sweep.write_text(SMALL_TOML + f"\n[sweep]\nrealisations = 10000\n[sweep.axes]\n\"gwb.amplitude\" = [{values}]\n"
                     f"\"gwb.spectral_index\" = [{indices}]\n")
    out = tmp_path / "out"
    _refused(capsys, ["sweep", sweep, "--out", out], "sweep.axes", "10000000000 tasks", out=out)


def test_a_noise_stage_file_that_is_not_one_is_refused_in_one_line(tmp_path, capsys):
    record = tmp_path / "pulsar_noise.json"
    record.write_text("[1, 2, 3]")
    config = tmp_path / "fit.toml"
    config.write_text(SMALL_TOML + f'\n[fit]\nred = "none"\npulsar_noise = "{record}"\n')
    out = tmp_path / "out"
    _refused(capsys, ["fit", config, "--out", out], str(record), "not a noise-stage result", out=out)


CAMPAIGN = SMALL_TOML + """
[sweep]
realisations = 2
[sweep.axes]
"gwb.amplitude" = [1e-15, BAD]
"""


@pytest.mark.parametrize("bad, words", [
    ('"x"', "sweep.axes.gwb.amplitude: value 'x': 'x' is not a number"),
    ("-2e-15", "sweep.axes.gwb.amplitude: value -2e-15: must be non-negative"),
])
def test_a_campaign_with_one_bad_task_config_is_refused_before_any_task_runs(tmp_path, capsys, bad, words):
    """Every task's config is validated first: the fault names the axis and its value; nothing is written."""
    sweep = tmp_path / "sweep.toml"
    sweep.write_text(CAMPAIGN.replace("BAD", bad))
    out = tmp_path / "out"
    _refused(capsys, ["sweep", sweep, "--out", out], str(sweep), words, out=out)
    _refused(capsys, ["check", sweep], words)  # check validates the tasks too


def test_check_says_a_sweep_file_is_a_campaign(tmp_path, capsys):
    sweep = tmp_path / "sweep.toml"
    sweep.write_text(CAMPAIGN.replace("BAD", "2e-15"))
    assert main(["check", str(sweep)]) == 0
    assert "sweep      a campaign file: 4 tasks over gwb.amplitude (2 values), 2 realisations each" in capsys.readouterr().out


@pytest.mark.parametrize("command", ["fit", "compare", "check"])
@pytest.mark.parametrize("fit_table, words", [
    ('fixed = { "Zz:red_lg_amplitude" = -14 }', "fit.fixed.Zz:red_lg_amplitude: the model has no parameter"),
    ('pulsars = ["Aa", "Zz"]', "fit.pulsars: the dataset has no pulsar(s) Zz"),
    ("priors = { white_scale = { uniform = [0.5, 2.0] } }", "fit.priors.white_scale: 'white_scale' is not a free parameter"),
])
def test_fit_settings_of_a_config_are_checked_before_it_is_simulated(tmp_path, capsys, monkeypatch, command,
                                                                      fit_table, words):
    """A [fit] the model refuses costs no simulation: simulating would fail this test."""
    def no_simulation(*args, **kwargs):
        raise AssertionError("simulated before checking [fit]")

    monkeypatch.setattr("ptares.simulation.simulate.simulate", no_simulation)
    config = tmp_path / "fit.toml"
    config.write_text(SMALL_TOML + f"\n[fit]\n{fit_table}\n")
    out = tmp_path / "out"
    _refused(capsys, [command, config] + ([] if command == "check" else ["--out", out]), words, out=out)


def test_check_counts_the_free_parameters_of_a_fit_table(tmp_path, capsys):
    config = tmp_path / "fit.toml"
    config.write_text(SMALL_TOML + '\n[fit]\nred = "free"\n')
    assert main(["check", str(config)]) == 0
    # 3 pulsars x (red amplitude, red index) + the common amplitude and index
    assert "fit        8 free parameters" in capsys.readouterr().out


def test_terminated_while_writing_leaves_no_temporary_file(tmp_path, capsys, monkeypatch):
    """SIGTERM (a batch system's time limit) in the middle of writing dataset.h5: exit status 143, no dataset.h5
    and no half-written temporary file beside it."""
    import signal
    import threading

    import h5py

    if threading.current_thread() is not threading.main_thread():
        pytest.skip("signal handlers are installed only in the main thread")
    real = h5py.File

    def terminated_on_write(name, mode="r", *args, **kwargs):
        handle = real(name, mode, *args, **kwargs)
        if mode == "w":
            handle.close()
            os.kill(os.getpid(), signal.SIGTERM)
        return handle

    monkeypatch.setattr(h5py, "File", terminated_on_write)
    config = tmp_path / "small.toml"
    config.write_text(SMALL_TOML)
    out = tmp_path / "out"
    assert main(["simulate", str(config), "--out", str(out), "--no-figures"]) == 143
    assert capsys.readouterr().err.count("\n") == 1
    assert not out.exists() or list(out.iterdir()) == []
    assert signal.getsignal(signal.SIGTERM) is not None

"""Campaigns: determinism across engines and worker counts, resuming after a kill, failures recorded."""

import os
import signal
import subprocess
import sys
import time

import numpy as np
import pytest

from ptares.campaign.engines import single_threaded_children
from ptares.campaign.sweep import read_results, run_sweep
from ptares.cli import main
from ptares.figures.campaign import sweep_figures

SWEEP = """
[run]
name = "sweep-test"
[array]
random = {{count = 5}}
[observing]
span = "6 yr"
cadence = "30 d"
toa_error = "200 ns"
[gwb]
amplitude = 1e-15
harmonics = 6
[correlate]
scrambles = 0
phase_shifts = 10
fit_trials = 20
[sweep]
realisations = {realisations}
seed = 11
[sweep.axes]
"gwb.amplitude" = [0.0, 2e-14]
{extra}
"""


def write(tmp_path, realisations=2, extra=""):
    path = tmp_path / "sweep.toml"
    path.write_text(SWEEP.format(realisations=realisations, extra=extra))
    return path


def comparable(rows):
    return [{k: v for k, v in row.items() if k != "run_time"} for row in rows]


def test_two_workers_give_the_same_rows_as_one(tmp_path):
    config = write(tmp_path)
    one = run_sweep(config, tmp_path / "one", workers=1, progress=False)
    two = run_sweep(config, tmp_path / "two", workers=2, progress=False)
    assert len(one) == 4 and all(r["status"] == "ok" for r in one)
    assert comparable(one) == comparable(two)
    assert [r["index"] for r in read_results(tmp_path / "one" / "results.csv")] == [0, 1, 2, 3]


def test_dask_local_cluster_gives_the_same_rows(tmp_path):
    """A real dask.distributed LocalCluster (worker processes, one thread each) against the local engine."""
    distributed = pytest.importorskip("distributed")
    config = write(tmp_path)
    local = run_sweep(config, tmp_path / "local", workers=1, progress=False)
    with single_threaded_children():
        with distributed.LocalCluster(n_workers=2, threads_per_worker=1, processes=True, dashboard_address=None) as cluster:
            with distributed.Client(cluster) as client:
                remote = run_sweep(config, tmp_path / "dask", scheduler=client, progress=False)
    assert comparable(local) == comparable(remote)


def test_killed_campaign_resumes_with_every_task_once(tmp_path):
    """SIGKILL the whole process group midway, rerun: every task exactly once, finished rows unchanged."""
    config = write(tmp_path, realisations=6)
    out = tmp_path / "out"
    command = [sys.executable, "-m", "ptares", "sweep", str(config), "--out", str(out)]
    process = subprocess.Popen(command, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL, start_new_session=True)
    deadline = time.time() + 120
    while time.time() < deadline and len(list((out / "tasks").glob("*.json"))) < 3:
        time.sleep(0.1)
    os.killpg(process.pid, signal.SIGKILL)
    process.wait()
    before = {p.name: p.read_text() for p in (out / "tasks").glob("*.json")}
    assert 3 <= len(before) < 12
    assert subprocess.run(command, capture_output=True).returncode == 0
    after = {p.name: p.read_text() for p in (out / "tasks").glob("*.json")}
    assert len(after) == 12
    for name, text in before.items():
        assert after[name] == text
    rows = read_results(out / "results.csv")
    assert sorted(r["index"] for r in rows) == list(range(12))


def test_a_task_that_fails_while_running_is_one_line_in_its_row():
    """A task config that cannot be used (here one that skipped the campaign's up-front validation) becomes a
    failed row whose error is the same one line a user would see, not a library's report; nothing is raised."""
    from ptares.campaign.tasks import Task, run_task

    raw = {"array": {"random": {"count": 3}}, "observing": {"span": 6.0, "cadence": "30 d"}, "gwb": {"amplitude": "x"}}
    row = run_task(Task(0, 0, 1, (("gwb.amplitude", "x"),), raw, ("simulate", "correlate")))
    assert row["status"] == "failed"
    assert row["error"] == "config: gwb.amplitude: 'x' is not a number"


def test_an_invalid_task_config_stops_the_campaign_before_any_task(tmp_path, capsys):
    config = write(tmp_path, extra='"observing.span" = [6.0, 0.01]')
    assert main(["sweep", str(config), "--out", str(tmp_path / "o")]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "span" in err and "observing.span = 0.01" in err, err
    assert not (tmp_path / "o").exists()


def test_bad_sweeps_are_one_line(tmp_path, capsys):
    config = write(tmp_path, extra='"gwb.colour" = [1, 2]')
    assert main(["sweep", str(config), "--out", str(tmp_path / "o")]) == 2
    assert "unknown config key 'gwb.colour'" in capsys.readouterr().err
    config = write(tmp_path)
    assert main(["sweep", str(config), "--out", str(tmp_path / "o2")]) == 0
    write(tmp_path, realisations=3)
    assert main(["sweep", str(config), "--out", str(tmp_path / "o2")]) == 2
    assert "holds a different sweep" in capsys.readouterr().err
    (tmp_path / "plain.toml").write_text("[array]\nrandom = {count = 3}\n")
    assert main(["sweep", str(tmp_path / "plain.toml"), "--out", str(tmp_path / "o3")]) == 2
    assert "has no [sweep] table" in capsys.readouterr().err


def test_seeds_are_derived_from_the_index(tmp_path):
    """Task seeds depend on the sweep seed and the task index only (numpy SeedSequence)."""
    from ptares.campaign.tasks import derive_seed, expand, load_sweep

    base, section = load_sweep(write(tmp_path))
    tasks = expand(base, section)
    assert [t.seed for t in tasks] == [derive_seed(11, i) for i in range(4)]
    assert len({t.seed for t in tasks}) == 4
    assert tasks[3].raw["gwb"]["amplitude"] == 2e-14 and tasks[0].raw["gwb"]["amplitude"] == 0.0


def test_pp_plot_from_fit_rows():
    rng = np.random.default_rng(0)
    rows = [{"status": "ok", "hd_snr": float(rng.normal()), "injected_amplitude": 1e-15, "hd_amplitude2": 0.0,
             "hd_sigma": 1.0, "common_lg_amplitude.quantile": float(q)} for q in rng.uniform(size=30)]
    assert set(sweep_figures(rows)) == {"detection.png", "recovery.png", "snr.png", "coverage.png"}


def test_list_valued_axis_and_seed_axis(tmp_path, capsys):
    """An axis of lists (timing-model terms) runs and draws; run.seed is not an axis."""
    config = write(tmp_path, realisations=1, extra='"timing_model.fit" = [["offset"], ["offset", "spin_frequency"]]')
    assert main(["sweep", str(config), "--out", str(tmp_path / "o")]) == 0
    rows = read_results(tmp_path / "o" / "results.csv")
    assert {r["axis:timing_model.fit"] for r in rows} == {'["offset"]', '["offset", "spin_frequency"]'}
    config = write(tmp_path, realisations=1, extra='"run.seed" = [1, 2]')
    assert main(["sweep", str(config), "--out", str(tmp_path / "p")]) == 2
    assert "run.seed cannot be an axis" in capsys.readouterr().err


def test_detection_probability_and_threshold():
    """Threshold: the 95% quantile of the no-signal S/N (numpy); detection share k/n with its binomial
    standard error sqrt(p (1 - p) / n), p = (k + 1/2) / (n + 1) so that it is never zero (common practice)."""
    from ptares.campaign.detection import DetectionRule, detection_probability, detection_rule

    null = [{"status": "ok", "injected_amplitude": 0.0, "hd_snr": float(s)} for s in np.linspace(-2, 2, 21)]
    loud = [{"status": "ok", "injected_amplitude": 1e-14, "hd_snr": float(s)} for s in (1.0, 3.0, 4.0, 5.0)]
    failed = [{"status": "failed", "injected_amplitude": 1e-14, "hd_snr": ""}]
    rule = detection_rule(null + loud + failed, 0.05)
    assert rule.threshold == pytest.approx(np.quantile(np.linspace(-2, 2, 21), 0.95), rel=1e-12)
    assert "21 no-signal" in rule.how and rule.column == "hd_snr" and rule.above
    found = detection_probability(null + loud + failed, DetectionRule("hd_snr", 2.0, True, "given"))
    assert found[1e-14].tasks == 4 and found[1e-14].fraction == 0.75
    p = 3.5 / 5
    assert found[1e-14].error == pytest.approx(np.sqrt(p * (1 - p) / 4), rel=1e-12)
    p = 0.5 / 22
    assert found[0.0].fraction == 0.0 and found[0.0].error == pytest.approx(np.sqrt(p * (1 - p) / 21), rel=1e-12)


def test_earlier_keys_in_a_sweep_name_their_replacement(tmp_path, capsys):
    """An earlier key as an axis, or in the base config, is refused with its new name before any task runs."""
    config = write(tmp_path, extra='"gwb.components" = [4, 8]')
    assert main(["sweep", str(config), "--out", str(tmp_path / "o")]) == 2
    err = capsys.readouterr().err
    assert "sweep.axes: unknown config key 'gwb.components'; the number of Fourier frequencies is now 'gwb.harmonics'" in err
    assert not (tmp_path / "o").exists()
    text = config.read_text().replace('"gwb.components" = [4, 8]', "")
    config.write_text(text.replace("[gwb]\n", "[gwb]\ngamma = 3.0\n", 1))
    assert main(["sweep", str(config), "--out", str(tmp_path / "o")]) == 2
    err = capsys.readouterr().err
    assert "gwb.gamma: unknown key; the spectral index is now 'gwb.spectral_index'" in err and err.count("\n") == 1
    assert not (tmp_path / "o").exists()


BAYES_SWEEP = """
[run]
seed = 1
[array]
random = {count = 5}
[observing]
span = "8 yr"
cadence = "40 d"
toa_error = "1000 ns"
[gwb]
amplitude = 1e-15
harmonics = 3
[fit]
red = "none"
harmonics = 3
fixed = { common_spectral_index = 4.333333333 }
effective_samples = 100
autocorr_factor = 20
max_steps = 300
[compare]
samples = 150
[sweep]
realisations = 1
seed = 11
stages = ["simulate", "compare"]
detection = "bayes_factor"
ln_bayes_threshold = 1.0
[sweep.axes]
"gwb.amplitude" = [0.0, 1e-14]
"""


def test_bayes_factor_as_the_detection_statistic(tmp_path):
    """The compare stage records ln B per task; with detection = "bayes_factor" and fewer than five no-signal
    tasks the rule is the fixed ln B threshold, and the detection shares follow it.  (That ln B rises with
    the signal is tested in test_compare.py.)"""
    import ptares

    path = tmp_path / "sweep.toml"
    path.write_text(BAYES_SWEEP)
    result = ptares.sweep(path, tmp_path / "out")
    rows = sorted(result.rows, key=lambda r: r["injected_amplitude"])
    assert [r["status"] for r in rows] == ["ok", "ok"], [r.get("error") for r in rows]
    assert all(isinstance(r["ln_bayes_factor"], float) and r["ln_bayes_factor_error"] >= 0 for r in rows)
    assert all(r["bayes_effective_samples"] > 0 and isinstance(r["bayes_reliable"], bool) for r in rows)
    assert result.rule.column == "ln_bayes_factor" and result.rule.threshold == 1.0 and "fixed" in result.rule.how
    found = result.detection_probability()
    for r in rows:
        assert found[r["injected_amplitude"]].fraction == float(r["ln_bayes_factor"] > 1.0)
    assert (tmp_path / "out" / "bayes.png").exists() and "ln B > 1" in repr(result)


def test_bayes_factor_detection_needs_the_compare_stage(tmp_path, capsys):
    path = write(tmp_path, extra="").read_text().replace("seed = 11", 'seed = 11\ndetection = "bayes_factor"')
    (tmp_path / "bad.toml").write_text(path)
    assert main(["sweep", str(tmp_path / "bad.toml"), "--out", str(tmp_path / "o")]) == 2
    error = capsys.readouterr().err.strip()
    assert "sweep" in error and "'compare' stage" in error and len(error.splitlines()) == 1


def test_a_task_with_a_fit_stage_records_the_upper_limit_and_the_savage_dickey_ratio():
    """The fit stage's row holds the 95% upper limit of lg A (the fit summary's) and the Savage–Dickey ln B
    (None where only a bound exists), in results.csv's columns."""
    from ptares.campaign.tasks import COLUMNS, Task, run_task

    raw = {"run": {"seed": 3}, "array": {"random": {"count": 3}},
           "observing": {"span": 6.0, "cadence": "30 d", "toa_error": 0.5}, "gwb": {"amplitude": 3e-15, "harmonics": 5},
           "fit": {"red": "none", "fixed": {"common_spectral_index": 13 / 3}, "max_steps": 300}}
    row = run_task(Task(0, 0, 1, (), raw, ("simulate", "fit")))
    assert row["status"] == "ok", row
    assert {"common_lg_amplitude.upper95", "common_ln_savage_dickey"} <= set(COLUMNS)
    assert row["common_lg_amplitude.upper95"] > row["common_lg_amplitude.median"]
    assert "common_ln_savage_dickey" in row

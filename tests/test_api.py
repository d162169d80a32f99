"""The Python API: a notebook-style session, summaries as reprs, configs from dicts with astropy Quantities."""

import copy
from pathlib import Path

import astropy.units as u
import numpy as np
import pytest
from conftest import assert_same_pulsars, small_config

import ptares
from ptares.errors import InputError
from ptares.inference.parameters import COMMON_INDEX

ROOT = Path(__file__).resolve().parents[1]

#: A three-pulsar array with astropy Quantities wherever the config takes a quantity.
WITH_QUANTITIES = {
    "run": {"name": "notebook", "seed": 21},
    "array": {"pulsars": [
        {"name": "Aa", "ra": 4.5 * u.hourangle, "dec": -20 * u.deg, "distance": 1500 * u.pc},
        {"name": "Bb", "ra": 200 * u.deg, "dec": 35.0, "toa_error": {"uniform": [200 * u.ns, 1 * u.us]}},
        {"name": "Cc", "ra": 300.0, "dec": 60 * u.deg, "red": {"amplitude": 1e-14 * u.one, "spectral_index": 4 * u.one}},
    ]},
    "observing": {"start": 53000 * u.day, "span": 5 * u.yr, "cadence": 2 * u.week, "toa_error": 500 * u.ns},
    "noise": {"white": {"quadrature": 0.25 * u.us}},
    "gwb": {"amplitude": 1e-14, "harmonics": 5},
}

#: The same array with plain numbers in the default units (deg, kpc, d, yr, us).
WITH_NUMBERS = {
    "run": {"name": "notebook", "seed": 21},
    "array": {"pulsars": [
        {"name": "Aa", "ra": 67.5, "dec": -20.0, "distance": 1.5},
        {"name": "Bb", "ra": 200.0, "dec": 35.0, "toa_error": {"uniform": [0.2, 1.0]}},
        {"name": "Cc", "ra": 300.0, "dec": 60.0, "red": {"amplitude": 1e-14, "spectral_index": 4.0}},
    ]},
    "observing": {"start": 53000.0, "span": 5.0, "cadence": 14.0, "toa_error": 0.5},
    "noise": {"white": {"quadrature": 0.25}},
    "gwb": {"amplitude": 1e-14, "harmonics": 5},
}


def assert_summary(text: str, *pieces):
    """A repr is a short summary: the pieces, a few lines, and no array dumps."""
    for piece in pieces:
        assert piece in text, (piece, text)
    assert "array(" not in text and "[[" not in text and "..., " not in text
    assert len(text.splitlines()) < 15 and max(len(line) for line in text.splitlines()) < 200


def test_notebook_session(tmp_path):
    """simulate -> correlate -> fit -> sweep from Python, each result summarised by its repr."""
    data = ptares.simulate(WITH_QUANTITIES)
    assert isinstance(data, ptares.Dataset)
    assert_summary(repr(data), "3 pulsars", f"{data.toa_count} TOAs", "span 5.00 yr", "MJD 53000.0", "seed 21",
                   "background A = 1e-14", "hellings-downs", "red noise in 1 pulsars")
    assert_summary(repr(data.pulsars[0]), "Aa", f"{data.pulsars[0].toa_count} TOAs", "ra 67.50 deg", "1.5 kpc")
    # the dataset records the config as TOML text that reads back to the same simulation
    again = ptares.simulate(ptares.parse_config(data.config))
    assert_same_pulsars(data, again)

    result = ptares.correlate(data, scrambles=0, phase_shifts=20, fit_trials=20)
    assert isinstance(result, ptares.CorrelationResult)
    assert_summary(repr(result), "3 pulsars, 3 pairs", "noise injected", "hellings-downs", "monopole", "dipole",
                   "S/N", "injected", f"spectral index {result.settings['spectral_index']:.3g}")
    assert result.settings["spectral_index"] > 0

    out = tmp_path / "fit"
    fitted = ptares.fit(data, out, common="uncorrelated", red="injected", fixed={COMMON_INDEX: 13 / 3},
                        max_steps=300, seed=2, figures=False)
    assert isinstance(fitted, ptares.FitResult)
    assert len(fitted.names) == 1 and fitted.steps == 300 and fitted.chains == out / "chains.h5"
    (name,) = fitted.names
    entry = fitted.parameters[name]
    assert_summary(repr(fitted), "FitResult: 1 parameter,", "300 steps x 16 walkers", name, "(68%)", "chains in")
    draws = fitted.samples(name)
    assert draws.shape == ((300 - fitted.summary["burn"]) * 16,)
    assert np.median(draws) == pytest.approx(entry["median"])
    assert fitted.samples().shape == (draws.size, 1)
    assert (out / "posterior.json").exists() and not (out / "corner.png").exists()
    # the same call again resumes the finished chains rather than starting afresh
    resumed = ptares.fit(data, out, common="uncorrelated", red="injected", fixed={COMMON_INDEX: 13 / 3},
                         max_steps=300, seed=2, figures=False)
    np.testing.assert_array_equal(resumed.samples(), fitted.samples())

    campaign = copy.deepcopy(WITH_QUANTITIES)
    del campaign["run"]["seed"]
    campaign["correlate"] = {"scrambles": 0, "phase_shifts": 10, "fit_trials": 10}
    campaign["sweep"] = {"realisations": 1, "seed": 3, "axes": {"observing.span": [4 * u.yr, 5 * u.yr]}}
    swept = ptares.sweep(campaign, tmp_path / "sweep", workers=1, figures=False)
    assert isinstance(swept, ptares.SweepResult)
    assert len(swept.rows) == 2 and not swept.failed, swept.rows
    assert (tmp_path / "sweep" / "results.csv").exists() and (tmp_path / "sweep" / "config.toml").exists()
    assert_summary(repr(swept), "2 tasks, 2 ok, 0 failed", "observing.span (2 values)", "detection: ")


def test_quantities_give_the_same_dataset_as_numbers_in_default_units():
    """Quantities are converted to the keys' default units: the same dataset, bit for bit, with the same seed."""
    with_quantities = ptares.simulate(WITH_QUANTITIES, seed=5)
    with_numbers = ptares.simulate(WITH_NUMBERS, seed=5)
    assert_same_pulsars(with_quantities, with_numbers)
    assert with_quantities.seed == with_numbers.seed == 5
    config = ptares.config_from(WITH_QUANTITIES)
    assert config.observing.span == 5.0 and config.observing.cadence == 14.0
    assert config.array.pulsars[1].toa_error.low == 0.2 and config.noise.white.quadrature == 0.25


def test_draw_bounds_as_a_quantity_pair_and_dimensionless_quantities():
    config = ptares.config_from(small_config(), observing={"toa_error": {"log_uniform": [100, 3000] * u.ns}},
                                gwb={"amplitude": 2e-15 * u.dimensionless_unscaled, "spectral_index": 13 / 3 * u.one})
    assert (config.observing.toa_error.low, config.observing.toa_error.high) == pytest.approx((0.1, 3.0))
    assert config.gwb.amplitude == 2e-15
    # the Config without TOML text keeps its other values (here the seed and the random array)
    assert config.run.seed == 11 and config.array.random.count == 6


@pytest.mark.parametrize(
    "section, value, where, words",
    [
        ("observing", {"span": 3 * u.m}, "observing.span", "does not convert to yr"),
        ("observing", {"cadence": 14 * u.one}, "observing.cadence", "has no unit"),
        ("observing", {"toa_error": {"uniform": [1 * u.kpc, 2 * u.kpc]}}, "observing.toa_error", "does not convert"),
        ("gwb", {"amplitude": 1e-15 * u.s}, "gwb.amplitude", "dimensionless"),
        ("observing", {"span": [1, 2] * u.yr}, "observing.span", "single quantity"),
    ],
)
def test_wrong_dimension_is_an_input_error_naming_the_key(section, value, where, words):
    raw = copy.deepcopy(WITH_NUMBERS)
    raw[section] = {**raw[section], **value}
    with pytest.raises(InputError) as caught:
        ptares.simulate(raw)
    assert where in caught.value.where and words in caught.value.message


def test_angles_as_quantities():
    raw = copy.deepcopy(WITH_NUMBERS)
    raw["array"]["pulsars"][0] = {"name": "Aa", "ra": 1.2 * u.rad, "dec": -1200 * u.arcmin}
    config = ptares.config_from(raw)
    assert config.array.pulsars[0].ra == pytest.approx(np.degrees(1.2), rel=1e-15)
    assert config.array.pulsars[0].dec == pytest.approx(-20.0, rel=1e-15)
    raw["array"]["pulsars"][0]["ra"] = 3 * u.s
    with pytest.raises(InputError, match="angle") as caught:
        ptares.config_from(raw)
    assert "array.pulsars[0] (Aa).ra" in caught.value.where


def test_config_file_with_overrides():
    data = ptares.simulate(ROOT / "configs" / "demo.toml", seed=3, gwb={"amplitude": 0.0})
    assert data.seed == 3 and data.signals["gwb"]["amplitude"] == 0.0
    assert_summary(repr(data), "25 pulsars", "seed 3", "span 15.00 yr", "background A = 0")


def test_bad_settings_and_sources_name_the_key(tmp_path):
    data = ptares.simulate(WITH_NUMBERS)
    with pytest.raises(InputError) as caught:
        ptares.fit(data, max_steps=0)
    assert caught.value.where == "fit.max_steps"
    with pytest.raises(InputError) as caught:
        ptares.correlate(data, bogus=1)
    assert caught.value.where == "correlate.bogus" and caught.value.message == "unknown key"
    with pytest.raises(InputError, match="settings: correlate.bins"):
        ptares.correlate(data, settings={"correlate": {"bins": 1}})
    with pytest.raises(InputError, match="expected a Dataset"):
        ptares.correlate(42)
    with pytest.raises(InputError, match="file not found"):
        ptares.correlate(tmp_path / "missing.h5")
    # outputs are kept unless overwrite=True, and the message says so in Python's words
    ptares.simulate(WITH_NUMBERS, out=tmp_path / "sim", figures=False)
    with pytest.raises(InputError, match="overwrite=True"):
        ptares.simulate(WITH_NUMBERS, out=tmp_path / "sim", figures=False)
    assert ptares.load_dataset(tmp_path / "sim" / "dataset.h5").seed == 21


def test_fit_of_a_config_without_out_keeps_the_chain_in_memory():
    raw = copy.deepcopy(WITH_NUMBERS)
    raw["fit"] = {"red": "injected", "fixed": {COMMON_INDEX: 13 / 3}, "max_steps": 100}
    fitted = ptares.fit(raw, seed=1)
    assert fitted.chains is None and fitted.out is None
    assert fitted.chain().shape == (100, 16, 1) and fitted.steps == 100
    assert "chains in" not in repr(fitted)
    with pytest.raises(InputError, match="not a free parameter"):
        fitted.samples("nonsense")


def test_command_line_reports_an_interrupted_fit_or_sweep(tmp_path, monkeypatch, capsys):
    """Ctrl-C in the sampler or the campaign: the API raises Interrupted naming what is kept; the CLI exits 130."""
    from ptares.campaign import sweep as sweep_module
    from ptares.cli import main
    from ptares.inference import samplers

    def stop(*args, **kwargs):
        raise KeyboardInterrupt

    dataset = ptares.write_dataset(ptares.simulate(WITH_NUMBERS), tmp_path / "d.h5")
    monkeypatch.setattr(samplers, "run_sampler", stop)
    with pytest.raises(ptares.Interrupted) as caught:
        ptares.fit(dataset, tmp_path / "o")
    assert caught.value.kept == tmp_path / "o" / "chains.h5"
    assert main(["fit", str(dataset), "--out", str(tmp_path / "o")]) == 130
    assert f"the chains so far are in {tmp_path / 'o' / 'chains.h5'}" in capsys.readouterr().err

    monkeypatch.setattr(sweep_module, "run_sweep", stop)
    config = tmp_path / "s.toml"
    config.write_text("[array]\nrandom = {count = 3}\n[sweep]\nrealisations = 1\n")
    assert main(["sweep", str(config), "--out", str(tmp_path / "s")]) == 130
    assert f"finished tasks are kept in {tmp_path / 's' / 'tasks'}" in capsys.readouterr().err
    # on the command line, messages name options as flags
    assert main(["simulate", str(config), "--out", str(tmp_path / "sim"), "--no-figures"]) == 0
    assert main(["simulate", str(config), "--out", str(tmp_path / "sim"), "--no-figures"]) == 2
    assert "pass --overwrite to replace them" in capsys.readouterr().err


def test_dex_quantities_numpy_counts_and_angles_in_fit_values():
    """Quantities reach every keyed value: dex scatters (astropy's dex unit), numpy integers for counts,
    angle Quantities for a binary's fixed angles (kept in radians; astropy's conversion)."""
    import numpy as np

    from ptares.inputs.config import FitSection, parse_config

    config = ptares.config_from({"array": {"random": {"count": np.int64(3)}},
                                 "observing": {"span": 3 * u.yr, "toa_error_scatter": 0.2 * u.dex},
                                 "gwb": {"amplitude": 1e-15, "harmonics": np.int32(5), "source": "binaries",
                                         "loudness_spread": 0.3 * u.dex}})
    assert (config.array.random.count, config.gwb.harmonics) == (3, 5)
    assert (config.observing.toa_error_scatter, config.gwb.loudness_spread) == (0.2, 0.3)
    assert parse_config('[array]\nrandom = {count = 3}\n[observing]\ntoa_error_scatter = "0.2 dex"\n').observing.toa_error_scatter == 0.2
    section = FitSection(binary_values={"orbital_phase": 90 * u.deg, "polarization_angle": 0.5, "lg_strain": -14})
    assert section.binary_values["orbital_phase"] == pytest.approx(np.pi / 2, rel=1e-15)
    with pytest.raises(ValueError, match="does not convert to rad"):
        FitSection(binary_values={"orbital_phase": 3 * u.s})


def test_describe_export_and_import_from_python(tmp_path):
    """``describe`` summarises without simulating; ``export_tables`` then ``import_tables`` give the same
    pulsars back (the round trip the CLI's export and import make)."""
    config = small_config(array={"random": {"count": 3}}, observing={"start": 53000.0, "span": 3.0, "cadence": 20.0})
    text = ptares.describe(config)
    assert "pulsars    3 (random isotropic)" in text and "background A = 2e-15" in text
    data = ptares.simulate(config)
    written = ptares.export_tables(data, tmp_path / "tables")
    assert sorted(p.name for p in written) == ["import.toml", "pulsars.csv", "signals.json", "toas.csv"]
    again = ptares.import_tables(tmp_path / "tables" / "import.toml", tmp_path / "back")
    assert (tmp_path / "back" / "dataset.h5").is_file()
    assert_same_pulsars(data, again)
    with pytest.raises(InputError, match="already holds"):
        ptares.export_tables(data, tmp_path / "tables")

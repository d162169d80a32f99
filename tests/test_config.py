"""Config parsing: units, defaults, overrides, and one clear error per bad input."""

import numpy as np
import pytest
from conftest import SMALL_TOML

from ptares.errors import InputError
from ptares.inputs.config import Draw, load_config, parse_config
from ptares.simulation.array import build_array


def test_small_config_parses_with_units(small_toml):
    config = load_config(small_toml)
    assert config.observing.span == pytest.approx(5.0, rel=1e-6, abs=0)
    assert config.observing.toa_error == pytest.approx(0.3, rel=1e-6, abs=0)  # microseconds
    a, b, c = config.array.pulsars
    assert a.ra == pytest.approx(15.0, rel=1e-6, abs=0) and a.dec == pytest.approx(10.0, rel=1e-6, abs=0)
    assert b.red.amplitude == 1e-14
    assert c.toa_error == pytest.approx(0.9, rel=1e-6, abs=0)
    assert config.source_text == SMALL_TOML
    assert config.gwb.spectral_index == pytest.approx(13 / 3, rel=1e-6, abs=0)


@pytest.mark.parametrize(
    "text, unit, expected",
    [
        ('span = "15 yr"', "span", 15.0),
        ('span = "5478.75 d"', "span", 15.0),
        ("span = 15", "span", 15.0),
        ('cadence = "2 week"', "cadence", 14.0),
        ('toa_error = "200 ns"', "toa_error", 0.2),
        ('toa_error = "1e-6 s"', "toa_error", 1.0),
    ],
)
def test_quantities_convert_to_default_units(text, unit, expected):
    """Reference: astropy.units conversions (Julian year, 7-day week)."""
    config = parse_config(f"[array]\nrandom = {{count = 2}}\n[observing]\n{text}\n")
    assert getattr(config.observing, unit) == pytest.approx(expected, rel=1e-6, abs=0)


def test_drawn_values_and_per_pulsar_overrides():
    text = """
[array]
pulsars = [{name = "x", ra = 0, dec = 0, white = {scale = 2.0}, red = {spectral_index = 3.0}},
           {name = "y", ra = 1, dec = 1}]
[noise.white]
quadrature = "100 ns"
[noise.red]
amplitude = {log_uniform = [1e-16, 1e-14]}
spectral_index = {uniform = [2, 6]}
"""
    config = parse_config(text)
    assert isinstance(config.noise.red.amplitude, Draw)
    x, y = build_array(config, 3)
    assert x.white_scale == 2.0 and y.white_scale == 1.0
    assert x.white_quadrature == pytest.approx(1e-7, rel=1e-6, abs=0)
    assert x.red_spectral_index == 3.0 and 2 <= y.red_spectral_index <= 6
    assert 1e-16 <= x.red_amplitude <= 1e-14 and x.red_amplitude != y.red_amplitude
    # the same seed draws the same values
    assert build_array(config, 3) == [x, y]


def test_sexagesimal_and_degree_positions_agree():
    """Reference: 01h00m00s = 15 degrees; -30:30:00 = -30.5 degrees (sexagesimal arithmetic)."""
    text = '[array]\npulsars = [{name = "a", ra = "01:00:00", dec = "-30:30:00"}, {name = "b", ra = "1h0m0s", dec = -30.5}]'
    a, b = parse_config(text).array.pulsars
    assert a.ra == pytest.approx(15.0, rel=1e-6, abs=0) and b.ra == pytest.approx(15.0, rel=1e-6, abs=0)
    assert a.dec == pytest.approx(-30.5, rel=1e-6, abs=0) and b.dec == pytest.approx(-30.5, rel=1e-6, abs=0)


BASE = SMALL_TOML


@pytest.mark.parametrize(
    "old, new, where, words",
    [
        ("[gwb]", "[gwb]\ncolour = 3", "gwb.colour", "unknown key"),
        ("[run]", "[run]\nspeed = 1", "run.speed", "unknown key"),
        ("seed = 5", 'seed = "five"', "run.seed", "integer"),
        ("harmonics = 8", "harmonics = 2.5", "gwb.harmonics", "integer"),
        ("amplitude = 3e-15", "amplitude = -3e-15", "gwb.amplitude", "non-negative"),
        ("amplitude = 3e-15", "amplitude = nan", "gwb.amplitude", "finite"),
        ("amplitude = 1e-14", "amplitude = -1e-14", "array.pulsars[1] (Bb).red.amplitude", "non-negative"),
        ('dec = "10:00:00"', "dec = 91.0", "array.pulsars[0] (Aa).dec", "outside [-90, 90]"),
        ('dec = "10:00:00"', 'dec = "-95:00:00"', "array.pulsars[0] (Aa).dec", "outside [-90, 90]"),
        ('span = "5 yr"', 'span = "20 d"', "observing.span", "not longer than the cadence"),
        ('start = 54000', 'start = 54000, span = "10 d"', "array.pulsars[2] (Cc).span", "not longer than the cadence"),
        ('toa_error = "300 ns"', 'toa_error = "300 kg"', "observing.toa_error", "does not convert"),
        ('span = "5 yr"', 'span = "five years"', "observing.span", "cannot read"),
        ('distance = "1 kpc"', 'distance = "0 kpc"', "array.pulsars[0] (Aa).distance", "positive"),
        ("harmonics = 8", 'harmonics = 8\ncorrelation = "quadrupole"', "gwb.correlation", "hellings-downs"),
        ('[observing]', '[observing]\ngaps = [[54000, 53000]]', "observing.gaps", "start < end"),
        ('{ name = "Bb"', '{ name = "Aa"', "array", "repeat"),
        ("[gwb]", "[[binary]]\nchirp_mass = 1e9\n[gwb]", "binary[0].ra", "required key is missing"),
        ('name = "Aa"', 'name = "."', "array.pulsars[0] (.).name", "letters, digits"),
        ('name = "Aa"', 'name = "a/b"', "array.pulsars[0] (a/b).name", "letters, digits"),
        ('name = "Aa"', 'name = "A\\u0000b"', "array.pulsars[0]", "letters, digits"),
        ("seed = 5", "seed = 99999999999999999999", "run.seed", ""),
        ("seed = 5", "seed = 5.0", "run.seed", "integer"),
        ("harmonics = 8", "harmonics = 100000000", "gwb.harmonics", "less than or equal"),
        ("amplitude = 3e-15", "amplitude = 1e300", "gwb.amplitude", "at most"),
        ("harmonics = 8", "harmonics = 8\nspectral_index = 1000", "gwb.spectral_index", "at most"),
        ('toa_error = "300 ns"', 'toa_error = "300 ns"\ntoa_error_scatter = 400', "observing.toa_error_scatter", "at most"),
        ('cadence = "30 d"', "cadence = 1e-9", "observing.cadence", "more than ptares handles"),
        ('cadence_jitter = "2 d"', 'cadence_jitter = "40 d"', "observing.cadence_jitter", "larger than the cadence"),
        ("start = 53000", "start = 1e300", "observing.start", "at most"),
        ('start = 54000', 'start = 54000, gaps = [[53000, 60000]]', "array.pulsars[2] (Cc).gaps", "leaves 0 TOAs"),
        ('ra = "01:00:00"', 'ra = "24:00:00"', "array.pulsars[0] (Aa).ra", "'24:00:00'"),
        ('ra = "01:00:00"', 'ra = "01:60:00"', "array.pulsars[0] (Aa).ra", "cannot read"),
        ("harmonics = 8", 'harmonics = 8\nsource = "binaries"\ncorrelation = "monopole"', "gwb", "hellings-downs"),
        ('cadence = "30 d"', 'cadence = "-30 d"', "observing.cadence", "positive"),
    ],
)
def test_bad_input_names_the_field(old, new, where, words):
    assert old in BASE
    with pytest.raises(InputError) as caught:
        parse_config(BASE.replace(old, new, 1), where="cfg.toml")
    line = caught.value.line()
    assert "\n" not in line
    assert line.startswith(f"cfg.toml: {where}"), line
    assert words in line


def test_empty_array_is_an_error():
    with pytest.raises(InputError, match="array: the array has no pulsars"):
        parse_config("[array]\npulsars = []\n")


def test_random_array_count_and_prefix_are_checked():
    with pytest.raises(InputError, match="array.random.prefix: name 'a/b'"):
        parse_config('[array]\nrandom = {count = 3, prefix = "a/b"}\n')
    with pytest.raises(InputError, match="array.random.count"):
        parse_config("[array]\nrandom = {count = 1000000000}\n")
    with pytest.raises(InputError, match="array.random.count"):
        parse_config('[array]\nrandom = {count = "5"}\n')


def test_quoted_bare_number_is_degrees_for_right_ascension():
    """Only sexagesimal strings are hours: "15" means 15 degrees, like 15; "01 00 00" means 15 degrees too."""
    entries = '[{name = "a", ra = "15", dec = 0}, {name = "b", ra = "01 00 00", dec = "-10 30 00"}]'
    a, b = parse_config(f"[array]\npulsars = {entries}\n").array.pulsars
    assert a.ra == pytest.approx(15.0, rel=1e-6, abs=0) and b.ra == pytest.approx(15.0, rel=1e-6, abs=0)
    assert b.dec == pytest.approx(-10.5, rel=1e-6, abs=0)


def test_array_needs_exactly_one_kind():
    with pytest.raises(InputError, match="exactly one of 'pulsars', 'random' or 'table'"):
        parse_config("[array]\n")
    with pytest.raises(InputError, match="required key is missing"):
        parse_config("[run]\nseed = 1\n")


def test_invalid_toml_names_the_file():
    with pytest.raises(InputError, match="^x.toml: not valid TOML"):
        parse_config("[array\n", where="x.toml")


def test_missing_and_unreadable_files(tmp_path):
    with pytest.raises(InputError, match="file not found"):
        load_config(tmp_path / "absent.toml")
    with pytest.raises(InputError, match="is a directory, not a file"):
        load_config(tmp_path)
    binary = tmp_path / "binary.toml"
    binary.write_bytes(b"\xff\xfe\x00garbage")
    with pytest.raises(InputError, match="not UTF-8 text"):
        load_config(binary)


def test_config_is_immutable(small_toml):
    from pydantic import ValidationError

    config = load_config(small_toml)
    with pytest.raises(ValidationError, match="frozen"):
        config.observing.span = 3.0


def test_random_array_is_isotropic():
    """An isotropic array has uniform sin(dec) and uniform ra (mean of unit vectors ~ 0)."""
    config = parse_config("[array]\nrandom = {count = 4000}\n")
    pulsars = build_array(config, 9)
    vectors = np.array([p.position for p in pulsars])
    np.testing.assert_array_less(np.abs(vectors.mean(axis=0)), 4 / np.sqrt(3 * 4000))
    assert np.mean(vectors[:, 2] ** 2) == pytest.approx(1 / 3, abs=4 * np.sqrt(4 / 45 / 4000))


@pytest.mark.parametrize("name", ["demo.toml", "random-array.toml", "binaries.toml", "multiband.toml", "waves.toml",
                                  "memory.toml"])
def test_shipped_configs_are_valid(name):
    from pathlib import Path

    config = load_config(Path(__file__).parent.parent / "configs" / name)
    assert config.run.seed is not None


@pytest.mark.parametrize(
    "table, where, replacement",
    [
        ("[gwb]\namplitude = 1e-15\ncomponents = 3", "gwb.components", "'gwb.harmonics'"),
        ("[gwb]\namplitude = 1e-15\ngamma = 3", "gwb.gamma", "'gwb.spectral_index'"),
        ("[noise.red]\namplitude = 1e-15\ncomponents = 3", "noise.red.components", "'noise.red.harmonics'"),
        ("[fit]\nred_components = 3", "fit.red_components", "'fit.red_harmonics'"),
        ("[fit]\ncw = true", "fit.cw", "'fit.binary'"),
        ("[[cw]]\nstrain = 1e-14", "cw", "'binary'"),
        ("[correlate.noise_values]\nred_gamma = 3", "correlate.noise_values.red_gamma",
         "'correlate.noise_values.red_spectral_index'"),
        ("[correlate.noise_values.pulsars.RP001]\nred_gamma = 3", "correlate.noise_values.pulsars.RP001.red_gamma",
         "'correlate.noise_values.pulsars.RP001.red_spectral_index'"),
        ("[fit]\ncw_free = []", "fit.cw_free", "'fit.binary_free'"),
        ("[fit]\ncw_values = {}", "fit.cw_values", "'fit.binary_values'"),
        ("[fit]\ncw_pulsar_term = true", "fit.cw_pulsar_term", "'fit.binary_pulsar_term'"),
        ('[[binary]]\nstrain = 1e-14\nfrequency = 10\nra = 1\ndec = 1\nevolve = false', "binary[0].evolve", "'binary[0].frequency_evolution'"),
    ],
)
def test_renamed_keys_are_refused_with_their_replacement(table, where, replacement):
    """A key renamed before the first release is an unknown key whose message names the new key."""
    with pytest.raises(InputError) as caught:
        parse_config('[array]\nrandom = {count = 3}\n' + table)
    line = str(caught.value)
    assert f"{where}: unknown key;" in line and f"is now {replacement}" in line and "\n" not in line


@pytest.mark.parametrize("table, where", [
    ("[observing]\ngamma = 3", "observing.gamma"),
    ("[noise.white]\ncomponents = 3", "noise.white.components"),
    ("[correlate]\ncw = true", "correlate.cw"),
])
def test_rename_hint_only_where_the_new_key_exists(table, where):
    """An old key in a table that never had it gets the plain unknown-key error, not a wrong hint."""
    with pytest.raises(InputError) as caught:
        parse_config('[array]\nrandom = {count = 3}\n' + table)
    assert str(caught.value) == f"<config>: {where}: unknown key"

"""Plain tables: import, export, injection into measured residuals, and every table fault."""

import dataclasses
import warnings

import numpy as np
import pytest
from conftest import assert_same_pulsars, small_config

from ptares.cli import main
from ptares.dataset import load_dataset, write_dataset
from ptares.errors import InputError, PhysicsWarning
from ptares.inputs.config import load_config
from ptares.simulation.simulate import import_tables, simulate

CATALOGUE = "name,ra,dec,distance,distance_error\nKite,04:37:15.9,-47:15:09,1.2,0.1\nLark,200.5,10.25,0.8,0.05\n"


def toa_rows(rng, names=("Kite", "Lark"), count=40):
    lines = []
    for name in names:
        mjd = np.sort(rng.uniform(53000, 56000, count))
        for m in mjd:
            lines.append(f"{name},{float(m)!r},{float(rng.uniform(0.2, 1.0))!r},{float(rng.normal(0, 0.5))!r}")
    return lines


def write_tables(tmp_path, toas=None, catalogue=CATALOGUE, mode="schedule", extra=""):
    rng = np.random.default_rng(1)
    (tmp_path / "toas.csv").write_text(toas if toas is not None else "pulsar,mjd,error_us,residual_us\n" + "\n".join(toa_rows(rng)) + "\n")
    (tmp_path / "pulsars.csv").write_text(catalogue)
    config = tmp_path / "c.toml"
    config.write_text(f'[run]\nseed = 3\n[array]\ntable = "toas.csv"\ncatalogue = "pulsars.csv"\nmode = "{mode}"\n'
                      f"[gwb]\namplitude = 5e-15\nharmonics = 8\n{extra}")
    return config


def test_export_then_import_reproduces_the_dataset(tmp_path):
    data = simulate(small_config(noise={"red": {"amplitude": 2e-15}}, observing={"start": 53000, "span": 6.0,
                                 "cadence": 20.0, "cadence_jitter": 4.0, "toa_error": 0.5, "toa_error_scatter": 0.2}))
    dataset = write_dataset(data, tmp_path / "d.h5")
    assert main(["export", str(dataset), "--out", str(tmp_path / "tables")]) == 0
    assert main(["import", str(tmp_path / "tables" / "import.toml"), "--out", str(tmp_path / "back")]) == 0
    again = load_dataset(tmp_path / "back" / "dataset.h5")
    assert again.names == data.names
    assert (again.start_mjd, again.span) == (data.start_mjd, data.span)
    assert again.signals == data.signals  # restored from signals.json: analyses see the same truth
    assert_same_pulsars(data, again)
    for p, q in zip(data.pulsars, again.pulsars):
        assert {k: p.noise[k] for k in q.noise} == q.noise


def test_schedule_mode_takes_epochs_and_errors(tmp_path):
    config = load_config(write_tables(tmp_path))
    with pytest.warns(PhysicsWarning, match=r"toas.csv: ignoring column\(s\) residual_us \(only epochs and errors are taken\)"):
        data = simulate(config)
    kite = data.pulsar("Kite")
    table = np.loadtxt(tmp_path / "toas.csv", delimiter=",", skiprows=1, usecols=(1, 2), max_rows=40)
    np.testing.assert_array_equal(kite.mjd, table[:, 0])
    np.testing.assert_allclose(kite.errors, table[:, 1] * 1e-6, rtol=1e-15)
    assert kite.ra == pytest.approx(np.radians(69.31625), rel=1e-12, abs=0)  # 04:37:15.9 = 69.31625 degrees
    assert set(kite.injected) == {"white", "gwb"} and kite.measured is None


def test_inject_mode_keeps_the_measured_residuals(tmp_path):
    """The measured part is left exactly as in the table; the injected background passes the timing-model
    fit and is added; no simulated white noise is added to real residuals."""
    config = load_config(write_tables(tmp_path, mode="inject"))
    data = simulate(config)
    table = np.loadtxt(tmp_path / "toas.csv", delimiter=",", skiprows=1, usecols=(3,))
    for index, p in enumerate(data.pulsars):
        measured = table[index * 40 : (index + 1) * 40] * 1e-6
        np.testing.assert_array_equal(p.measured, measured)
        assert set(p.injected) == {"gwb"}
        added = p.residuals - p.measured
        # what was added is the background with a quadratic (the timing model) removed
        quadratic = np.polynomial.polynomial.polyfit(p.mjd - p.mjd.mean(), p.injected["gwb"] - added, 2)
        fitted = np.polynomial.polynomial.polyval(p.mjd - p.mjd.mean(), quadratic)
        np.testing.assert_allclose(p.injected["gwb"] - added, fitted, atol=1e-9 * np.abs(p.injected["gwb"]).max())


HEADER = "pulsar,mjd,error_us,residual_us\n"
GOOD = ["Kite,53000.0,1.0,0.1", "Kite,53010.0,1.0,0.2", "Kite,53020.0,1.0,0.3", "Kite,53030.0,1.0,0.1",
        "Kite,53040.0,1.0,0.0", "Lark,53000.0,1.0,0.1", "Lark,53015.0,1.0,0.2", "Lark,53030.0,1.0,0.3",
        "Lark,53045.0,1.0,0.1", "Lark,53060.0,1.0,0.0"]


def rows_with(index, line):
    rows = list(GOOD)
    rows[index] = line
    return HEADER + "\n".join(rows) + "\n"


@pytest.mark.parametrize(
    "toas, catalogue, words",
    [
        ("pulsar,error_us\nKite,1.0\n", CATALOGUE, "toas.csv: has no mjd column"),
        ("mjd,error_us\n53000,1.0\n", CATALOGUE, "toas.csv: has no pulsar column"),
        ("pulsar,mjd\nKite,53000\n", CATALOGUE, "toas.csv: has no error column"),
        (rows_with(2, "Robin,53020.0,1.0,0.3"), CATALOGUE, "toas.csv: row 4, column pulsar: 'Robin' is not in the catalogue"),
        (HEADER + "\n".join(GOOD[:5]) + "\n", CATALOGUE, "pulsars.csv: pulsar 'Lark' has no TOAs"),
        (rows_with(3, "Kite,fifty,1.0,0.1"), CATALOGUE, "toas.csv: row 5, column mjd: 'fifty' is not a number"),
        (rows_with(3, "Kite,53030.0,nan,0.1"), CATALOGUE, "toas.csv: row 5, column error_us: 'nan' is not finite"),
        (rows_with(3, "Kite,53030.0,1.0,"), CATALOGUE, "toas.csv: row 5, column residual_us: '' is not a number"),
        (rows_with(1, "Kite,53010.0,0.0,0.2"), CATALOGUE, "toas.csv: row 3, column error_us: TOA errors must be positive"),
        (rows_with(1, "Kite,53010.0,-1.0,0.2"), CATALOGUE, "must be positive"),
        (rows_with(1, "Kite,53000.0,1.0,0.2"), CATALOGUE, "toas.csv: row 3, column mjd: duplicate TOA of Kite"),
        (HEADER + "\n".join(GOOD[:3] + GOOD[5:]) + "\n", CATALOGUE, "pulsar 'Kite' has 3 TOAs, not more than the 3 timing-model"),
        (HEADER + "\n".join(GOOD) + "\n", "name,ra,dec\nKite,1,2\n", "pulsars.csv: has no distance column"),
        (HEADER + "\n".join(GOOD) + "\n", "name,ra,distance\nKite,1,2\n", "needs ra and dec"),
        (HEADER + "\n".join(GOOD) + "\n", CATALOGUE.replace("10.25", "95"), "pulsars.csv: row 3, column dec: declination '95' is outside"),
        (HEADER + "\n".join(GOOD) + "\n", CATALOGUE.replace("Lark,", "Kite,"), "row 3, column name: 'Kite' appears twice"),
    ],
)
def test_table_faults_are_one_line_and_write_nothing(tmp_path, capsys, toas, catalogue, words):
    config = write_tables(tmp_path, toas=toas, catalogue=catalogue, mode="inject")
    for command in (["simulate", str(config), "--out", str(tmp_path / "o")], ["import", str(config), "--out", str(tmp_path / "o")]):
        assert main(command) == 2
        err = capsys.readouterr().err
        assert err.count("\n") == 1 and words in err, err
    assert not (tmp_path / "o").exists()


def test_unsorted_times_are_sorted_with_a_note(tmp_path):
    rows = list(GOOD)
    rows[1], rows[3] = rows[3], rows[1]
    config = load_config(write_tables(tmp_path, toas=HEADER + "\n".join(rows) + "\n"))
    with pytest.warns(PhysicsWarning, match="not in time order; sorted"):
        data = import_tables(config)
    assert np.all(np.diff(data.pulsar("Kite").mjd) > 0)
    np.testing.assert_allclose(data.pulsar("Kite").residuals, np.array([0.1, 0.2, 0.3, 0.1, 0.0]) * 1e-6)


def test_missing_files_are_named(tmp_path):
    config = write_tables(tmp_path)
    (tmp_path / "pulsars.csv").unlink()
    with pytest.raises(InputError, match="pulsars.csv: file not found"):
        simulate(load_config(config))


@pytest.mark.statistical
def test_background_on_a_gappy_uneven_table_schedule_has_the_expected_variance(tmp_path):
    """Epochs in clusters with a three-year gap: over 300 realisations the injected background's mean
    square equals sum_k S(f_k)/T (sin^2 + cos^2 = 1 at every epoch), within 4.5 standard errors from the
    exact Gaussian quadratic-form variance, as in test_statistics."""
    rng = np.random.default_rng(5)
    clusters = np.concatenate([c + rng.uniform(0, 3, 6) for c in rng.uniform(53000, 54200, 25)])
    late = np.concatenate([c + rng.uniform(0, 3, 6) for c in rng.uniform(55300, 56650, 25)])
    mjd = np.sort(np.concatenate([clusters, late]))
    lines = [f"Kite,{float(m)!r},{float(rng.uniform(0.1, 1))!r}" for m in mjd]
    lines += [f"Lark,{float(m)!r},0.5" for m in np.sort(rng.uniform(53000, 56650, 80))]
    config = load_config(write_tables(tmp_path, toas="pulsar,mjd,error_us\n" + "\n".join(lines) + "\n",
                                      extra='correlation = "uncorrelated"\n'))
    count, harmonics, amplitude = 300, 8, 5e-15
    runs = [simulate(config, seed=s) for s in range(count)]
    span = runs[0].span
    year = 365.25 * 86400.0
    f = np.arange(1, harmonics + 1) / span
    variance = np.concatenate([amplitude**2 / (12 * np.pi**2) * year**3 * (f * year) ** (-13 / 3) / span] * 2)
    t = (runs[0].pulsar("Kite").mjd - runs[0].start_mjd) * 86400.0
    k = np.arange(1, harmonics + 1)
    basis = np.hstack([np.sin(2 * np.pi * np.outer(t, k) / span), np.cos(2 * np.pi * np.outer(t, k) / span)])
    gram = basis.T @ basis * variance[None, :]
    expected = np.trace(gram) / t.size  # = sum_k S(f_k)/T
    sd = np.sqrt(2 * np.trace(gram @ gram)) / t.size
    observed = np.mean([np.mean(run.pulsar("Kite").injected["gwb"] ** 2) for run in runs])
    assert abs(observed - expected) < 4.5 * sd / np.sqrt(count)


def test_analysis_commands_accept_an_imported_dataset(tmp_path, capsys):
    """`ptares correlate` and `ptares fit` run on a dataset imported from plain tables (no noise columns:
    the noise is given as values)."""
    config = write_tables(tmp_path, toas=None)
    assert main(["import", str(config), "--out", str(tmp_path / "i")]) == 0
    dataset = str(tmp_path / "i" / "dataset.h5")
    settings = tmp_path / "s.toml"
    settings.write_text('[correlate]\nnoise = "values"\nscrambles = 0\nphase_shifts = 5\nfit_trials = 10\n'
                        "[fit]\nmax_steps = 60\nharmonics = 5\n")
    assert main(["correlate", dataset, "--out", str(tmp_path / "c"), "--config", str(settings)]) == 0
    assert main(["correlate", dataset, "--out", str(tmp_path / "c2")]) == 2
    assert "injected noise" in capsys.readouterr().err
    assert main(["fit", dataset, "--out", str(tmp_path / "f"), "--config", str(settings)]) == 0


def test_byte_order_mark_blank_lines_and_row_numbers(tmp_path, capsys):
    """A leading byte-order mark is accepted; row numbers count file lines, blank lines included."""
    lines = [HEADER.strip()] + GOOD[:3] + ["", ""] + ["Kite,53030.0,oops,0.1"] + GOOD[4:]
    config = write_tables(tmp_path, toas="\ufeff" + "\n".join(lines) + "\n", catalogue="\ufeff" + CATALOGUE)
    assert main(["import", str(config), "--out", str(tmp_path / "o")]) == 2
    assert "row 7, column error_us: 'oops' is not a number" in capsys.readouterr().err
    config = write_tables(tmp_path, toas="\ufeff" + HEADER + "\n".join(GOOD) + "\n", catalogue="\ufeff" + CATALOGUE)
    assert main(["import", str(config), "--out", str(tmp_path / "o")]) == 0


@pytest.mark.parametrize(
    "toas, catalogue, words",
    [
        ("pulsar,mjd,mjd,error_us\nKite,1,2,3\n", CATALOGUE, "row 1: column(s) mjd appear more than once"),
        (HEADER, CATALOGUE, "has a header but no TOAs"),
        (HEADER + "\n".join(GOOD) + "\n", CATALOGUE.replace("distance_error\n", "distance_error,white_scale\n")
         .replace("0.1\n", "0.1,-3\n"), "column white_scale"),
        (HEADER + "\n".join(GOOD) + "\n", CATALOGUE.replace(",0.05", ",-0.05"), "column distance_error: the distance error"),
    ],
)
def test_more_table_faults(tmp_path, capsys, toas, catalogue, words):
    config = write_tables(tmp_path, toas=toas, catalogue=catalogue, mode="inject")
    assert main(["import", str(config), "--out", str(tmp_path / "o")]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and words in err, err


def test_catalogue_noise_columns_apply_in_schedule_mode(tmp_path):
    catalogue = "name,ra,dec,distance,white_scale,red_amplitude,red_spectral_index\nKite,10,10,1,1.5,3e-15,4.0\nLark,20,20,1,,,\n"
    with pytest.warns(PhysicsWarning, match="residual_us"):
        data = simulate(load_config(write_tables(tmp_path, catalogue=catalogue)))
    assert data.pulsar("Kite").noise["white_scale"] == 1.5 and data.pulsar("Kite").noise["red_amplitude"] == 3e-15
    assert data.pulsar("Lark").noise["white_scale"] == 1.0 and data.pulsar("Lark").noise["red_amplitude"] == 0.0
    assert "red" in data.pulsar("Kite").injected


def test_files_with_earlier_names_are_refused_with_the_new_name(tmp_path, capsys):
    """A catalogue column, a signals.json key or a dataset attribute under a name used before 0.2 is
    refused in one line naming its replacement, never read with a default in its place."""
    import h5py

    catalogue = "name,ra,dec,distance,red_amplitude,red_gamma\nKite,10,10,1,3e-15,4.0\nLark,20,20,1,,\n"
    with pytest.raises(InputError, match="'red_gamma' is now 'red_spectral_index'"):
        simulate(load_config(write_tables(tmp_path, catalogue=catalogue)))

    data = simulate(small_config(noise={"red": {"amplitude": 2e-15}}))
    dataset = write_dataset(data, tmp_path / "d.h5")
    assert main(["export", str(dataset), "--out", str(tmp_path / "tables")]) == 0
    signals = tmp_path / "tables" / "signals.json"
    signals.write_text(signals.read_text().replace('"spectral_index"', '"gamma"'))
    assert main(["import", str(tmp_path / "tables" / "import.toml"), "--out", str(tmp_path / "back")]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "'gamma' is now 'spectral_index'" in err and not (tmp_path / "back").exists()

    with h5py.File(dataset, "a") as f:
        attrs = f["pulsars"][data.names[0]]["injected"].attrs
        attrs["red_gamma"] = attrs["red_spectral_index"]
        del attrs["red_spectral_index"]
    with pytest.raises(InputError, match=r"earlier ptares \('red_gamma' is now 'red_spectral_index'\); simulate or import it again"):
        load_dataset(dataset)


# ---------------------------------------------------------------- signals.json: every signal kind, and its faults

SHORT = {"start": 53000.0, "span": 3.0, "cadence": 30.0, "toa_error": 0.5}
#: One config per kind of injected signal; white noise is in every one.
SIGNAL_KINDS = {
    "red noise": {"gwb": None, "noise": {"red": {"amplitude": 2e-15, "harmonics": 6}}},
    "gaussian background": {"gwb": {"amplitude": 2e-15, "harmonics": 6, "correlation": "monopole"}},
    "background of binaries": {"gwb": {"amplitude": 2e-15, "harmonics": 4, "source": "binaries", "binaries": 12,
                                       "loudness_spread": 0.3}},
    "continuous waves": {"gwb": None, "binary": [
        {"name": "Hawk", "chirp_mass": 1e9, "strain": 1e-14, "frequency": 20.0, "ra": 30.0, "dec": 20.0,
         "inclination": 0.7, "polarization": 0.2, "phase": 1.1},
        {"name": "Owl", "strain": 2e-14, "frequency": 35.0, "ra": 130.0, "dec": -40.0,
         "frequency_evolution": False, "pulsar_term": False}]},
}


def assert_same_signals(expected: dict, actual: dict):
    """Every component and parameter of two datasets' ``signals`` equal bit for bit, with its type
    (arrays: same dtype and shape and the same bytes, which also holds for NaN)."""
    assert set(actual) == set(expected)
    for name, parameters in expected.items():
        assert set(actual[name]) == set(parameters), name
        for key, value in parameters.items():
            other = actual[name][key]
            if isinstance(value, np.ndarray):
                assert isinstance(other, np.ndarray), (name, key)
                assert (other.dtype, other.shape) == (value.dtype, value.shape), (name, key)
                assert other.tobytes() == value.tobytes(), (name, key)
            else:
                assert type(other) is type(value) and repr(other) == repr(value), (name, key)


@pytest.mark.parametrize("kind", SIGNAL_KINDS)
def test_export_then_import_keeps_every_signal(tmp_path, kind):
    """Through `ptares export` and `ptares import`, every recorded parameter of every injected signal
    (tables of binaries included) and every residual array come back bit for bit."""
    data = simulate(small_config(array={"random": {"count": 3}}, observing=SHORT, **SIGNAL_KINDS[kind]))
    assert main(["export", str(write_dataset(data, tmp_path / "d.h5")), "--out", str(tmp_path / "tables")]) == 0
    toml = tmp_path / "tables" / "import.toml"
    assert main(["import", str(toml), "--out", str(tmp_path / "back")]) == 0
    again = load_dataset(tmp_path / "back" / "dataset.h5")
    assert_same_signals(data.signals, again.signals)
    assert_same_signals(data.signals, import_tables(load_config(toml)).signals)  # the file itself, without HDF5
    assert_same_pulsars(data, again)
    for name, parameters in data.signals.items():
        for key, value in parameters.items():
            if isinstance(value, np.ndarray):
                assert np.array_equal(again.signals[name][key], value)
    if kind == "continuous waves":
        table = again.signals["binary"]["sources"]
        assert table["pulsar_term"].tolist() == [True, False] and table["frequency_evolution"].tolist() == [True, False]


def test_export_then_import_keeps_bands_systems_jitter_and_chromatic_noise(tmp_path):
    """Radio frequencies, observing systems, each system's white noise and jitter and the chromatic processes'
    parameters (catalogue columns such as white_jitter_s:Lo and dispersion_amplitude) come back exactly, so
    the re-imported dataset's fit model is the original's."""
    from ptares.inference.model import FitModel
    from ptares.inputs.config import FitSection

    systems = [{"name": "Lo", "frequencies": [600.0, 800.0], "white": {"scale": 1.2, "jitter": 0.3}},
               {"name": "Hi", "frequencies": [1500.0], "white": {"quadrature": 0.1}}]
    data = simulate(small_config(array={"random": {"count": 3}}, observing={**SHORT, "systems": systems},
                                 noise={"dispersion": {"amplitude": 1e-14, "harmonics": 5},
                                        "scattering": {"amplitude": 1e-15, "chromatic_index": 3.5, "harmonics": 4}}))
    assert main(["export", str(write_dataset(data, tmp_path / "d.h5")), "--out", str(tmp_path / "tables")]) == 0
    assert main(["import", str(tmp_path / "tables" / "import.toml"), "--out", str(tmp_path / "back")]) == 0
    again = load_dataset(tmp_path / "back" / "dataset.h5")
    assert_same_pulsars(data, again)
    assert_same_signals(data.signals, again.signals)
    section = FitSection(common="uncorrelated", jitter="free")
    first, second = FitModel(data, section), FitModel(again, section)
    assert first.names == second.names and first.values == second.values
    assert first.chromatic_modes == second.chromatic_modes == {"dispersion": "injected", "scattering": "injected"}


def test_an_imported_continuous_wave_can_be_fitted(tmp_path):
    """A re-imported dataset keeps its table of binaries, so a continuous-wave fit takes the fixed
    quantities (sky position, frequency) from it and evaluates its likelihood."""
    from ptares.inference.model import FitModel
    from ptares.inputs.config import FitSection

    data = simulate(small_config(array={"random": {"count": 3}}, observing=SHORT, **SIGNAL_KINDS["continuous waves"]))
    assert main(["export", str(write_dataset(data, tmp_path / "d.h5")), "--out", str(tmp_path / "tables")]) == 0
    assert main(["import", str(tmp_path / "tables" / "import.toml"), "--out", str(tmp_path / "back")]) == 0
    again = load_dataset(tmp_path / "back" / "dataset.h5")
    model = FitModel(again, FitSection(common="none", binary=True))
    source = data.signals["binary"]["sources"][0]
    assert model.values["binary_lg_frequency"] == np.log10(source["frequency"])
    assert model.values["binary_right_ascension"] == source["ra"]
    assert np.isfinite(model.log_likelihood([model.values[name] for name in model.names]))


def test_signals_file_keeps_every_type_and_non_finite_numbers(tmp_path):
    """Scalars, lists, arrays of every supported type and shape, and NaN and infinities (written as
    {"kind": "float", ...}, since JSON has none) survive signals.json and the dataset file."""
    from ptares.inputs.tables import read_signals, signals_text

    table = np.array([(b"a\xc3\xa9", -0.0, np.nan, 7, True)],
                     dtype=[("name", "S8"), ("x", ">f8"), ("y", "<f4"), ("n", "<u8"), ("flag", "?")])
    signals = {
        "white": {},
        "extra": {
            "whole": -(2**63), "flag": False, "text": "é", "tiny": 5e-324, "minus_zero": -0.0, "missing": float("nan"),
            "large": float("inf"), "grid": [[1, 2.5], [3, 4]], "words": ["a", "b"], "flags": [True], "none": [],
            "table": table, "matrix": np.arange(6, dtype="<i4").reshape(2, 3), "half": np.array([1.5, -np.inf], "f2"),
            "empty": np.zeros((0, 3)), "single": np.array(2.0), "texts": np.array([b"x", b""]),
        },
    }
    path = tmp_path / "signals.json"
    path.write_text(signals_text(signals))
    assert_same_signals(signals, read_signals(path))
    carrier = simulate(small_config(array={"random": {"count": 2}}, gwb={"amplitude": 0.0}))
    again = load_dataset(write_dataset(dataclasses.replace(carrier, signals=read_signals(path)), tmp_path / "d.h5"))
    assert again.signals["extra"]["table"].tobytes() == table.tobytes()
    assert again.signals["extra"]["half"].dtype == np.float16 and again.signals["extra"]["grid"] == [[1, 2.5], [3, 4]]


SIGNALS_CONFIG = 'mode = "schedule"\nsignals = "signals.json"\n'
TABLE_OF_ONE = ('{"kind": "array", "dtype": [["name", "|S64"], ["frequency", "<f8"], ["pulsar_term", "|b1"]], '
                '"shape": [1], "values": [["Hawk", %s, true]]}')


@pytest.mark.parametrize(
    "content, words",
    [
        (b'\xff{"gwb": {}}', "signals.json: not UTF-8 text"),
        (b'{"gwb": {"amplitude": 2e-15,}}', "signals.json: not valid JSON"),
        (b'{"gwb": {"harmonics": ' + b"1" * 5000 + b"}}", "signals.json: not valid JSON"),
        (b"[1, 2]", "signals.json: signals: expected an object of signal components"),
        (b'{"gwb": 3}', "signals.json: signals.gwb: expected an object of parameters"),
        (b'{"gwb": {"amplitude": null}}', "signals.gwb.amplitude: expected a number, a string or true/false, not null"),
        (b'{"gwb": {"amplitude": {"value": 1}}}', "signals.gwb.amplitude: an object here must be an array"),
        (b'{"gwb": {"amplitude": NaN}}', "signals.gwb.amplitude: not a finite double-precision number"),
        (b'{"gwb": {"amplitude": 1e400}}', "signals.gwb.amplitude: not a finite double-precision number"),
        (b'{"gwb": {"weights": [1, "a"]}}', "signals.gwb.weights: expected a list of numbers, of strings or of true/false"),
        (b'{"gwb": {"weights": [[1], [2, 3]]}}', "signals.gwb.weights: nested lists of unequal lengths"),
        (b'{"gwb": {"weights": {"kind": "array", "dtype": "<f8", "shape": [2], "values": ["a", "b"]}}}',
         "signals.gwb.weights.values[0]: expected a number"),
        (b'{"gwb": {"weights": {"kind": "array", "dtype": "<c16", "shape": [1], "values": [1]}}}',
         "signals.gwb.weights.dtype: \"<c16\" is not a supported type"),
        (b'{"gwb": {"weights": {"kind": "array", "dtype": "<f8", "shape": [2], "values": [1.0]}}}',
         "signals.gwb.weights.values: expected a list of 2 entries"),
        (b'{"gwb": {"weights": {"kind": "array", "dtype": "<f8", "values": [1.0]}}}', "missing shape"),
        (b'{"gwb": {"weights": {"kind": "array", "dtype": "<f8", "shape": [1000000000000], "values": []}}}',
         "signals.gwb.weights.shape: an array of shape [1000000000000] of 8-byte entries is larger than ptares holds"),
        (b'{"binary": {"sources": ' + (TABLE_OF_ONE % '"fast"').encode() + b"}}",
         "signals.binary.sources.values[0].frequency: expected a number"),
        (b'{"gwb": {"gamma": 4.3}}', "'gamma' is now 'spectral_index'"),
    ],
)
def test_bad_signals_files_are_one_line_and_write_nothing(tmp_path, capsys, content, words):
    config = write_tables(tmp_path)
    config.write_text(config.read_text().replace('mode = "schedule"\n', SIGNALS_CONFIG))
    (tmp_path / "signals.json").write_bytes(content)
    assert main(["import", str(config), "--out", str(tmp_path / "o")]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "signals.json: " in err and words in err and "Traceback" not in err, err
    assert not (tmp_path / "o").exists()


def test_a_good_hand_written_signals_file_is_read(tmp_path):
    config = write_tables(tmp_path)
    config.write_text(config.read_text().replace('mode = "schedule"\n', SIGNALS_CONFIG))
    (tmp_path / "signals.json").write_text('{"binary": {"count": 1, "sources": ' + TABLE_OF_ONE % "2e-08" + "}}")
    sources = import_tables(load_config(config)).signals["binary"]["sources"]
    assert sources.dtype.names == ("name", "frequency", "pulsar_term") and sources["name"][0] == b"Hawk"
    assert sources["frequency"][0] == 2e-08 and sources["pulsar_term"][0]


# ---------------------------------------------------------------- hardened reading: names, field counts, limits, separators

TAB_SEPARATED = HEADER.replace(",", "\t") + "\n".join(r.replace(",", "\t") for r in GOOD) + "\n"
SEMICOLON_SEPARATED = HEADER.replace(",", ";") + "\n".join(r.replace(",", ";") for r in GOOD) + "\n"
ALL_GOOD = HEADER + "\n".join(GOOD) + "\n"


@pytest.mark.parametrize(
    "toas, catalogue, limits, words",
    [
        pytest.param(ALL_GOOD, CATALOGUE.replace("Lark,", "=HYPERLINK(1),"), {},
                     "pulsars.csv: row 3, column name: '=HYPERLINK(1)' is not a pulsar name (1-64 letters", id="name-formula"),
        pytest.param(ALL_GOOD, CATALOGUE.replace("Lark,", "@Lark,"), {}, "row 3, column name: '@Lark' is not a pulsar name",
                     id="name-at"),
        pytest.param(ALL_GOOD, CATALOGUE.replace("Lark,", "../Lark,"), {}, "row 3, column name: '../Lark' is not a pulsar name",
                     id="name-path"),
        pytest.param(rows_with(2, "+Kite,53020.0,1.0,0.3"), CATALOGUE, {},
                     "toas.csv: row 4, column pulsar: '+Kite' is not a pulsar name", id="toa-name-plus"),
        pytest.param(rows_with(2, "Kite/x,53020.0,1.0,0.3"), CATALOGUE, {},
                     "toas.csv: row 4, column pulsar: 'Kite/x' is not a pulsar name", id="toa-name-slash"),
        pytest.param(rows_with(2, ",53020.0,1.0,0.3"), CATALOGUE, {}, "toas.csv: row 4, column pulsar: empty", id="toa-name-empty"),
        pytest.param(rows_with(2, "Kite,53020.0,1,5,0.3"), CATALOGUE, {},
                     "toas.csv: row 4: 5 fields, but the header (row 1) has 4 (a decimal comma", id="decimal-comma"),
        pytest.param(rows_with(2, "Kite,53020.0,1.0"), CATALOGUE, {}, "toas.csv: row 4: 3 fields, but the header (row 1) has 4",
                     id="too-few-fields"),
        pytest.param(ALL_GOOD, CATALOGUE.replace("0.8,0.05", "0,8,0.05"), {},
                     "pulsars.csv: row 3: 6 fields, but the header (row 1) has 5", id="catalogue-decimal-comma"),
        pytest.param(ALL_GOOD, CATALOGUE.replace(",0.8,0.05", ",0.8"), {},
                     "pulsars.csv: row 3: 4 fields, but the header (row 1) has 5", id="catalogue-too-few-fields"),
        pytest.param(ALL_GOOD, CATALOGUE, {"MAX_TOAS": 4},
                     "toas.csv: row 6: pulsar 'Kite' has more TOAs than ptares handles per pulsar (4)", id="toas-per-pulsar"),
        pytest.param(ALL_GOOD, CATALOGUE, {"MAX_TOTAL_TOAS": 8},
                     "toas.csv: row 10: more TOAs in all than ptares handles (8)", id="toas-in-all"),
        pytest.param(TAB_SEPARATED, CATALOGUE, {},
                     "toas.csv: looks tab-separated; ptares reads comma-separated tables (save as CSV)", id="tab-separated"),
        pytest.param(ALL_GOOD, CATALOGUE.replace(",", "\t"), {}, "pulsars.csv: looks tab-separated", id="tab-catalogue"),
        pytest.param(SEMICOLON_SEPARATED, CATALOGUE, {}, "toas.csv: looks semicolon-separated", id="semicolon-separated"),
        pytest.param(HEADER + "\n".join(GOOD[:1] + GOOD[2:4] + GOOD[1:2] + GOOD[4:9] + GOOD[8:9]) + "\n", CATALOGUE, {},
                     "toas.csv: row 11, column mjd: duplicate TOA of Lark", id="sorting-note-held-back"),
        pytest.param(HEADER.replace("\n", ",injected_a/b_s\n") + "\n".join(r + ",0.0" for r in GOOD) + "\n", CATALOGUE, {},
                     "toas.csv: row 1, column 'injected_a/b_s': the component name", id="component-name"),
    ],
)
def test_bad_tables_are_one_line_and_write_nothing(tmp_path, capsys, monkeypatch, toas, catalogue, limits, words):
    """Through `ptares simulate` and `ptares import`: exit status 2, one line naming the file and the
    fault, no traceback, no output folder."""
    for name, value in limits.items():
        monkeypatch.setattr(f"ptares.inputs.tables.{name}", value)
    config = write_tables(tmp_path, toas=toas, catalogue=catalogue, mode="inject")
    for command in ("simulate", "import"):
        assert main([command, str(config), "--out", str(tmp_path / "o")]) == 2
        err = capsys.readouterr().err
        assert err.count("\n") == 1 and words in err and "Traceback" not in err, err
        assert not (tmp_path / "o").exists()


def test_ignored_columns_are_named_in_a_note(tmp_path, capsys):
    """Columns ptares does not read are named, with why, once the tables have passed every check;
    the import succeeds.  Blank rows, also ",,," from spreadsheets, are skipped."""
    toas = (HEADER.replace("\n", ",frequency_mhz,system,comment\n") + "\n".join(r + ",1400,L-wide,ok" for r in GOOD)
            + "\n,,,,,,\n")
    catalogue = ("name,ra,dec,ra_rad,dec_rad,distance,distance_kpc,observer\n"
                 "Kite,10,10,0.1,0.2,1,1.5,x\nLark,20,20,0.3,0.4,1,0.5,y\n")
    config = write_tables(tmp_path, toas=toas, catalogue=catalogue)
    assert main(["import", str(config), "--out", str(tmp_path / "i")]) == 0
    catalogue_note = (f"ptares: warning: {tmp_path / 'pulsars.csv'}: ignoring column(s) ra, dec (ra_rad and dec_rad are used); "
                      "distance (distance_kpc is used); observer (not read by ptares)")
    table_note = f"ptares: warning: {tmp_path / 'toas.csv'}: ignoring column(s) comment (not read by ptares)"
    assert capsys.readouterr().err.splitlines() == [catalogue_note, table_note]
    kite = load_dataset(tmp_path / "i" / "dataset.h5").pulsar("Kite")
    assert (kite.ra, kite.dec, kite.distance, kite.mjd.size) == (0.1, 0.2, 1.5, 5)
    with pytest.warns(PhysicsWarning, match=r"toas.csv: ignoring column\(s\) residual_us \(only epochs and errors are taken\); "
                      r"comment \(not read by ptares\)$"):
        data = simulate(load_config(config))  # schedule mode: the residuals are not read either
    assert data.pulsar("Kite").measured is None


def test_injecting_into_exported_tables_names_the_columns_it_does_not_read(tmp_path):
    """Exported tables carry each injected component as a column; injecting into them (inject mode) keeps
    only the residuals, and the note says the component columns are for `ptares import` only."""
    data = simulate(small_config(observing={"start": 53000, "span": 4.0, "cadence": 30.0, "toa_error": 0.5}))
    assert main(["export", str(write_dataset(data, tmp_path / "d.h5")), "--out", str(tmp_path / "t")]) == 0
    config = tmp_path / "t" / "inject.toml"
    config.write_text('[run]\nseed = 3\n[array]\ntable = "toas.csv"\ncatalogue = "pulsars.csv"\nmode = "inject"\n'
                      "[gwb]\namplitude = 5e-15\nharmonics = 8\n")
    with pytest.warns(PhysicsWarning, match=r"toas.csv: ignoring column\(s\) injected_gwb_s, injected_white_s "
                                            r"\(read by ptares import only\)"):
        simulate(load_config(config))


# ---------------------------------------------------------------- radio frequencies and observing systems

BANDS_HEADER = "pulsar,mjd,error_us,residual_us,frequency_mhz,system\n"
#: Kite observed by system A at 1700 MHz and by system B at 800 and 1400 MHz at each of its epochs: sorted by
#: system, then frequency, A/1700 comes before B/800 (by frequency first it would come last).
BANDS = [f"Kite,{mjd},{1.0 + k / 10!r},{0.01 * (3 * e + k)!r},{frequency},{system}"
         for e, mjd in enumerate((53000.0, 53010.0, 53020.0, 53030.0))
         for k, (frequency, system) in enumerate((("1700.0", "A"), ("800.0", "B"), ("1400.0", "B")))]
BANDS += ["Lark,53000.0,1.0,0.1,1400.0,B", "Lark,53015.0,1.0,0.2,1400.0,B", "Lark,53030.0,1.0,0.3,1400.0,B",
          "Lark,53045.0,1.0,0.1,1400.0,B", "Lark,53060.0,1.0,0.0,1400.0,B"]


def bands_with(index, line):
    rows = list(BANDS)
    rows[index] = line
    return BANDS_HEADER + "\n".join(rows) + "\n"


def read_toas(tmp_path, toas, **options):
    from ptares.inputs.tables import read_tables

    (tmp_path / "toas.csv").write_text(toas)
    (tmp_path / "pulsars.csv").write_text(CATALOGUE)
    return read_tables(tmp_path / "toas.csv", tmp_path / "pulsars.csv", 3, need_residuals=True, **options)


def test_a_two_band_table_is_read_sorted_by_mjd_system_and_frequency(tmp_path):
    """Equal MJDs in several frequencies and systems are several TOAs, not duplicates; whatever the order
    of the rows, each pulsar's TOAs come back sorted by MJD, then system, then frequency, every column
    following its row."""
    expected = sorted((float(f[1]), f[5], float(f[4]), float(f[2]) * 1e-6, float(f[3]) * 1e-6)
                      for f in (line.split(",") for line in BANDS[:12]))
    assert [(e[1], e[2]) for e in expected[:3]] == [("A", 1700.0), ("B", 800.0), ("B", 1400.0)]
    shuffled = [BANDS[i] for i in np.random.default_rng(4).permutation(len(BANDS))]
    for rows in (BANDS, shuffled[::-1], shuffled):
        with warnings.catch_warnings(record=True) as caught:
            warnings.simplefilter("always")
            tables = read_toas(tmp_path, BANDS_HEADER + "\n".join(rows) + "\n")
        assert not [w for w in caught if "ignoring" in str(w.message)]
        assert tables.mjd["Kite"].tolist() == [e[0] for e in expected]
        assert tables.system["Kite"].tolist() == [e[1] for e in expected]
        assert tables.frequency_mhz["Kite"].tolist() == [e[2] for e in expected]
        assert tables.errors["Kite"].tolist() == [e[3] for e in expected]
        assert tables.residuals["Kite"].tolist() == [e[4] for e in expected]
        assert tables.frequency_mhz["Kite"].dtype == np.float64 and tables.system["Kite"].dtype.kind == "U"
        assert tables.system["Lark"].tolist() == ["B"] * 5 and tables.mjd["Lark"].tolist() == sorted(tables.mjd["Lark"])


def test_a_missing_frequency_or_system_column_counts_as_equal(tmp_path):
    """Without a frequency_mhz column, TOAs at one MJD in different systems are distinct and the
    frequencies are None; in one system they are duplicates (and without a system column likewise)."""
    one_per_system = [line for line in BANDS if ",1400.0,B" not in line or line.startswith("Lark")]
    no_frequency = "".join(line.rsplit(",", 2)[0] + "," + line.rsplit(",", 1)[1] + "\n" for line in one_per_system)
    tables = read_toas(tmp_path, "pulsar,mjd,error_us,residual_us,system\n" + no_frequency)
    assert tables.frequency_mhz == {"Kite": None, "Lark": None}
    assert tables.system["Kite"].tolist() == ["A", "B"] * 4 and tables.mjd["Kite"].tolist() == [53000.0] * 2 + [
        53010.0] * 2 + [53020.0] * 2 + [53030.0] * 2
    with pytest.raises(InputError, match=r"toas.csv: row 3, column mjd: duplicate TOA of Kite at MJD 53000.0, system B$"):
        read_toas(tmp_path, "pulsar,mjd,error_us,residual_us,system\n" + no_frequency.replace(",A\n", ",B\n"))
    no_system = "".join(line.rsplit(",", 1)[0] + "\n" for line in BANDS)
    with pytest.raises(InputError, match=r"toas.csv: row 3, column mjd: duplicate TOA of Kite at MJD 53000.0, 1700.0 MHz$"):
        read_toas(tmp_path, "pulsar,mjd,error_us,residual_us,frequency_mhz\n" + no_system.replace(",800.0\n", ",1700.0\n"))
    assert read_toas(tmp_path, "pulsar,mjd,error_us,residual_us,frequency_mhz\n" + no_system).system == {"Kite": None,
                                                                                                           "Lark": None}


@pytest.mark.parametrize(
    "toas, words",
    [
        pytest.param(bands_with(4, BANDS[3].replace(",0.03,", ",0.5,")), "toas.csv: row 6, column mjd: duplicate TOA of Kite at "
                     "MJD 53010.0, 1700.0 MHz, system A", id="duplicate"),
        pytest.param(bands_with(4, BANDS[4].replace("800.0", "0")), "toas.csv: row 6, column frequency_mhz: '0' is not positive",
                     id="frequency-zero"),
        pytest.param(bands_with(4, BANDS[4].replace("800.0", "-800")),
                     "toas.csv: row 6, column frequency_mhz: '-800' is not positive (a radio frequency in MHz)", id="frequency-negative"),
        pytest.param(bands_with(4, BANDS[4].replace("800.0", "L-band")),
                     "toas.csv: row 6, column frequency_mhz: 'L-band' is not a number", id="frequency-text"),
        pytest.param(bands_with(4, BANDS[4].replace("800.0", "inf")), "toas.csv: row 6, column frequency_mhz: 'inf' is not finite",
                     id="frequency-infinite"),
        pytest.param(bands_with(4, BANDS[4].replace("800.0", "")), "toas.csv: row 6, column frequency_mhz: '' is not a number",
                     id="frequency-empty"),
        pytest.param(bands_with(4, BANDS[4].replace(",B", ",=cmd")),
                     "toas.csv: row 6, column system: '=cmd' is not an observing-system name (1-64 letters", id="system-formula"),
        pytest.param(bands_with(4, BANDS[4].replace(",B", ",a/b")),
                     "toas.csv: row 6, column system: 'a/b' is not an observing-system name", id="system-slash"),
        pytest.param(bands_with(4, BANDS[4].replace(",B", ",")), "toas.csv: row 6, column system: empty", id="system-empty"),
    ],
)
def test_bad_frequencies_systems_and_duplicates_are_one_line(tmp_path, capsys, toas, words):
    config = write_tables(tmp_path, toas=toas, mode="inject")
    for command in ("simulate", "import"):
        assert main([command, str(config), "--out", str(tmp_path / "o")]) == 2
        err = capsys.readouterr().err
        assert err.count("\n") == 1 and words in err and "Traceback" not in err, err
        assert not (tmp_path / "o").exists()


def test_exported_frequencies_and_systems_come_back_bit_for_bit(tmp_path):
    """export_tables writes frequency_mhz and system when every pulsar has them, and read_tables returns
    them exactly; when one pulsar lacks a column, the column is left out for all."""
    from ptares.inputs.tables import export_tables, read_tables

    data = simulate(small_config(array={"random": {"count": 3}}, observing=SHORT))
    rng = np.random.default_rng(8)
    pulsars = []
    for p in data.pulsars:
        frequency = rng.uniform(300.0, 3000.0, p.mjd.size)
        frequency[:3] = (0.1 + 0.2, 5e-324, 1.7976931348623157e308)  # shortest repr, subnormal, largest double
        system = np.array([("UHF.1", "L-band+2", "S_3")[i % 3] for i in range(p.mjd.size)])
        pulsars.append(dataclasses.replace(p, frequency_mhz=frequency, system=system))
    dataset = dataclasses.replace(data, pulsars=pulsars)
    export_tables(dataset, tmp_path / "t")
    tables = read_tables(tmp_path / "t" / "toas.csv", tmp_path / "t" / "pulsars.csv", 0, need_residuals=True)
    for p in pulsars:
        assert tables.frequency_mhz[p.name].tobytes() == p.frequency_mhz.tobytes()
        assert tables.system[p.name].tolist() == p.system.tolist()
        assert tables.mjd[p.name].tobytes() == p.mjd.tobytes()

    pulsars[1] = dataclasses.replace(pulsars[1], frequency_mhz=None)
    export_tables(dataclasses.replace(data, pulsars=pulsars), tmp_path / "u")
    assert "frequency_mhz" not in (tmp_path / "u" / "toas.csv").read_text().splitlines()[0].split(",")
    tables = read_tables(tmp_path / "u" / "toas.csv", tmp_path / "u" / "pulsars.csv", 0, need_residuals=True)
    assert all(tables.frequency_mhz[p.name] is None for p in pulsars)
    assert all(tables.system[p.name].tolist() == p.system.tolist() for p in pulsars)

"""The HDF5 dataset: layout, round trip and atomic writing."""

import os

import h5py
import numpy as np
import pytest
from conftest import assert_same_pulsars, small_config

import ptares
from ptares.cli import main
from ptares.dataset import load_dataset, write_dataset
from ptares.errors import InputError
from ptares.simulation.simulate import simulate


@pytest.fixture
def dataset():
    config = small_config(noise={"red": {"amplitude": 1e-14}})
    return simulate(config)


def test_layout_matches_documentation(dataset, tmp_path):
    path = write_dataset(dataset, tmp_path / "d.h5")
    with h5py.File(path) as f:
        assert set(f.attrs) >= {"config", "seed", "ptares_version", "created", "start_mjd", "span"}
        assert f.attrs["seed"] == 11
        assert f.attrs["ptares_version"] == ptares.__version__
        for name, g in f["pulsars"].items():
            assert set(g) == {"mjd", "residuals", "errors", "design_matrix", "injected", "frequency_mhz"}  # one band
            assert g["frequency_mhz"].attrs["unit"] == "MHz" and np.all(g["frequency_mhz"][()] == 1400.0)
            assert set(g.attrs) == {"ra", "dec", "distance", "distance_error", "units"}
            assert set(g["injected"]) == {"white", "red", "gwb"}
            assert g["design_matrix"].shape == (g["mjd"].size, 3)
            assert {"white_scale", "white_quadrature", "red_amplitude", "red_spectral_index"} <= set(g["injected"].attrs)
        assert f["signals/gwb"].attrs["correlation"] == "hellings-downs"


def test_round_trip_is_exact(dataset, tmp_path):
    loaded = load_dataset(write_dataset(dataset, tmp_path / "d.h5"))
    assert loaded.names == dataset.names
    assert (loaded.seed, loaded.span, loaded.start_mjd) == (dataset.seed, dataset.span, dataset.start_mjd)
    assert loaded.signals["gwb"] == dataset.signals["gwb"]
    assert_same_pulsars(loaded, dataset)
    for a, b in zip(loaded.pulsars, dataset.pulsars):
        assert a.noise == b.noise
        assert a.design_columns == b.design_columns


def test_drawn_seed_is_kept_exactly(dataset, tmp_path):
    """Drawn seeds reach 2**63 - 1, beyond a double's 53 bits: the loader keeps them as integers."""
    dataset.seed = 2**63 - 1
    assert load_dataset(write_dataset(dataset, tmp_path / "d.h5")).seed == 2**63 - 1


def test_crash_while_writing_leaves_no_file(dataset, tmp_path, monkeypatch):
    target = tmp_path / "d.h5"

    def explode(self, *args, **kwargs):
        raise RuntimeError("disk on fire")

    monkeypatch.setattr(h5py.Group, "create_group", explode)
    with pytest.raises(RuntimeError):
        write_dataset(dataset, target)
    assert list(tmp_path.iterdir()) == []


def test_crash_keeps_previous_file_intact(dataset, tmp_path, monkeypatch):
    target = write_dataset(dataset, tmp_path / "d.h5")
    before = target.read_bytes()
    monkeypatch.setattr(h5py.Group, "create_group", lambda *a, **k: (_ for _ in ()).throw(RuntimeError("x")))
    with pytest.raises(RuntimeError):
        write_dataset(dataset, target)
    assert target.read_bytes() == before
    assert [p.name for p in tmp_path.iterdir()] == ["d.h5"]


def test_loading_bad_files(tmp_path):
    with pytest.raises(InputError, match="file not found"):
        load_dataset(tmp_path / "none.h5")
    junk = tmp_path / "junk.h5"
    junk.write_text("not hdf5")
    with pytest.raises(InputError, match=r"not a ptares dataset \(not an HDF5 file\)"):
        load_dataset(junk)


# ---------------------------------------------------------------- damaged datasets, each refused in one line

PULSAR = "pulsars/RP001"  #: the first pulsar of the small array, which each corruption damages


@pytest.fixture(scope="module")
def good_file(tmp_path_factory):
    """The bytes of a small dataset that loads, and its first pulsar's TOA count."""
    path = write_dataset(simulate(small_config(array={"random": {"count": 2}})), tmp_path_factory.mktemp("good") / "d.h5")
    loaded = load_dataset(path)
    assert loaded.names[0] == PULSAR.split("/")[1]
    return path.read_bytes(), loaded.pulsars[0].toa_count


def _in_file(edit):
    """A corruption made by ``edit(f)`` on the dataset opened for writing with h5py."""
    def corrupt(path):
        with h5py.File(path, "a") as f:
            edit(f)
        return path
    return corrupt


def _deleted(key):
    def edit(f):
        del f[key]
    return edit


def _replaced(key, change):
    """Edit: the array ``key`` replaced by ``change(values)``."""
    def edit(f):
        values = f[key][()]
        del f[key]
        f[key] = change(values)
    return edit


def _with_value(key, index, value):
    def change(values):
        values = values.copy()
        values[index] = value
        return values
    return _replaced(key, change)


def _attribute_deleted(key, attribute):
    def edit(f):
        del f[key].attrs[attribute]
    return edit


def _attribute_set(key, attribute, value):
    def edit(f):
        f[key].attrs[attribute] = value
    return edit


def _cut_to_half(path):
    path.write_bytes(path.read_bytes()[: path.stat().st_size // 2])
    return path


def _text_file(path):
    path.write_text("name,ra,dec\nAa,1,2\n")
    return path


def _empty_file(path):
    path.write_bytes(b"")
    return path


def _directory(path):
    target = path.with_name("x.h5")
    target.mkdir()
    return target


def _missing(path):
    return path.with_name("none.h5")


def _pipe(path):
    target = path.with_name("pipe.h5")
    os.mkfifo(target)
    return target


def _every_pulsar_deleted(f):
    for name in list(f["pulsars"]):
        del f["pulsars"][name]


def _huge_signal_array(f):
    # chunked and never written: a tiny file whose array would need 4.8 GB once read
    f["signals/gwb"].create_dataset("padding", shape=(600_000_000,), dtype=float, chunks=(1_000_000,))


def _renamed_pulsar(f):
    f.move(PULSAR, "pulsars/no spaces allowed")


def _linked_elsewhere(f):
    del f[f"{PULSAR}/errors"]
    f[f"{PULSAR}/errors"] = h5py.ExternalLink("other.h5", "/errors")


#: (corruption of a good dataset file, the start of the one-line fault; ``{n}`` is the pulsar's TOA count)
DAMAGED = [
    pytest.param(_in_file(_deleted(f"{PULSAR}/residuals")), "pulsar RP001: no 'residuals' array", id="array deleted"),
    pytest.param(_in_file(_deleted(f"{PULSAR}/design_matrix")), "pulsar RP001: no 'design_matrix' array",
                 id="design matrix deleted"),
    pytest.param(_in_file(_replaced(f"{PULSAR}/residuals", lambda v: v[:-1])),
                 "pulsar RP001: residuals has {short} values but mjd {n}", id="array truncated"),
    pytest.param(_in_file(_replaced(f"{PULSAR}/design_matrix", lambda v: v[:-1])),
                 "pulsar RP001: design_matrix has {short} rows but mjd {n}", id="design matrix short"),
    pytest.param(_in_file(_replaced(f"{PULSAR}/injected/gwb", lambda v: v[:-1])),
                 "pulsar RP001: injected/gwb has {short} values but mjd {n}", id="injected component short"),
    pytest.param(_in_file(_with_value(f"{PULSAR}/residuals", 3, np.nan)),
                 "pulsar RP001: residuals[3] is NaN; values must be finite", id="NaN residual"),
    pytest.param(_in_file(_with_value(f"{PULSAR}/mjd", 0, np.inf)),
                 "pulsar RP001: mjd[0] is inf; values must be finite", id="infinite MJD"),
    pytest.param(_in_file(_with_value(f"{PULSAR}/errors", 2, 0.0)),
                 "pulsar RP001: errors[2] is 0.0; TOA errors must be positive", id="zero TOA error"),
    pytest.param(_in_file(_replaced(f"{PULSAR}/mjd", lambda v: v[::-1])),
                 "pulsar RP001: mjd is not in time order (mjd[1] = ", id="MJDs reversed"),
    pytest.param(_in_file(_replaced(f"{PULSAR}/residuals", lambda v: np.array([str(x) for x in v], dtype="S"))),
                 "pulsar RP001: residuals holds text, not floating-point numbers", id="strings"),
    pytest.param(_in_file(_replaced(f"{PULSAR}/residuals", lambda v: np.stack([v, v]))),
                 "pulsar RP001: residuals has shape (2, {n}); expected 1-D", id="2-D residuals"),
    pytest.param(_in_file(_attribute_deleted(PULSAR, "ra")), "pulsar RP001: no 'ra' attribute", id="no ra"),
    pytest.param(_in_file(_attribute_set(PULSAR, "dec", np.nan)),
                 "pulsar RP001: attribute 'dec' is NaN; it must be finite", id="NaN dec"),
    pytest.param(_in_file(_renamed_pulsar), "pulsar name 'no spaces allowed' is not 1-64 letters", id="bad name"),
    pytest.param(_in_file(_deleted("pulsars")), "not a ptares dataset (no 'pulsars' group)", id="no pulsars group"),
    pytest.param(_in_file(_every_pulsar_deleted), "has no pulsars (the 'pulsars' group is empty)", id="no pulsars"),
    pytest.param(_in_file(_attribute_deleted("/", "span")), "not a ptares dataset (no 'span' attribute)", id="no span"),
    pytest.param(_in_file(_huge_signal_array), "its arrays take 4.8 GB, more than ptares loads (4 GB)",
                 id="arrays beyond the memory limit"),
    pytest.param(_in_file(_linked_elsewhere), "/pulsars/RP001/errors is a link to another file (other.h5)",
                 id="external link"),
    pytest.param(_text_file, "not a ptares dataset (not an HDF5 file)", id="text file named .h5"),
    pytest.param(_cut_to_half, "truncated or damaged HDF5 file", id="cut to half"),
    pytest.param(_empty_file, "not a ptares dataset (an empty file)", id="empty file"),
    pytest.param(_directory, "is a directory, not a file", id="directory"),
    pytest.param(_missing, "file not found", id="missing"),
    pytest.param(_pipe, "is not a regular file", id="pipe",
                 marks=pytest.mark.skipif(not hasattr(os, "mkfifo"), reason="no named pipes")),
]


@pytest.mark.parametrize("corrupt, fault", DAMAGED)
def test_damaged_dataset_is_refused_in_one_line(corrupt, fault, good_file, tmp_path, capsys):
    """Each damaged file stops ``ptares correlate`` with status 2 and one line naming the file and the
    fault, before any output folder is made."""
    data, count = good_file
    path = tmp_path / "d.h5"
    path.write_bytes(data)
    path = corrupt(path)
    out = tmp_path / "out"
    assert main(["correlate", str(path), "--out", str(out)]) == 2
    captured = capsys.readouterr()
    expected = f"ptares: error: {path}: {fault.format(n=count, short=count - 1)}"
    assert captured.err.startswith(expected), captured.err
    assert captured.err.count("\n") == 1 and captured.err.endswith("\n")
    assert "Traceback" not in captured.err and captured.out == ""
    assert not out.exists()


@pytest.mark.parametrize("limit, fault", [("MAX_TOAS", "pulsar RP001: {n} TOAs, more than ptares handles per pulsar"),
                                          ("MAX_TOTAL_TOAS", "{total} TOAs in all, more than ptares handles")])
def test_toa_limits_refuse_before_reading(limit, fault, good_file, tmp_path, monkeypatch):
    """Counted from the arrays' shapes: with the limit one below the file's count, it is refused unread."""
    import ptares.dataset

    data, count = good_file
    path = tmp_path / "d.h5"
    path.write_bytes(data)
    monkeypatch.setattr(ptares.dataset, limit, count - 1 if limit == "MAX_TOAS" else 2 * count - 1)
    monkeypatch.setattr(h5py.Dataset, "__getitem__", lambda *a: pytest.fail("read an array"))
    with pytest.raises(InputError, match=fault.format(n=count, total=2 * count)):
        load_dataset(path)


def test_every_array_has_a_unit_astropy_reads(dataset, tmp_path):
    """astropy parses every ``unit`` attribute (and each column's of a table); the main arrays have the expected
    ones, and the astropy views give the same positions and times as the plain arrays."""
    import json

    from astropy import units as u
    from astropy.coordinates import SkyCoord

    path = write_dataset(dataset, tmp_path / "d.h5")
    seen = []

    def check(name, obj):
        if isinstance(obj, h5py.Dataset):
            unit = obj.attrs["unit"]
            for part in unit.split("; ") if obj.dtype.names else [unit]:
                u.Unit(part.split("=")[-1])
            seen.append(name)

    with h5py.File(path) as f:
        f.visititems(check)
        g = f["pulsars"][dataset.names[0]]
        assert (g["mjd"].attrs["unit"], g["residuals"].attrs["unit"], g["injected/gwb"].attrs["unit"]) == ("d", "s", "s")
        assert json.loads(g.attrs["units"])["distance"] == "kpc"
        assert u.Unit(json.loads(f.attrs["units"])["span"]) == u.s
    assert any(name.endswith("mjd") for name in seen)
    p = dataset.pulsars[0]
    assert np.allclose(p.times.mjd, p.mjd) and p.times.scale == "tdb"
    coordinates = dataset.coordinates
    expected = SkyCoord(ra=[q.ra for q in dataset.pulsars] * u.rad, dec=[q.dec for q in dataset.pulsars] * u.rad)
    assert np.allclose(coordinates.separation(expected).to_value(u.arcsec), 0.0, atol=1e-6)
    assert np.allclose(coordinates.cartesian.xyz.value.T / coordinates.distance.to_value(u.kpc)[:, None],
                       [q.position for q in dataset.pulsars])

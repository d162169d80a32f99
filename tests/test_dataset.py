"""The HDF5 dataset: layout, round trip and atomic writing."""

import h5py
import pytest
from conftest import assert_same_pulsars, small_config

import ptares
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
            assert set(g) == {"mjd", "residuals", "errors", "design_matrix", "injected"}
            assert set(g.attrs) == {"ra", "dec", "distance", "distance_error"}
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
    with pytest.raises(InputError, match="dataset file not found"):
        load_dataset(tmp_path / "none.h5")
    junk = tmp_path / "junk.h5"
    junk.write_text("not hdf5")
    with pytest.raises(InputError, match="not a readable ptares dataset"):
        load_dataset(junk)

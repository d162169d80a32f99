"""The dataset: timing residuals of an array, in memory and as an HDF5 file.

File layout (also in the README)::

    /                       attrs: config (TOML text), seed, ptares_version, created,
                                   start_mjd (origin of the Fourier basis), span (s)
    /pulsars/<name>         attrs: ra, dec (rad), distance, distance_error (kpc)
        mjd                 (n,) days
        residuals           (n,) s, after the timing-model fit
        errors              (n,) s, quoted TOA uncertainties
        design_matrix       (n, m), attrs: columns (names)
        measured            (n,) s, residuals taken from a table (inject mode, imports), if any
        injected/<component>  (n,) s, before the fit: white, red, gwb, binary
        injected            attrs: white_scale, white_quadrature (s),
                                   red_amplitude, red_spectral_index (the injected noise),
                                   distance (kpc, used by pulsar terms)
    /signals/<component>    attrs: the component's parameters (e.g. gwb amplitude);
        sources             table of binaries (binary, and a gwb built from binaries)

Pulsars keep their array order.  Files are written under a temporary name
and renamed into place, so a crash never leaves a partial file under the
final name.
"""

from __future__ import annotations

import os
import tempfile
from dataclasses import dataclass, field, replace
from pathlib import Path

import h5py
import numpy as np

from ptares.errors import InputError
from ptares.physics.sky import unit_vector
from ptares.version import earlier_names

__all__ = ["PulsarData", "Dataset", "write_dataset", "load_dataset", "atomic_path", "write_json", "fingerprint",
           "describe_signal"]


@dataclass
class PulsarData:
    """One pulsar's timing data and injected truth."""

    name: str
    ra: float  #: radians
    dec: float  #: radians
    distance: float  #: kpc
    distance_error: float  #: kpc
    mjd: np.ndarray  #: days
    residuals: np.ndarray  #: s, after the timing-model fit
    errors: np.ndarray  #: s, quoted TOA uncertainties
    design_matrix: np.ndarray
    design_columns: list = field(default_factory=list)
    injected: dict = field(default_factory=dict)  #: component name -> (n,) s, before the fit
    noise: dict = field(default_factory=dict)  #: injected noise parameters
    measured: np.ndarray | None = None  #: s, residuals taken from a table (inject mode and imports)

    @property
    def position(self) -> np.ndarray:
        """Unit vector towards the pulsar."""
        return unit_vector(self.ra, self.dec)

    @property
    def toa_count(self) -> int:
        return int(self.mjd.size)

    def __repr__(self) -> str:
        """One line: name, TOAs, MJD range, sky position, distance, residual scatter; never the arrays."""
        if self.toa_count:
            extent = f"MJD {float(np.min(self.mjd)):.1f} to {float(np.max(self.mjd)):.1f}"
            scatter = (f", rms residual {_micro(np.sqrt(np.mean(np.square(self.residuals))))} us, "
                       f"median error {_micro(np.median(self.errors))} us")
        else:
            extent, scatter = "no epochs", ""
        injected = f", injected {', '.join(self.injected)}" if self.injected else ""
        return (f"PulsarData({self.name}: {self.toa_count} TOAs, {extent}, ra {np.degrees(self.ra):.2f} deg, "
                f"dec {np.degrees(self.dec):+.2f} deg, {self.distance:.3g} kpc{scatter}{injected})")


@dataclass
class Dataset:
    """An array's residuals with the run's provenance."""

    pulsars: list
    config: str = ""
    seed: int = 0
    ptares_version: str = ""
    created: str = ""
    start_mjd: float = 0.0
    span: float = 0.0  #: s
    signals: dict = field(default_factory=dict)  #: component name -> parameters

    @property
    def names(self) -> list:
        return [p.name for p in self.pulsars]

    def pulsar(self, name: str) -> PulsarData:
        for p in self.pulsars:
            if p.name == name:
                return p
        raise KeyError(name)

    def subset(self, names) -> "Dataset":
        """The same run with only the pulsars ``names``, in that order (start, span, signals and provenance kept)."""
        return replace(self, pulsars=[self.pulsar(n) for n in names])

    @property
    def toa_count(self) -> int:
        """TOAs of all pulsars together."""
        return sum(p.toa_count for p in self.pulsars)

    def __repr__(self) -> str:
        """A few lines: pulsars, TOAs, span, MJD range, seed and the injected signals; never the arrays."""
        counts = [p.toa_count for p in self.pulsars]
        epochs = [p.mjd for p in self.pulsars if p.toa_count]
        lines = [f"Dataset: {len(self.pulsars)} pulsars, {sum(counts)} TOAs"
                 + (f" ({min(counts)} to {max(counts)} per pulsar)" if counts and min(counts) != max(counts) else "")
                 + f", seed {self.seed}"]
        if epochs:
            first = min(float(np.min(m)) for m in epochs)
            last = max(float(np.max(m)) for m in epochs)
            lines.append(f"  span {self.span / 86400.0 / 365.25:.2f} yr, TOAs from MJD {first:.1f} to {last:.1f}")
        names = self.names
        if names:
            lines.append(f"  pulsars {', '.join(names[:5])}{', ...' if len(names) > 5 else ''}")
        red = sum(1 for p in self.pulsars if float(p.noise.get("red_amplitude", 0.0) or 0.0) > 0.0)
        described = [describe_signal(name, values, red) for name, values in self.signals.items()]
        lines.append("  signals " + ("; ".join(described) if described else "none recorded"))
        return "\n".join(lines)


def _micro(seconds) -> str:
    """Seconds as microseconds, three significant figures."""
    return f"{float(seconds) * 1e6:.3g}"


def describe_signal(name: str, values: dict, red_pulsars: int = 0) -> str:
    """A few words on one injected component from its recorded parameters (a dataset's ``signals``
    entry, or a component's ``describe``); ``red_pulsars`` counts the pulsars with red noise."""
    if name == "white":
        return "white noise"
    frequencies = f", {int(values['harmonics'])} frequencies" if "harmonics" in values else ""
    if name == "red":
        return f"red noise in {red_pulsars} pulsars{frequencies}"
    if name == "gwb":
        words = f"background A = {float(values.get('amplitude', float('nan'))):.3g}"
        if "spectral_index" in values:
            words += f", spectral index {float(values['spectral_index']):.3g}"
        words += frequencies + (f", {values['correlation']}" if "correlation" in values else "")
        if values.get("source") == "binaries" and values.get("sources") is not None:
            return words + f", {len(values['sources'])} binaries"
        return words + ", Gaussian"
    if name == "binary":
        sources = values.get("sources")
        if sources is None or not len(sources):
            return f"{int(values.get('count', 0))} binaries"
        shown = []
        for row in sources[:3]:
            label = row["name"].decode() if isinstance(row["name"], bytes) else str(row["name"])
            shown.append(f"binary {label}: f = {float(row['frequency']) * 1e9:.3g} nHz, h0 = {float(row['strain']):.3g}, "
                         f"{'evolving' if row['frequency_evolution'] else 'fixed frequency'}, "
                         f"{'with' if row['pulsar_term'] else 'no'} pulsar term")
        return "; ".join(shown) + (f"; and {len(sources) - 3} more" if len(sources) > 3 else "")
    return name


class atomic_path:
    """Context manager yielding a temporary path that is renamed to ``path`` on success.

    On an exception the temporary file is removed and ``path`` is untouched.
    """

    def __init__(self, path):
        self.path = Path(path)

    def __enter__(self) -> Path:
        self.path.parent.mkdir(parents=True, exist_ok=True)
        handle, name = tempfile.mkstemp(prefix=f".{self.path.name}.", suffix=".tmp", dir=self.path.parent)
        os.close(handle)
        umask = os.umask(0)
        os.umask(umask)
        os.chmod(name, 0o666 & ~umask)  # mkstemp makes owner-only files; use the usual mode
        self.temporary = Path(name)
        return self.temporary

    def __exit__(self, kind, value, traceback):
        if kind is None:
            os.replace(self.temporary, self.path)
        else:
            self.temporary.unlink(missing_ok=True)
        return False


def _json_safe(value):
    """``value`` with non-finite floats as None (JSON has no NaN) and numpy scalars as Python ones."""
    if isinstance(value, dict):
        return {k: _json_safe(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_json_safe(v) for v in value]
    if isinstance(value, np.generic):
        value = value.item()
    if isinstance(value, float) and not np.isfinite(value):
        return None
    return value


def write_json(path, data) -> Path:
    """Write ``data`` as JSON atomically; NaN and infinities become null."""
    import json

    path = Path(path)
    with atomic_path(path) as temporary:
        temporary.write_text(json.dumps(_json_safe(data), indent=1, allow_nan=False))
    return path


def fingerprint(dataset: Dataset) -> str:
    """A hash of everything an analysis reads from ``dataset`` (positions, TOAs, residuals, noise, signals)."""
    import hashlib
    import json

    digest = hashlib.sha256()
    digest.update(repr((dataset.start_mjd, dataset.span)).encode())
    for p in dataset.pulsars:
        digest.update(p.name.encode())
        digest.update(np.array([p.ra, p.dec, p.distance, p.distance_error], dtype=float).tobytes())
        for array in (p.mjd, p.residuals, p.errors, p.design_matrix):
            digest.update(np.ascontiguousarray(array, dtype=float).tobytes())
        digest.update(json.dumps(_json_safe(p.noise), sort_keys=True).encode())
    signals = {name: {k: v for k, v in values.items() if not isinstance(v, np.ndarray)} for name, values in dataset.signals.items()}
    digest.update(json.dumps(_json_safe(signals), sort_keys=True, default=str).encode())
    return digest.hexdigest()


def write_dataset(dataset: Dataset, path) -> Path:
    """Write ``dataset`` to the HDF5 file ``path`` atomically; returns the path."""
    path = Path(path)
    with atomic_path(path) as temporary:
        with h5py.File(temporary, "w") as f:
            f.attrs["config"] = dataset.config
            f.attrs["seed"] = dataset.seed
            f.attrs["ptares_version"] = dataset.ptares_version
            f.attrs["created"] = dataset.created
            f.attrs["start_mjd"] = dataset.start_mjd
            f.attrs["span"] = dataset.span
            group = f.create_group("pulsars", track_order=True)
            for p in dataset.pulsars:
                g = group.create_group(p.name)
                for key in ("ra", "dec", "distance", "distance_error"):
                    g.attrs[key] = getattr(p, key)
                g["mjd"] = p.mjd
                g["residuals"] = p.residuals
                g["errors"] = p.errors
                g["design_matrix"] = p.design_matrix
                g["design_matrix"].attrs["columns"] = list(p.design_columns)
                if p.measured is not None:
                    g["measured"] = p.measured
                injected = g.create_group("injected", track_order=True)
                for name, values in p.injected.items():
                    injected[name] = values
                for key, value in p.noise.items():
                    injected.attrs[key] = value
            signals = f.create_group("signals", track_order=True)
            for name, parameters in dataset.signals.items():
                s = signals.create_group(name)
                for key, value in parameters.items():
                    if isinstance(value, np.ndarray):
                        s[key] = value
                    else:
                        s.attrs[key] = value
    return path


def _plain(value):
    """HDF5 attribute -> plain Python value."""
    if isinstance(value, bytes):
        return value.decode()
    if isinstance(value, np.generic):
        return value.item()
    if isinstance(value, np.ndarray):
        return [_plain(v) for v in value]
    return value


def load_dataset(path) -> Dataset:
    """Read a dataset written by :func:`write_dataset`."""
    path = Path(path)
    if not path.is_file():
        raise InputError("dataset file not found", str(path))
    try:
        with h5py.File(path, "r") as f:
            pulsars = []
            for name, g in f["pulsars"].items():
                injected = g.get("injected")
                pulsars.append(
                    PulsarData(
                        name=name,
                        ra=float(g.attrs["ra"]),
                        dec=float(g.attrs["dec"]),
                        distance=float(g.attrs["distance"]),
                        distance_error=float(g.attrs["distance_error"]),
                        mjd=g["mjd"][()],
                        residuals=g["residuals"][()],
                        errors=g["errors"][()],
                        design_matrix=g["design_matrix"][()],
                        design_columns=_plain(g["design_matrix"].attrs.get("columns", [])),
                        injected={k: v[()] for k, v in injected.items()} if injected else {},
                        noise={k: _plain(v) for k, v in injected.attrs.items()} if injected else {},
                        measured=g["measured"][()] if "measured" in g else None,
                    )
                )
            signals = {
                name: {**{k: _plain(v) for k, v in s.attrs.items()}, **{k: v[()] for k, v in s.items()}}
                for name, s in f.get("signals", {}).items()
            }
            stored = [k for p in pulsars for k in (*p.noise, *p.injected)] + [k for s in signals.values() for k in s]
            stored += list(signals)
            stored += [k for s in signals.values() if "sources" in s for k in (s["sources"].dtype.names or ())]
            note = earlier_names(stored)
            if note:
                raise InputError(f"written by an earlier ptares ({note}); simulate or import it again", str(path))
            return Dataset(
                pulsars=pulsars,
                config=_plain(f.attrs.get("config", "")),
                seed=int(f.attrs.get("seed", 0)),
                ptares_version=_plain(f.attrs.get("ptares_version", "")),
                created=_plain(f.attrs.get("created", "")),
                start_mjd=float(f.attrs.get("start_mjd", 0.0)),
                span=float(f.attrs.get("span", 0.0)),
                signals=signals,
            )
    except (OSError, KeyError) as exc:
        raise InputError(f"not a readable ptares dataset ({exc})", str(path)) from None

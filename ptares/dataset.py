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
        injected/<component>  (n,) s, before the fit: white, red, gwb, binary, wave
        injected            attrs: white_scale, white_quadrature (s),
                                   red_amplitude, red_spectral_index (the injected noise),
                                   distance (kpc, used by pulsar terms)
    /signals/<component>    attrs: the component's parameters (e.g. gwb amplitude);
        sources             table of sources (binary, wave, and a gwb built from binaries)

Pulsars keep their array order.  Files are written under a temporary name
and renamed into place, so a crash never leaves a partial file under the
final name.
"""

from __future__ import annotations

import json
import os
import tempfile
from dataclasses import dataclass, field, replace
from pathlib import Path

import h5py
import numpy as np

from ptares.errors import InputError, regular_file
from ptares.limits import MAX_TOAS, MAX_TOTAL_TOAS, MEMORY_LIMIT, NAME_PATTERN
from ptares.physics.sky import unit_vector
from ptares.version import earlier_names

__all__ = ["PulsarData", "Dataset", "epoch_indices", "system_indices", "jitter_weights", "EPOCH_WINDOW", "write_dataset", "load_dataset", "atomic_path", "write_json", "fingerprint", "text_of",
           "describe_signal"]


#: TOAs of one observing system separated by less than this many days belong to one epoch (an hour: one
#: observation in several sub-bands).
EPOCH_WINDOW = 1.0 / 24.0


def epoch_indices(mjd: np.ndarray, system: np.ndarray | None = None) -> np.ndarray:
    """The epoch of each TOA, numbered 0, 1, ... in time order of their first TOAs: runs of TOAs of one
    observing system (all TOAs when ``system`` is None) with gaps below :data:`EPOCH_WINDOW`."""
    mjd = np.asarray(mjd, dtype=float)
    if mjd.size == 0:
        return np.zeros(0, dtype=np.int64)
    keys = np.zeros(mjd.size, dtype=np.int64) if system is None else np.unique(system, return_inverse=True)[1].ravel()
    order = np.lexsort((mjd, keys))  # by system, then time
    new = np.ones(mjd.size, dtype=bool)
    new[1:] = (keys[order][1:] != keys[order][:-1]) | (np.diff(mjd[order]) >= EPOCH_WINDOW)
    labels = np.empty(mjd.size, dtype=np.int64)
    labels[order] = np.cumsum(new) - 1
    first_toa = order[new]  # the first TOA of each epoch, in label order
    rank = np.empty(first_toa.size, dtype=np.int64)
    rank[np.lexsort((keys[first_toa], mjd[first_toa]))] = np.arange(first_toa.size)
    return rank[labels]


def jitter_weights(weights: np.ndarray, epochs: np.ndarray, variances: np.ndarray) -> tuple:
    """Epoch jitter by Sherman–Morrison, one epoch at a time (PHYSICS.md, "Epoch jitter"): for white noise
    ``W = diag(weights)`` (inverse variances) and a variance ``variances[e]`` shared by the TOAs of epoch e
    (``epochs``: each TOA's), ``N^-1 = W - W U diag(c) U^T W`` with ``c_e = J_e^2 / (1 + J_e^2 sum_(i in e) w_i)``
    and ``ln|N| = -sum ln w_i + sum_e ln(1 + J_e^2 sum_(i in e) w_i)``.  Returns ``(c, the second sum)``."""
    total = np.bincount(epochs, weights=weights, minlength=variances.size)  # sum of w_i over each epoch
    return variances / (1.0 + variances * total), float(np.sum(np.log1p(variances * total)))


def system_indices(system: np.ndarray, names) -> np.ndarray:
    """Each TOA's observing system (``system``, names) as an index into ``names``."""
    unique, inverse = np.unique(np.asarray(system, dtype=str), return_inverse=True)
    position = {str(name): i for i, name in enumerate(names)}
    return np.array([position[str(u)] for u in unique], dtype=np.int64)[inverse.ravel()]


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
    frequency_mhz: np.ndarray | None = None  #: MHz, the radio frequency of each TOA (None: not recorded)
    system: np.ndarray | None = None  #: the observing system (receiver and backend) of each TOA, by name

    def epochs(self) -> np.ndarray:
        """The epoch of each TOA (:func:`epoch_indices`): the TOAs that share an epoch jitter."""
        return epoch_indices(self.mjd, self.system)

    def system_indices(self) -> np.ndarray:
        """Each TOA's observing system as an index into :attr:`systems` (all 0 when none are recorded)."""
        if self.system is None:
            return np.zeros(self.mjd.size, dtype=np.int64)
        return system_indices(self.system, self.systems)

    @property
    def systems(self) -> list:
        """The observing systems of this pulsar's TOAs, in order of first use (empty when not recorded)."""
        return [] if self.system is None else list(dict.fromkeys(str(s) for s in self.system))

    @property
    def position(self) -> np.ndarray:
        """Unit vector towards the pulsar."""
        return unit_vector(self.ra, self.dec)

    @property
    def toa_count(self) -> int:
        return int(self.mjd.size)

    @property
    def times(self):
        """The TOAs as an astropy ``Time`` (MJD, barycentric dynamical time: simulated TOAs are barycentric)."""
        from astropy.time import Time

        return Time(self.mjd, format="mjd", scale="tdb")

    @property
    def coordinates(self):
        """The pulsar's position and distance as an astropy ``SkyCoord`` (ICRS)."""
        from astropy import units as u
        from astropy.coordinates import SkyCoord

        return SkyCoord(ra=self.ra * u.rad, dec=self.dec * u.rad, distance=self.distance * u.kpc, frame="icrs")

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

    @property
    def coordinates(self):
        """Every pulsar's position and distance as one astropy ``SkyCoord`` (ICRS), in array order."""
        from astropy import units as u
        from astropy.coordinates import SkyCoord

        return SkyCoord(ra=[p.ra for p in self.pulsars] * u.rad, dec=[p.dec for p in self.pulsars] * u.rad,
                        distance=[p.distance for p in self.pulsars] * u.kpc, frame="icrs")

    @property
    def start(self):
        """The array's first epoch as an astropy ``Time`` (MJD, TDB)."""
        from astropy.time import Time

        return Time(self.start_mjd, format="mjd", scale="tdb")

    def radio_summary(self) -> str:
        """The recorded radio frequencies and observing systems in a few words ("" when none are recorded)."""
        frequencies = [p.frequency_mhz for p in self.pulsars if p.frequency_mhz is not None]
        systems = list(dict.fromkeys(s for p in self.pulsars for s in p.systems))
        if not frequencies:
            return ""
        low, high = min(float(np.min(f)) for f in frequencies), max(float(np.max(f)) for f in frequencies)
        words = f"{low:g} MHz" if low == high else f"{low:g} to {high:g} MHz"
        if len(frequencies) < len(self.pulsars):
            words += f" (recorded for {len(frequencies)} of {len(self.pulsars)} pulsars)"
        if systems:
            words += f"; systems {', '.join(systems[:6])}{', ...' if len(systems) > 6 else ''}"
        return words

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
        radio = self.radio_summary()
        if radio:
            lines.append(f"  radio {radio}")
        red = sum(1 for p in self.pulsars if float(p.noise.get("red_amplitude", 0.0) or 0.0) > 0.0)
        described = [describe_signal(name, values, red) for name, values in self.signals.items()]
        lines.append("  signals " + ("; ".join(described) if described else "none recorded"))
        return "\n".join(lines)


def _micro(seconds) -> str:
    """Seconds as microseconds, three significant figures."""
    return f"{float(seconds) * 1e6:.3g}"


def text_of(value) -> str:
    """A text field of an HDF5 table or attribute as ``str`` (h5py gives fixed-length strings as bytes)."""
    return value.decode() if isinstance(value, bytes) else str(value)


def describe_signal(name: str, values: dict, red_pulsars: int = 0) -> str:
    """A few words on one injected component from its recorded parameters (a dataset's ``signals``
    entry, or a component's ``describe``); ``red_pulsars`` counts the pulsars with red noise."""
    if name == "white":
        return "white noise"
    if name == "jitter":
        return "epoch jitter"
    frequencies = f", {int(values['harmonics'])} frequencies" if "harmonics" in values else ""
    if name == "red":
        return f"red noise in {red_pulsars} pulsars{frequencies}"
    if name in ("dispersion", "scattering"):
        return (f"{name} noise in {int(values.get('pulsars', 0))} pulsars{frequencies}, stated at "
                f"{float(values.get('reference_frequency_mhz', float('nan'))):g} MHz")
    if name == "gwb":
        words = f"background A = {float(values.get('amplitude', float('nan'))):.3g}"
        if "spectral_index" in values:
            words += f", spectral index {float(values['spectral_index']):.3g}"
        if values.get("bend_frequency") is not None:
            words += f", turning over below {float(values['bend_frequency']) * 1e9:.3g} nHz"
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
            label = text_of(row["name"])
            shown.append(f"binary {label}: f = {float(row['frequency']) * 1e9:.3g} nHz, h0 = {float(row['strain']):.3g}, "
                         f"{'evolving' if row['frequency_evolution'] else 'fixed frequency'}, "
                         f"{'with' if row['pulsar_term'] else 'no'} pulsar term")
        return "; ".join(shown) + (f"; and {len(sources) - 3} more" if len(sources) > 3 else "")
    if name == "wave":
        sources = values.get("sources")
        if sources is None or not len(sources):
            return f"{int(values.get('count', 0))} waves"
        shown = []
        for row in sources[:3]:
            label, shape = text_of(row["name"]), text_of(row["shape"])
            words = f"wave {label}: {shape.replace('_', '-')}"
            if shape != "table":
                words += f" of strain {float(row['amplitude']):.3g} at MJD {float(row['epoch']):.6g}"
            shown.append(words + f", {'with' if row['pulsar_term'] else 'no'} pulsar term")
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
    """``value`` with non-finite floats as None (JSON has no NaN), numpy arrays as lists and numpy scalars as
    Python ones."""
    if isinstance(value, np.ndarray):
        value = value.tolist()
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
        if p.frequency_mhz is not None:
            digest.update(np.ascontiguousarray(p.frequency_mhz, dtype=float).tobytes())
        if p.system is not None:
            digest.update("\n".join(str(s) for s in p.system).encode())
        digest.update(json.dumps(_json_safe(p.noise), sort_keys=True).encode())
    signals = {name: {k: v for k, v in values.items() if not isinstance(v, np.ndarray)} for name, values in dataset.signals.items()}
    digest.update(json.dumps(_json_safe(signals), sort_keys=True, default=str).encode())
    return digest.hexdigest()


#: Unit of each per-TOA array of a pulsar in the HDF5 file (astropy's unit strings; "" is dimensionless).
ARRAY_UNITS = {"mjd": "d", "residuals": "s", "errors": "s", "design_matrix": "", "measured": "s", "frequency_mhz": "MHz",
               "system": ""}
#: Units of a pulsar group's attributes and of the file's, written as a JSON ``units`` attribute beside them.
PULSAR_ATTRIBUTE_UNITS = {"ra": "rad", "dec": "rad", "distance": "kpc", "distance_error": "kpc"}
FILE_ATTRIBUTE_UNITS = {"start_mjd": "d", "span": "s"}
#: Units of the columns of a table of binaries (a signal's ``sources``).
SOURCE_UNITS = {"name": "", "ra": "rad", "dec": "rad", "frequency": "Hz", "strain": "", "inclination": "rad",
                "polarization": "rad", "phase": "rad", "chirp_mass": "kg", "frequency_evolution": "",
                "pulsar_term": "", "shape": "", "epoch": "MJD", "amplitude": "", "width": "s", "cross_fraction": "",
                "rise_time": "s", "file": "", "strain_scale": "", "interpolation_error": "s"}


def _table_unit(values: np.ndarray) -> str:
    """The ``unit`` attribute of a signal's array: its unit, or for a table ``column=unit`` pairs joined by "; "."""
    if values.dtype.names is None:
        return ""
    return "; ".join(f"{name}={SOURCE_UNITS.get(name, '')}" for name in values.dtype.names)


def write_dataset(dataset: Dataset, path) -> Path:
    """Write ``dataset`` to the HDF5 file ``path`` atomically; returns the path.  Every array carries a ``unit``
    attribute (:data:`ARRAY_UNITS`; a table's per column), and groups with dimensioned attributes a JSON ``units``."""
    path = Path(path)
    with atomic_path(path) as temporary:
        with h5py.File(temporary, "w") as f:
            f.attrs["config"] = dataset.config
            f.attrs["seed"] = dataset.seed
            f.attrs["ptares_version"] = dataset.ptares_version
            f.attrs["created"] = dataset.created
            f.attrs["start_mjd"] = dataset.start_mjd
            f.attrs["span"] = dataset.span
            f.attrs["units"] = json.dumps(FILE_ATTRIBUTE_UNITS)
            group = f.create_group("pulsars", track_order=True)
            for p in dataset.pulsars:
                g = group.create_group(p.name)
                for key in ("ra", "dec", "distance", "distance_error"):
                    g.attrs[key] = getattr(p, key)
                g.attrs["units"] = json.dumps(PULSAR_ATTRIBUTE_UNITS)
                g["mjd"] = p.mjd
                g["residuals"] = p.residuals
                g["errors"] = p.errors
                g["design_matrix"] = p.design_matrix
                g["design_matrix"].attrs["columns"] = list(p.design_columns)
                if p.measured is not None:
                    g["measured"] = p.measured
                if p.frequency_mhz is not None:
                    g["frequency_mhz"] = np.asarray(p.frequency_mhz, dtype=float)
                if p.system is not None:
                    g["system"] = np.array([str(s).encode() for s in p.system], dtype=f"S{SYSTEM_NAME_BYTES}")
                for key, unit in ARRAY_UNITS.items():
                    if key in g:
                        g[key].attrs["unit"] = unit
                injected = g.create_group("injected", track_order=True)
                for name, values in p.injected.items():
                    injected[name] = values
                    injected[name].attrs["unit"] = "s"
                for key, value in p.noise.items():
                    injected.attrs[key] = value
            signals = f.create_group("signals", track_order=True)
            for name, parameters in dataset.signals.items():
                s = signals.create_group(name)
                for key, value in parameters.items():
                    if isinstance(value, np.ndarray):
                        s[key] = value
                        s[key].attrs["unit"] = _table_unit(value)
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


#: Longest observing-system name, in bytes (names follow the rule of pulsar names).
SYSTEM_NAME_BYTES = 64
#: The arrays every pulsar group holds, with their number of dimensions.
PULSAR_ARRAYS = (("mjd", 1), ("residuals", 1), ("errors", 1), ("design_matrix", 2))
#: Attributes of the file and of every pulsar group that the loader reads as numbers.
FILE_NUMBERS = ("start_mjd", "span")
PULSAR_NUMBERS = ("ra", "dec", "distance", "distance_error")


def _check_file(path: Path) -> None:
    """Refuse, naming ``path``, a file that is missing, not a regular file, unreadable or empty,
    before HDF5 opens it (HDF5 would wait forever on a pipe)."""
    info = regular_file(path)
    try:
        with open(path, "rb"):
            pass
    except OSError as exc:
        raise InputError(f"cannot read file ({exc.strerror or exc})", str(path)) from None
    if info.st_size == 0:
        raise InputError("not a ptares dataset (an empty file)", str(path))


def _open(path: Path) -> h5py.File:
    """``path`` opened read-only; HDF5's own errors become one line saying what the file is."""
    try:
        return h5py.File(path, "r")
    except OSError:
        if not h5py.is_hdf5(path):
            raise InputError("not a ptares dataset (not an HDF5 file)", str(path)) from None
        raise InputError("truncated or damaged HDF5 file", str(path)) from None


def _member(group: h5py.Group, key: str, path: str):
    """The object ``key`` of ``group`` (None if absent).  A link into another file, or an array whose
    values are kept in other files, is refused: a dataset never makes ptares read files it was not given."""
    link = group.get(key, getlink=True)
    if link is None:
        return None
    place = f"{group.name.rstrip('/')}/{_shown(key)}"
    if isinstance(link, h5py.ExternalLink):
        raise InputError(f"{place} is a link to another file ({_shown(link.filename)}); ptares reads one file", path)
    member = group[key]
    if isinstance(member, h5py.Dataset) and (member.is_virtual or member.external):
        raise InputError(f"{place} keeps its values in other files; ptares reads one file", path)
    return member


def _shown(name: str) -> str:
    """A name from the file as a message shows it: quoted where it holds characters that are not printable."""
    return name if name.isprintable() else repr(name)


def _words(value) -> str:
    """A number as a message shows it: NaN spelt the usual way."""
    return "NaN" if np.isnan(value) else repr(float(value))


def _number(attrs, key: str, owner: str, path: str) -> float:
    """The attribute ``key`` as a float; missing, not a single real number, or not finite is an
    :class:`InputError` (``owner`` starts the message: ``"pulsar Aa: "`` or ``""``)."""
    if key not in attrs:
        raise InputError(f"{owner}no '{key}' attribute", path)
    try:
        value = attrs[key]
    except (OSError, TypeError):  # a type HDF5 stores but numpy has no equivalent for
        raise InputError(f"{owner}attribute '{key}' cannot be read", path) from None
    if isinstance(value, np.ndarray) and value.shape == ():
        value = value[()]
    if isinstance(value, (bool, np.bool_)) or not isinstance(value, (int, float, np.integer, np.floating)):
        raise InputError(f"{owner}attribute '{key}' is not a number", path)
    value = float(value)
    if not np.isfinite(value):
        raise InputError(f"{owner}attribute '{key}' is {_words(value)}; it must be finite", path)
    return value


def _seed(attrs, path: str) -> int:
    """The file's ``seed`` attribute, a whole number kept exactly (seeds may exceed a double's 53 bits)."""
    if "seed" not in attrs:
        raise InputError("not a ptares dataset (no 'seed' attribute)", path)
    try:
        value = attrs["seed"]
    except (OSError, TypeError):
        raise InputError("attribute 'seed' cannot be read", path) from None
    if isinstance(value, np.ndarray) and value.shape == ():
        value = value[()]
    if isinstance(value, (bool, np.bool_)) or not isinstance(value, (int, np.integer)):
        raise InputError("attribute 'seed' is not a whole number", path)
    return int(value)


def _what_it_holds(dtype) -> str:
    """A dataset's element type in words, for a message refusing it."""
    if h5py.check_string_dtype(dtype) is not None or dtype.kind in "SU":
        return "text"
    return {"i": "integers", "u": "integers", "b": "true/false values", "c": "complex numbers", "O": "objects",
            "V": "records"}.get(dtype.kind, f"values of type {dtype}")


def _checked_array(group: h5py.Group, key: str, dimensions: int, owner: str, path: str) -> h5py.Dataset:
    """The array ``key`` of ``group``, refused unless it is a float array of ``dimensions`` dimensions."""
    array = _member(group, key, path)
    if array is None:
        raise InputError(f"{owner}no '{key}' array", path)
    if not isinstance(array, h5py.Dataset):
        raise InputError(f"{owner}'{key}' is a group, not an array", path)
    if array.shape is None:
        raise InputError(f"{owner}{key} holds no data", path)
    try:
        dtype = array.dtype
    except TypeError:  # an HDF5 type numpy cannot represent
        raise InputError(f"{owner}{key} holds values of a type ptares cannot read", path) from None
    if not np.issubdtype(dtype, np.floating):
        raise InputError(f"{owner}{key} holds {_what_it_holds(dtype)}, not floating-point numbers", path)
    if array.ndim != dimensions:
        raise InputError(f"{owner}{key} has shape {array.shape}; expected {dimensions}-D", path)
    return array


def _text_array(group: h5py.Group, key: str, owner: str, path: str) -> h5py.Dataset:
    """The 1-D array of names ``key`` of ``group``, refused unless it holds byte strings of at most
    :data:`SYSTEM_NAME_BYTES`."""
    array = _member(group, key, path)
    if not isinstance(array, h5py.Dataset) or array.shape is None:
        raise InputError(f"{owner}'{key}' is not an array of names", path)
    try:
        dtype = array.dtype
    except TypeError:
        raise InputError(f"{owner}{key} holds values of a type ptares cannot read", path) from None
    if dtype.kind != "S" or dtype.itemsize > SYSTEM_NAME_BYTES or array.ndim != 1:
        raise InputError(f"{owner}{key} holds {_what_it_holds(dtype)} of shape {array.shape}; expected a 1-D array "
                         f"of names of at most {SYSTEM_NAME_BYTES} bytes", path)
    return array


def _pulsar_arrays(name: str, group, path: str) -> dict:
    """``{key: h5py.Dataset}`` of one pulsar group (``injected/<component>`` keyed by that path),
    each checked for type, dimensions and length before any is read."""
    owner = f"pulsar {_shown(name)}: "
    if not NAME_PATTERN.fullmatch(name):
        raise InputError(f"pulsar name {name!r} is not 1-64 letters, digits, '_', '+', '-', '.' starting with a "
                         "letter or digit", path)
    if not isinstance(group, h5py.Group):
        raise InputError(f"{owner}is an array, not a group", path)
    arrays = {key: _checked_array(group, key, dimensions, owner, path) for key, dimensions in PULSAR_ARRAYS}
    for key in ("measured", "frequency_mhz"):
        if _member(group, key, path) is not None:
            arrays[key] = _checked_array(group, key, 1, owner, path)
    if _member(group, "system", path) is not None:
        arrays["system"] = _text_array(group, "system", owner, path)
    injected = _member(group, "injected", path)
    if injected is not None:
        if not isinstance(injected, h5py.Group):
            raise InputError(f"{owner}'injected' is an array, not a group", path)
        for component in injected:
            arrays[f"injected/{component}"] = _checked_array(injected, component, 1, owner, path)
    count = arrays["mjd"].shape[0]
    if count == 0:
        raise InputError(f"{owner}has no TOAs (mjd is empty)", path)
    if count > MAX_TOAS:
        raise InputError(f"{owner}{count} TOAs, more than ptares handles per pulsar ({MAX_TOAS})", path)
    for key, array in arrays.items():
        if key != "mjd" and array.shape[0] != count:
            values = "rows" if array.ndim == 2 else "values"
            raise InputError(f"{owner}{key} has {array.shape[0]} {values} but mjd {count}", path)
    return arrays


def _check_values(name: str, key: str, values: np.ndarray, path: str) -> None:
    """Refuse NaN or infinite values, TOA errors that are not positive and MJDs out of time order."""
    owner = f"pulsar {_shown(name)}: "
    finite = np.isfinite(values)
    if not finite.all():
        index = tuple(int(i) for i in np.argwhere(~finite)[0])
        raise InputError(f"{owner}{key}[{', '.join(map(str, index))}] is {_words(values[index])}; values must be finite",
                         path)
    if key in ("errors", "frequency_mhz") and np.any(values <= 0):
        index = int(np.flatnonzero(values <= 0)[0])
        what = "TOA errors" if key == "errors" else "radio frequencies"
        raise InputError(f"{owner}{key}[{index}] is {float(values[index])}; {what} must be positive", path)
    if key == "mjd" and np.any(np.diff(values) < 0):
        index = int(np.flatnonzero(np.diff(values) < 0)[0]) + 1
        raise InputError(f"{owner}mjd is not in time order (mjd[{index}] = {float(values[index])!r} comes after "
                         f"mjd[{index - 1}] = {float(values[index - 1])!r})", path)


def _read_pulsar(name: str, group: h5py.Group, arrays: dict, path: str) -> PulsarData:
    """One pulsar's data, every value checked (its arrays' layout already is, by :func:`_pulsar_arrays`)."""
    owner = f"pulsar {_shown(name)}: "
    place = {key: _number(group.attrs, key, owner, path) for key in PULSAR_NUMBERS}
    if abs(place["dec"]) > np.pi / 2:
        raise InputError(f"{owner}dec is {place['dec']} rad, outside [-pi/2, pi/2]", path)
    if place["distance"] <= 0:
        raise InputError(f"{owner}distance is {place['distance']} kpc; it must be positive", path)
    if place["distance_error"] < 0:
        raise InputError(f"{owner}distance_error is {place['distance_error']} kpc; it must not be negative", path)
    values = {}
    for key, array in arrays.items():
        if key == "system":
            values[key] = _system_names(array[()], owner, path)
            continue
        values[key] = np.asarray(array[()], dtype=float)
        _check_values(name, key, values[key], path)
    columns = _plain(arrays["design_matrix"].attrs.get("columns", []))
    columns = columns if isinstance(columns, list) else [columns]
    if columns and len(columns) != values["design_matrix"].shape[1]:
        raise InputError(f"{owner}design_matrix has {values['design_matrix'].shape[1]} columns but "
                         f"{len(columns)} column names", path)
    injected = group.get("injected")
    noise = {k: _plain(v) for k, v in injected.attrs.items()} if injected is not None else {}
    for key, value in noise.items():
        if isinstance(value, float) and not np.isfinite(value):
            raise InputError(f"{owner}injected noise parameter {key} is {_words(value)}; it must be finite", path)
    return PulsarData(
        name=name, **place,
        mjd=values["mjd"], residuals=values["residuals"], errors=values["errors"],
        design_matrix=values["design_matrix"], design_columns=columns,
        injected={key.split("/", 1)[1]: v for key, v in values.items() if key.startswith("injected/")},
        noise=noise, measured=values.get("measured"), frequency_mhz=values.get("frequency_mhz"),
        system=values.get("system"),
    )


def _system_names(raw: np.ndarray, owner: str, path: str) -> np.ndarray:
    """Observing-system names (bytes from the file) as text, each held to the rule of names."""
    names = {}
    for value in np.unique(raw):
        try:
            text = value.decode("utf-8")
        except UnicodeDecodeError:
            raise InputError(f"{owner}system holds a name that is not UTF-8 text", path) from None
        if not NAME_PATTERN.fullmatch(text):
            raise InputError(f"{owner}system name {text!r} is not 1-64 letters, digits, '_', '+', '-', '.' starting "
                             "with a letter or digit", path)
        names[value] = text
    return np.array([names[v] for v in raw], dtype=object).astype(str)


def _signal_arrays(f: h5py.File, path: str) -> dict:
    """``{component: group}`` of ``/signals``, each a group of attributes and arrays."""
    signals = _member(f, "signals", path)
    if signals is None:
        return {}
    if not isinstance(signals, h5py.Group):
        raise InputError("not a ptares dataset ('signals' is an array, not a group)", path)
    groups = {}
    for name in signals:
        group = _member(signals, name, path)
        if not isinstance(group, h5py.Group) or any(not isinstance(_member(group, k, path), h5py.Dataset) for k in group):
            raise InputError(f"signal {_shown(name)}: expected a group of parameters and arrays", path)
        groups[name] = group
    return groups


def _stored_bytes(arrays) -> int:
    """Bytes the ``arrays`` (h5py Datasets) take once read, from their shapes alone."""
    return sum(int(a.size or 0) * a.dtype.itemsize for a in arrays)  # size is None for an empty dataspace


def _read(f: h5py.File, path: str) -> Dataset:
    """The dataset in the open file ``f`` (named ``path`` in messages): layout and sizes checked from the
    metadata first, so a malformed or oversized file is refused before any array is read."""
    pulsars_group = _member(f, "pulsars", path)
    if pulsars_group is None:
        raise InputError("not a ptares dataset (no 'pulsars' group)", path)
    if not isinstance(pulsars_group, h5py.Group):
        raise InputError("not a ptares dataset ('pulsars' is an array, not a group)", path)
    for key in FILE_NUMBERS:
        if key not in f.attrs:
            raise InputError(f"not a ptares dataset (no '{key}' attribute)", path)
    numbers = {key: _number(f.attrs, key, "", path) for key in FILE_NUMBERS}
    seed = _seed(f.attrs, path)
    if numbers["span"] <= 0:
        raise InputError(f"attribute 'span' is {numbers['span']} s; it must be positive", path)
    names = list(pulsars_group)
    if not names:
        raise InputError("has no pulsars (the 'pulsars' group is empty)", path)
    layouts = {name: _pulsar_arrays(name, _member(pulsars_group, name, path), path) for name in names}
    total = sum(arrays["mjd"].shape[0] for arrays in layouts.values())
    if total > MAX_TOTAL_TOAS:
        raise InputError(f"{total} TOAs in all, more than ptares handles ({MAX_TOTAL_TOAS})", path)
    signal_groups = _signal_arrays(f, path)
    needed = _stored_bytes(a for arrays in layouts.values() for a in arrays.values())
    needed += _stored_bytes(s[k] for s in signal_groups.values() for k in s)
    if needed > MEMORY_LIMIT:
        raise InputError(f"its arrays take {needed / 1e9:.3g} GB, more than ptares loads "
                         f"({MEMORY_LIMIT / 1e9:.3g} GB)", path)
    pulsars = [_read_pulsar(name, pulsars_group[name], layouts[name], path) for name in names]
    signals = {name: {**{k: _plain(v) for k, v in s.attrs.items()}, **{k: v[()] for k, v in s.items()}}
               for name, s in signal_groups.items()}
    stored = [k for p in pulsars for k in (*p.noise, *p.injected)] + [k for s in signals.values() for k in s]
    stored += list(signals)
    stored += [k for s in signals.values() if "sources" in s for k in (s["sources"].dtype.names or ())]
    note = earlier_names(stored)
    if note:
        raise InputError(f"written by an earlier ptares ({note}); simulate or import it again", path)
    return Dataset(
        pulsars=pulsars,
        config=_plain(f.attrs.get("config", "")),
        seed=seed,
        ptares_version=_plain(f.attrs.get("ptares_version", "")),
        created=_plain(f.attrs.get("created", "")),
        start_mjd=numbers["start_mjd"],
        span=numbers["span"],
        signals=signals,
    )


def load_dataset(path) -> Dataset:
    """Read a dataset written by :func:`write_dataset`, checked throughout.

    Every fault is an :class:`InputError` naming the file: one that is missing, not a
    regular file, not HDF5, truncated or damaged; a file without the layout in this
    module's docstring (naming the group, array or attribute that is wrong, and the
    pulsar); arrays that are not floating point, of the wrong shape or of lengths that
    disagree; NaN or infinite values, TOA errors that are not positive, MJDs out of
    time order; names breaking :data:`~ptares.limits.NAME_PATTERN`; more TOAs than
    :data:`~ptares.limits.MAX_TOAS` in a pulsar or :data:`~ptares.limits.MAX_TOTAL_TOAS`
    in all, or arrays needing more than :data:`~ptares.limits.MEMORY_LIMIT` bytes
    (counted from the file's metadata, before any is read).
    """
    path = Path(path)
    _check_file(path)
    handle = _open(path)
    try:
        with handle as f:
            return _read(f, str(path))
    except (OSError, RuntimeError, KeyError):  # HDF5 failing to read what its metadata promised
        raise InputError("truncated or damaged HDF5 file", str(path)) from None

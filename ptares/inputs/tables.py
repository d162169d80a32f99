"""Plain tables in and out: a TOA table and a pulsar catalogue (CSV).

TOA table, one row per TOA: ``pulsar``, ``mjd`` (days), ``error`` with its unit
in the header (``error_us``, ``error_ns``, ``error_s``; plain ``error`` is in
microseconds), optional ``residual`` (same unit rule; plain ``residual`` is in
microseconds) and ``frequency_mhz``.  Columns ``injected_<component>_s`` and
``measured_s`` carry injected components and measured residuals (written by
:func:`export_tables`).

Catalogue, one row per pulsar: ``name``, ``ra``, ``dec`` (degrees or
sexagesimal, or ``ra_rad``/``dec_rad``), ``distance`` and ``distance_error``
(kpc, also ``distance_kpc``...), and optionally the noise columns
``white_scale``, ``white_quadrature_s``, ``red_amplitude``, ``red_spectral_index``.

Files are read with Python's csv module; every fault names the file, the row
(the header is row 1) and the column, and nothing is written.
"""

from __future__ import annotations

import csv
import io
import math
import warnings
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from ptares.dataset import Dataset, atomic_path
from ptares.errors import InputError, PhysicsWarning
from ptares.inputs.config import read_text
from ptares.inputs.units import parse_dec, parse_ra
from ptares.version import earlier_names

__all__ = ["PulsarRow", "TableArray", "read_tables", "export_tables"]

_UNITS = {"s": 1.0, "ms": 1e-3, "us": 1e-6, "ns": 1e-9}
_NOISE = {"white_scale": 1.0, "white_quadrature_s": 1.0, "red_amplitude": 1.0, "red_spectral_index": 1.0, "true_distance_kpc": 1.0}


@dataclass
class PulsarRow:
    name: str
    ra: float  #: radians
    dec: float  #: radians
    distance: float  #: kpc
    distance_error: float  #: kpc
    noise: dict = field(default_factory=dict)  #: white_scale, white_quadrature (s), red_amplitude, red_spectral_index


@dataclass
class TableArray:
    """Catalogue rows (catalogue order) and, per pulsar, TOAs sorted in time."""

    pulsars: list
    mjd: dict
    errors: dict  #: s
    residuals: dict  #: s, or None without a residual column
    injected: dict  #: name -> {component: (n,) s}
    measured: dict  #: name -> (n,) s or None


def _rows(path: Path):
    """Header and rows; each row carries its line number in the file under ``"#line"``."""
    text = read_text(path, encoding="utf-8-sig")  # -sig: a leading byte-order mark is dropped
    try:
        reader = csv.DictReader(io.StringIO(text, newline=""))
        header = [h.strip() for h in (reader.fieldnames or [])]
        rows = []
        for row in reader:
            entry = {k.strip(): (v or "").strip() for k, v in row.items() if isinstance(k, str)}
            entry["#line"] = reader.line_num
            rows.append(entry)
    except csv.Error as exc:
        raise InputError(f"cannot read the table ({exc})", str(path)) from None
    if not header:
        raise InputError("is empty (no header row)", str(path))
    repeated = sorted({h for h in header if header.count(h) > 1})
    if repeated:
        raise InputError(f"row 1: column(s) {', '.join(repeated)} appear more than once", str(path))
    return header, rows


def _number(path, row_number, column, text) -> float:
    try:
        value = float(text)
    except ValueError:
        raise InputError(f"row {row_number}, column {column}: {text!r} is not a number", str(path)) from None
    if not math.isfinite(value):
        raise InputError(f"row {row_number}, column {column}: {text!r} is not finite", str(path))
    return value


def _unit_column(header, stem, path, required=True):
    """``(column, factor to seconds)`` for ``stem`` or ``stem_<unit>``; plain ``stem`` is microseconds."""
    found = [(h, _UNITS[h[len(stem) + 1:]]) for h in header if h.startswith(stem + "_") and h[len(stem) + 1:] in _UNITS]
    if stem in header:
        found.append((stem, 1e-6))
    if len(found) > 1:
        raise InputError(f"has several {stem} columns: {', '.join(c for c, _ in found)}", str(path))
    if not found:
        if required:
            raise InputError(f"has no {stem} column (expected {stem}, {stem}_us, {stem}_ns or {stem}_s)", str(path))
        return None, None
    return found[0]


def _catalogue(path: Path) -> list:
    header, rows = _rows(path)
    note = earlier_names(header, known=_NOISE)
    if note:
        raise InputError(f"a column has an earlier name ({note})", str(path))
    for column in ("name",):
        if column not in header:
            raise InputError(f"has no {column} column", str(path))
    radians = "ra_rad" in header and "dec_rad" in header
    if not radians and not ("ra" in header and "dec" in header):
        raise InputError("needs ra and dec (or ra_rad and dec_rad) columns", str(path))
    distance = next((c for c in ("distance_kpc", "distance") if c in header), None)
    distance_error = next((c for c in ("distance_error_kpc", "distance_error") if c in header), None)
    if distance is None:
        raise InputError("has no distance column (kpc)", str(path))
    pulsars, seen = [], set()
    for row in rows:
        number = row["#line"]
        name = row.get("name", "")
        if not name:
            raise InputError(f"row {number}, column name: empty", str(path))
        if name in seen:
            raise InputError(f"row {number}, column name: {name!r} appears twice", str(path))
        seen.add(name)
        if radians:
            ra, dec = (_number(path, number, c, row[c]) for c in ("ra_rad", "dec_rad"))
        else:
            angles = []
            for column, parse in (("ra", parse_ra), ("dec", parse_dec)):
                try:
                    angles.append(math.radians(parse(row[column])))
                except ValueError as exc:
                    raise InputError(f"row {number}, column {column}: {exc}", str(path)) from None
            ra, dec = angles
        d = _number(path, number, distance, row[distance])
        error = _number(path, number, distance_error, row[distance_error]) if distance_error else 0.0
        if d <= 0:
            raise InputError(f"row {number}, column {distance}: the distance must be positive", str(path))
        if error < 0:
            raise InputError(f"row {number}, column {distance_error}: the distance error must not be negative", str(path))
        noise = {key: _number(path, number, key, row[key]) for key in _NOISE if key in header and row.get(key, "") != ""}
        for key, value in noise.items():
            if value < 0 or (key == "white_scale" and value == 0):
                raise InputError(f"row {number}, column {key}: {value} is not allowed (negative or zero scale)", str(path))
        if "white_quadrature_s" in noise:
            noise["white_quadrature"] = noise.pop("white_quadrature_s")
        if "true_distance_kpc" in noise:
            noise["distance"] = noise.pop("true_distance_kpc")
        pulsars.append(PulsarRow(name, ra, dec, d, error, noise))
    if not pulsars:
        raise InputError("lists no pulsars", str(path))
    return pulsars


def read_tables(table, catalogue, columns_needed: int, need_residuals: bool = False) -> TableArray:
    """Read and check a TOA table and its catalogue; ``columns_needed``: timing-model columns."""
    table, catalogue = Path(table), Path(catalogue)
    pulsars = _catalogue(catalogue)
    header, rows = _rows(table)
    for column in ("pulsar", "mjd"):
        if column not in header:
            raise InputError(f"has no {column} column", str(table))
    error_column, error_factor = _unit_column(header, "error", table)
    residual_column, residual_factor = _unit_column(header, "residual", table, required=need_residuals)
    injected_columns = [h for h in header if h.startswith("injected_") and h.endswith("_s")]
    names = [p.name for p in pulsars]
    data = {name: [] for name in names}
    if not rows:
        raise InputError("has a header but no TOAs", str(table))
    for row in rows:
        number = row["#line"]
        name = row["pulsar"]
        if name not in data:
            raise InputError(f"row {number}, column pulsar: {name!r} is not in the catalogue {catalogue.name}", str(table))
        mjd = _number(table, number, "mjd", row["mjd"])
        error = _number(table, number, error_column, row[error_column]) * error_factor
        if error <= 0:
            raise InputError(f"row {number}, column {error_column}: TOA errors must be positive", str(table))
        residual = _number(table, number, residual_column, row[residual_column]) * residual_factor if residual_column else 0.0
        extra = [_number(table, number, c, row[c]) for c in injected_columns]
        measured = _number(table, number, "measured_s", row["measured_s"]) if "measured_s" in header else None
        data[name].append((mjd, error, residual, extra, measured, number))
    out = TableArray(pulsars, {}, {}, {}, {}, {})
    for name in names:
        entries = data[name]
        if not entries:
            raise InputError(f"pulsar {name!r} has no TOAs in {table.name}", str(catalogue))
        mjd = np.array([e[0] for e in entries])
        if np.any(np.diff(mjd) < 0):
            warnings.warn(f"{table}: TOAs of {name} were not in time order; sorted", PhysicsWarning, stacklevel=2)
        order = np.argsort(mjd, kind="stable")
        entries = [entries[i] for i in order]
        mjd = mjd[order]
        repeated = np.flatnonzero(np.diff(mjd) == 0)
        if repeated.size:
            row = entries[repeated[0] + 1][5]
            raise InputError(f"row {row}, column mjd: duplicate TOA of {name} at MJD {float(mjd[repeated[0]])!r}", str(table))
        if mjd.size <= columns_needed:
            raise InputError(f"pulsar {name!r} has {mjd.size} TOAs, not more than the {columns_needed} timing-model columns",
                             str(table))
        out.mjd[name] = mjd
        out.errors[name] = np.array([e[1] for e in entries])
        out.residuals[name] = np.array([e[2] for e in entries]) if residual_column else None
        out.injected[name] = {c[len("injected_"):-len("_s")]: np.array([e[3][k] for e in entries])
                              for k, c in enumerate(injected_columns)}
        out.measured[name] = np.array([e[4] for e in entries]) if "measured_s" in header else None
    return out


def _csv_text(header, rows) -> str:
    buffer = io.StringIO()
    writer = csv.writer(buffer)
    writer.writerow(header)
    writer.writerows(rows)
    return buffer.getvalue()


def export_tables(dataset: Dataset, directory) -> list:
    """Write ``toas.csv``, ``pulsars.csv`` and ``import.toml`` (to import them again) into ``directory``.

    Numbers are written with Python's shortest exact representation, so an
    import reproduces the arrays bit for bit.
    """
    directory = Path(directory)
    components = sorted({c for p in dataset.pulsars for c in p.injected})
    has_measured = any(p.measured is not None for p in dataset.pulsars)
    header = ["pulsar", "mjd", "error_s", "residual_s"] + [f"injected_{c}_s" for c in components]
    header += ["measured_s"] if has_measured else []
    rows = []
    for p in dataset.pulsars:
        for i in range(p.mjd.size):
            row = [p.name, repr(float(p.mjd[i])), repr(float(p.errors[i])), repr(float(p.residuals[i]))]
            row += [repr(float(p.injected[c][i])) if c in p.injected else "0.0" for c in components]
            row += [repr(float(p.measured[i])) if p.measured is not None else "0.0"] if has_measured else []
            rows.append(row)
    noise_keys = ["white_scale", "white_quadrature", "red_amplitude", "red_spectral_index", "distance"]
    catalogue_header = ["name", "ra_rad", "dec_rad", "distance_kpc", "distance_error_kpc",
                        "white_scale", "white_quadrature_s", "red_amplitude", "red_spectral_index", "true_distance_kpc"]
    catalogue_rows = [
        [p.name, repr(float(p.ra)), repr(float(p.dec)), repr(float(p.distance)), repr(float(p.distance_error))]
        + [repr(float(p.noise[k])) if k in p.noise else "" for k in noise_keys]
        for p in dataset.pulsars
    ]
    terms = []
    for column in dataset.pulsars[0].design_columns:
        term = "yearly" if column.startswith("yearly") else column
        if term not in terms:
            terms.append(term)
    end = dataset.start_mjd + dataset.span / 86400.0
    signals = {name: {k: v for k, v in values.items() if not isinstance(v, np.ndarray)}
               for name, values in dataset.signals.items()}
    importer = (
        "# Re-import these tables with: ptares import import.toml --out DIR\n"
        "[array]\ntable = \"toas.csv\"\ncatalogue = \"pulsars.csv\"\nsignals = \"signals.json\"\n"
        f"window = [{dataset.start_mjd!r}, {end!r}]\n\n[timing_model]\nfit = {terms!r}\n".replace("'", '"')
    )
    paths = []
    import json

    for name, text in (("toas.csv", _csv_text(header, rows)), ("pulsars.csv", _csv_text(catalogue_header, catalogue_rows)),
                       ("signals.json", json.dumps(signals, indent=1, default=str)), ("import.toml", importer)):
        with atomic_path(directory / name) as temporary:
            temporary.write_text(text)
        paths.append(directory / name)
    return paths

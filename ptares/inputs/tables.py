"""Plain tables in and out: a TOA table and a pulsar catalogue (CSV).

TOA table, one row per TOA: ``pulsar``, ``mjd`` (days), ``error`` with its unit
in the header (``error_us``, ``error_ns``, ``error_s``; plain ``error`` is in
microseconds) and optional ``residual`` (same unit rule; plain ``residual`` is in
microseconds).  Optional ``frequency_mhz`` (the radio frequency of each TOA, MHz, finite
and positive) and ``system`` (the observing system, receiver and backend, of each TOA, a name
by the rule of pulsar names) let one epoch hold several TOAs, one per sub-band or receiver: two
TOAs of a pulsar are duplicates only when their MJD, radio frequency and system are all equal
(a column the table lacks counts as equal).  TOAs are sorted by MJD, then system, then
frequency, whatever the order of the rows.  Columns ``injected_<component>_s`` and
``measured_s`` carry injected components and measured residuals (written by
:func:`export_tables`).

Catalogue, one row per pulsar: ``name``, ``ra``, ``dec`` (degrees or
sexagesimal, or ``ra_rad``/``dec_rad``), ``distance`` and ``distance_error``
(kpc, also ``distance_kpc``...), and optionally the noise columns
``white_scale``, ``white_quadrature_s``, ``red_amplitude``, ``red_spectral_index``.

Files are read with Python's csv module, comma-separated (a tab- or
semicolon-separated file is refused as such); every row has as many fields as the
header; pulsar names follow the rule of names in configs (:data:`NAME_PATTERN`: no
path separators, nothing a spreadsheet would run as a formula); a table holds at most
:data:`MAX_TOAS` TOAs per pulsar and :data:`MAX_TOTAL_TOAS` in all.  Every fault names
the file, the row (the header is row 1) and the column, and nothing is written.
Columns that are not read (a ``comment`` column, say, or ``residual_us`` when only the
epochs and errors are taken) are named in a note once both files have passed every check.

Signals file (``signals.json``, written by :func:`export_tables`, read by
:func:`read_signals`): an object of component name -> object of parameters, as in a
dataset's ``/signals``.  A parameter is a number, a string, ``true``/``false``, a
list (nested lists of equal lengths) of numbers, of strings or of ``true``/``false``,
or an array such as a table of binaries::

    {"kind": "array", "dtype": [["name", "|S64"], ["ra", "<f8"], ...], "shape": [2],
     "values": [["binary1", 0.61, ...], ["binary2", 2.3, ...]]}

``dtype`` is a numpy type string (``<f8``, ``<i8``, ``|b1``, ``|S64``...) or, for a
table, a list of ``[field, type]``; ``values`` nests lists to ``shape``, a table's
rows being lists in field order; byte strings are written as UTF-8 text.  Floats are
written as Python's shortest exact representation, so every value comes back bit for
bit, with its type.  JSON has no NaN or infinity: such a float is written
``{"kind": "float", "value": "NaN"}`` (or ``"Infinity"``, ``"-Infinity"``), and the
bare tokens ``NaN``/``Infinity`` are refused.  Names (components, parameters, fields)
are 1-64 letters, digits, ``_ + - .``; whole numbers outside arrays fit 64 bits, as
in the dataset file.  Every fault names the file and the key.
"""

from __future__ import annotations

import collections
import csv
import io
import json
import math
import warnings
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from ptares.dataset import Dataset, atomic_path
from ptares.errors import InputError, PhysicsWarning
from ptares.inputs.config import MAX_TOAS, MAX_TOTAL_TOAS, NAME_PATTERN, read_json, read_text
from ptares.inputs.units import parse_dec, parse_ra
from ptares.limits import MEMORY_LIMIT, NESTING_LIMIT
from ptares.version import earlier_names

__all__ = ["PulsarRow", "TableArray", "read_tables", "export_tables", "signals_text", "read_signals", "WaveTable", "read_wave_table"]

_UNITS = {"s": 1.0, "ms": 1e-3, "us": 1e-6, "ns": 1e-9}
_NOISE = {"white_scale": 1.0, "white_quadrature_s": 1.0, "red_amplitude": 1.0, "red_spectral_index": 1.0, "true_distance_kpc": 1.0}
#: Further injected-noise columns a catalogue may carry (written by :func:`export_tables`, kept by an import):
#: epoch jitter and the chromatic processes; white noise per observing system as ``white_scale:SYSTEM``,
#: ``white_quadrature_s:SYSTEM``, ``white_jitter_s:SYSTEM``.
_MORE_NOISE = ("white_jitter_s", "dispersion_amplitude", "dispersion_spectral_index", "dispersion_chromatic_index",
               "scattering_amplitude", "scattering_spectral_index", "scattering_chromatic_index")
_PER_SYSTEM = ("white_scale", "white_quadrature_s", "white_jitter_s")
#: Dataset noise keys whose catalogue column carries a unit suffix (the rest are the key itself).
_NOISE_COLUMNS = {"white_quadrature": "white_quadrature_s", "white_jitter": "white_jitter_s", "distance": "true_distance_kpc"}


def _noise_column(key: str) -> str:
    """The catalogue column of a dataset noise key (``white_quadrature:Lband`` -> ``white_quadrature_s:Lband``)."""
    head, colon, system = key.partition(":")
    return _NOISE_COLUMNS.get(head, head) + colon + system


def _noise_key(column: str) -> str:
    """The dataset noise key of a catalogue column (the inverse of :func:`_noise_column`)."""
    head, colon, system = column.partition(":")
    keys = {c: k for k, c in _NOISE_COLUMNS.items()}
    return keys.get(head, head) + colon + system


def _noise_columns(header) -> list:
    """The injected-noise columns of a catalogue header, per-system ones included."""
    return [c for c in header if c in _NOISE or c in _MORE_NOISE
            or (c.partition(":")[0] in _PER_SYSTEM and NAME_PATTERN.fullmatch(c.partition(":")[2]))]
#: The rule of :data:`NAME_PATTERN`, in words.
_NAME_RULE = "1-64 letters, digits, '_', '+', '-', '.', starting with a letter or digit"
#: Other field separators a spreadsheet writes, recognised in a header of one column.
_SEPARATORS = {
    "\t": "looks tab-separated; ptares reads comma-separated tables (save as CSV)",
    ";": "looks semicolon-separated; ptares reads comma-separated tables with decimal points "
         "(save as CSV with '.' as the decimal separator)",
}
_SHOWN_CHARACTERS = 40  #: of a cell or column name quoted in a message (a cell may be megabytes)
_SHOWN_COLUMNS = 8  #: ignored columns named in a note before "and N more"


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
    residuals: dict  #: s, or None without a residual column (or when it is not needed)
    injected: dict  #: name -> {component: (n,) s}
    measured: dict  #: name -> (n,) s or None
    frequency_mhz: dict = field(default_factory=dict)  #: name -> (n,) MHz, or None without a frequency_mhz column
    system: dict = field(default_factory=dict)  #: name -> (n,) str observing-system names, or None without a system column


def _shown(text: str) -> str:
    """``text`` quoted for a message (control characters escaped), cut to a few dozen characters."""
    return repr(text) if len(text) <= _SHOWN_CHARACTERS else repr(text[:_SHOWN_CHARACTERS]) + "..."


def _column_label(column: str) -> str:
    """A column name for a message: as it is when it follows the rule of names, else quoted and cut."""
    return column if NAME_PATTERN.fullmatch(column) else _shown(column)


def _field_count_fault(number: int, count: int, expected: int) -> str:
    words = f"row {number}: {count} field{'s' if count != 1 else ''}, but the header (row 1) has {expected}"
    if count > expected:
        words += " (a decimal comma, as in 1,5, splits a number in two: write 1.5; quote text that holds a comma)"
    return words


def _rows(path: Path):
    """The header (stripped column names) and an iterator of ``(row number, {column: stripped text})``.

    Row numbers count file lines, the header being row 1.  Blank rows, also ``,,,`` as
    spreadsheets write them, are skipped; a row of more or fewer fields than the header is
    refused.  Rows are read as they are used, so a table over a TOA limit is refused without
    holding all of it.  Unnamed columns (a header ending in a comma) are left out of the rows.
    """
    text = read_text(path, encoding="utf-8-sig")  # -sig: a leading byte-order mark is dropped
    reader = csv.reader(io.StringIO(text, newline=""))
    try:
        header = [h.strip() for h in next(reader, [])]
    except csv.Error as exc:
        raise InputError(f"row 1: cannot read the table ({exc})", str(path)) from None
    if not any(header):
        raise InputError("is empty (no header row)" if not text.strip() else "row 1 is blank; it must name the columns",
                         str(path))
    if len(header) == 1:
        for separator, fault in _SEPARATORS.items():
            if separator in header[0]:
                raise InputError(fault, str(path))
    counts = collections.Counter(h for h in header if h)
    repeated = sorted(h for h, n in counts.items() if n > 1)
    if repeated:
        raise InputError(f"row 1: column(s) {', '.join(map(_column_label, repeated))} appear more than once", str(path))

    def rows():
        last = reader.line_num  # the line a record ends on; the next one starts after it
        try:
            for fields in reader:
                number, last = last + 1, reader.line_num
                if not any(f.strip() for f in fields):
                    continue
                if len(fields) != len(header):
                    raise InputError(_field_count_fault(number, len(fields), len(header)), str(path))
                yield number, {h: f.strip() for h, f in zip(header, fields) if h}
        except csv.Error as exc:
            raise InputError(f"row {last + 1}: cannot read the table ({exc})", str(path)) from None

    return header, rows()


def _number(path, row_number, column, text) -> float:
    try:
        value = float(text)
    except ValueError:
        raise InputError(f"row {row_number}, column {column}: {_shown(text)} is not a number", str(path)) from None
    if not math.isfinite(value):
        raise InputError(f"row {row_number}, column {column}: {_shown(text)} is not finite", str(path))
    return value


def _name(path, row_number, column, text, kind: str) -> str:
    """``text`` if it is a name by the rule of names in configs (:data:`NAME_PATTERN`); ``kind`` says what
    name it is in the fault ("a pulsar name")."""
    if not text:
        raise InputError(f"row {row_number}, column {column}: empty", str(path))
    if not NAME_PATTERN.fullmatch(text):
        raise InputError(f"row {row_number}, column {column}: {_shown(text)} is not {kind} ({_NAME_RULE})", str(path))
    return text


def _pulsar_name(path, row_number, column, text) -> str:
    """``text`` if it is a pulsar name by the rule of names in configs (it becomes an HDF5 group and a file-name part)."""
    return _name(path, row_number, column, text, "a pulsar name")


def _system_name(path, row_number, column, text) -> str:
    """``text`` if it is an observing-system name: the rule of pulsar names (it is written to HDF5 and to tables)."""
    return _name(path, row_number, column, text, "an observing-system name")


def _frequency(path, row_number, column, text) -> float:
    """A radio frequency in MHz: a finite positive number."""
    value = _number(path, row_number, column, text)
    if value <= 0:
        raise InputError(f"row {row_number}, column {column}: {_shown(text)} is not positive (a radio frequency in MHz)",
                         str(path))
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


def _ignored_note(path, header, reasons: dict) -> str | None:
    """A note naming every column of ``header`` that is not read, grouped by why: ``reasons`` maps a
    column read from to None and a known column left unread to its reason; any other is not a ptares column."""
    groups = {}
    for index, column in enumerate(header, 1):
        if column and reasons.get(column, "") is None:
            continue
        label = _column_label(column) if column else f"unnamed column {index}"
        groups.setdefault(reasons.get(column) or "not read by ptares", []).append(label)
    if not groups:
        return None
    parts = []
    for reason, labels in groups.items():
        more = f" and {len(labels) - _SHOWN_COLUMNS} more" if len(labels) > _SHOWN_COLUMNS else ""
        parts.append(f"{', '.join(labels[:_SHOWN_COLUMNS])}{more} ({reason})")
    return f"{path}: ignoring column(s) {'; '.join(parts)}"


def _catalogue(path: Path, all_noise: bool = True) -> tuple[list, str | None]:
    """The catalogue's pulsars and the note on its ignored columns (None without any).  ``all_noise``: keep
    the jitter, chromatic and per-system noise columns (an import); else they are named as unread."""
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
    angles_used, angles_unused = (("ra_rad", "dec_rad"), ("ra", "dec")) if radians else (("ra", "dec"), ("ra_rad", "dec_rad"))
    noise_columns = _noise_columns(header)
    reasons = dict.fromkeys(("name", distance, distance_error, *angles_used, *_NOISE))
    reasons.update(dict.fromkeys([c for c in noise_columns if c not in _NOISE],
                                 None if all_noise else "read by ptares import only"))
    if not all_noise:
        noise_columns = [c for c in noise_columns if c in _NOISE]
    reasons.update(dict.fromkeys(angles_unused, "ra_rad and dec_rad are used" if radians
                                 else "ra_rad and dec_rad go together; ra and dec are used"))
    reasons.update({c: f"{distance} is used" for c in ("distance_kpc", "distance") if c != distance})
    reasons.update({c: f"{distance_error} is used" for c in ("distance_error_kpc", "distance_error") if c != distance_error})
    pulsars, seen = [], set()
    for number, row in rows:
        name = _pulsar_name(path, number, "name", row["name"])
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
        noise = {key: _number(path, number, key, row[key]) for key in noise_columns if row.get(key, "") != ""}
        for key, value in noise.items():
            if "index" in key and key != "red_spectral_index":
                continue  # spectral and chromatic indices of the chromatic processes may be any finite number
            if value < 0 or (key.partition(":")[0] == "white_scale" and value == 0):
                raise InputError(f"row {number}, column {key}: {value} is not allowed (negative or zero scale)", str(path))
        noise = {_noise_key(key): value for key, value in noise.items()}
        pulsars.append(PulsarRow(name, ra, dec, d, error, noise))
    if not pulsars:
        raise InputError("lists no pulsars", str(path))
    return pulsars, _ignored_note(path, header, reasons)


def _signal_columns(header, path) -> list:
    """The ``injected_<component>_s`` columns; a component name follows the rule of names (it becomes an HDF5 name)."""
    columns = [h for h in header if h.startswith("injected_") and h.endswith("_s")]
    for column in columns:
        if not NAME_PATTERN.fullmatch(column[len("injected_"):-len("_s")]):
            raise InputError(f"row 1, column {_column_label(column)}: the component name between injected_ and _s must be "
                             f"{_NAME_RULE}", str(path))
    return columns


def read_tables(table, catalogue, columns_needed: int, need_residuals: bool = False,
                need_signals: bool | None = None) -> TableArray:
    """Read and check a TOA table and its catalogue; ``columns_needed``: timing-model columns.

    ``need_residuals``: read the residual column (import, inject mode); without it the residual
    column is left unread.  ``need_signals``: read the ``injected_<component>_s`` and
    ``measured_s`` columns (``ptares import``); by default as ``need_residuals``.  Columns left
    unread, the table's TOAs out of time order (sorted) are told in :class:`PhysicsWarning` notes,
    once both files have passed every check, so that a refused table gets only its one-line fault.

    The optional ``frequency_mhz`` (MHz) and ``system`` columns are always read.  Each pulsar's TOAs
    are sorted by MJD, then system, then frequency (a stable sort), so the arrays do not depend on
    the order of the rows; TOAs equal in all three are refused as duplicates.
    """
    table, catalogue = Path(table), Path(catalogue)
    need_signals = need_residuals if need_signals is None else need_signals
    pulsars, catalogue_note = _catalogue(catalogue, all_noise=need_signals)
    header, rows = _rows(table)
    for column in ("pulsar", "mjd"):
        if column not in header:
            raise InputError(f"has no {column} column", str(table))
    error_column, error_factor = _unit_column(header, "error", table)
    residual_column, residual_factor = _unit_column(header, "residual", table, required=need_residuals)
    signal_columns = _signal_columns(header, table)
    reasons = dict.fromkeys(("pulsar", "mjd", error_column))
    reasons.update(dict.fromkeys([residual_column] if residual_column else [],
                                 None if need_residuals else "only epochs and errors are taken"))
    reasons.update(dict.fromkeys(signal_columns + ["measured_s"], None if need_signals else "read by ptares import only"))
    has_frequency, has_system = "frequency_mhz" in header, "system" in header
    reasons.update(dict.fromkeys(("frequency_mhz", "system")))  # read whenever present
    if not need_residuals:
        residual_column = None
    injected_columns = signal_columns if need_signals else []
    measured = need_signals and "measured_s" in header
    names = [p.name for p in pulsars]
    data = {name: [] for name in names}
    total = 0
    for number, row in rows:
        name = _pulsar_name(table, number, "pulsar", row["pulsar"])
        if name not in data:
            raise InputError(f"row {number}, column pulsar: {name!r} is not in the catalogue {catalogue.name}", str(table))
        if len(data[name]) >= MAX_TOAS:
            raise InputError(f"row {number}: pulsar {name!r} has more TOAs than ptares handles per pulsar ({MAX_TOAS})",
                             str(table))
        total += 1
        if total > MAX_TOTAL_TOAS:
            raise InputError(f"row {number}: more TOAs in all than ptares handles ({MAX_TOTAL_TOAS})", str(table))
        mjd = _number(table, number, "mjd", row["mjd"])
        error = _number(table, number, error_column, row[error_column]) * error_factor
        if error <= 0:
            raise InputError(f"row {number}, column {error_column}: TOA errors must be positive", str(table))
        residual = _number(table, number, residual_column, row[residual_column]) * residual_factor if residual_column else 0.0
        extra = [_number(table, number, c, row[c]) for c in injected_columns]
        measured_value = _number(table, number, "measured_s", row["measured_s"]) if measured else None
        frequency = _frequency(table, number, "frequency_mhz", row["frequency_mhz"]) if has_frequency else 0.0
        system = _system_name(table, number, "system", row["system"]) if has_system else ""
        data[name].append((mjd, error, residual, extra, measured_value, number, frequency, system))
    if not total:
        raise InputError("has a header but no TOAs", str(table))
    notes = [note for note in (catalogue_note, _ignored_note(table, header, reasons)) if note]
    out = TableArray(pulsars, {}, {}, {}, {}, {})
    for name in names:
        entries = data[name]
        if not entries:
            raise InputError(f"pulsar {name!r} has no TOAs in {table.name}", str(catalogue))
        mjd = np.array([e[0] for e in entries])
        if np.any(np.diff(mjd) < 0):
            notes.append(f"{table}: TOAs of {name} were not in time order; sorted")
        frequency = np.array([e[6] for e in entries])  # 0.0 throughout without a frequency_mhz column
        system = np.array([e[7] for e in entries], dtype=str)  # "" throughout without a system column
        order = np.lexsort((frequency, system, mjd))  # by MJD, then system, then frequency; stable
        entries = [entries[i] for i in order]
        mjd, frequency, system = mjd[order], frequency[order], system[order]
        same = (np.diff(mjd) == 0) & (np.diff(frequency) == 0) & (system[1:] == system[:-1])
        repeated = np.flatnonzero(same)
        if repeated.size:
            first = repeated[0]
            row = entries[first + 1][5]
            where = f"MJD {float(mjd[first])!r}"
            where += f", {float(frequency[first])!r} MHz" if has_frequency else ""
            where += f", system {system[first]}" if has_system else ""
            raise InputError(f"row {row}, column mjd: duplicate TOA of {name} at {where}", str(table))
        if mjd.size <= columns_needed:
            raise InputError(f"pulsar {name!r} has {mjd.size} TOAs, not more than the {columns_needed} timing-model columns",
                             str(table))
        out.mjd[name] = mjd
        out.errors[name] = np.array([e[1] for e in entries])
        out.residuals[name] = np.array([e[2] for e in entries]) if residual_column else None
        out.injected[name] = {c[len("injected_"):-len("_s")]: np.array([e[3][k] for e in entries])
                              for k, c in enumerate(injected_columns)}
        out.measured[name] = np.array([e[4] for e in entries]) if measured else None
        out.frequency_mhz[name] = frequency if has_frequency else None
        out.system[name] = system if has_system else None
    for note in notes:
        warnings.warn(note, PhysicsWarning, stacklevel=2)
    return out


def _csv_text(header, rows) -> str:
    buffer = io.StringIO()
    writer = csv.writer(buffer)
    writer.writerow(header)
    writer.writerows(rows)
    return buffer.getvalue()


def export_tables(dataset: Dataset, directory) -> list:
    """Write ``toas.csv``, ``pulsars.csv``, ``signals.json`` (every injected-signal parameter, arrays
    included) and ``import.toml`` (to import them again) into ``directory``.

    Numbers are written with Python's shortest exact representation, so an
    import reproduces the arrays and the signals bit for bit.  Everything is
    prepared before the first file is written.

    The radio frequencies (``frequency_mhz``, MHz) and observing systems (``system``) of the
    TOAs are written as columns of ``toas.csv`` only when every pulsar of the dataset has them
    (each column on its own); when some pulsar lacks them the column is left out altogether,
    since the table has no way to say "not recorded" for one pulsar.
    """
    directory = Path(directory)
    components = sorted({c for p in dataset.pulsars for c in p.injected})
    has_measured = any(p.measured is not None for p in dataset.pulsars)
    header = ["pulsar", "mjd", "error_s", "residual_s"] + [f"injected_{c}_s" for c in components]
    header += ["measured_s"] if has_measured else []
    has_frequency = all(p.frequency_mhz is not None for p in dataset.pulsars)
    has_system = all(p.system is not None for p in dataset.pulsars)
    header += ["frequency_mhz"] if has_frequency else []
    header += ["system"] if has_system else []
    rows = []
    for p in dataset.pulsars:
        for i in range(p.mjd.size):
            row = [p.name, repr(float(p.mjd[i])), repr(float(p.errors[i])), repr(float(p.residuals[i]))]
            row += [repr(float(p.injected[c][i])) if c in p.injected else "0.0" for c in components]
            row += [repr(float(p.measured[i])) if p.measured is not None else "0.0"] if has_measured else []
            row += [repr(float(p.frequency_mhz[i]))] if has_frequency else []
            row += [str(p.system[i])] if has_system else []
            rows.append(row)
    noise_keys = ["white_scale", "white_quadrature", "red_amplitude", "red_spectral_index", "distance"]
    noise_keys += [k for k in dict.fromkeys(k for p in dataset.pulsars for k in p.noise) if k not in noise_keys]
    catalogue_header = ["name", "ra_rad", "dec_rad", "distance_kpc", "distance_error_kpc"] + [_noise_column(k) for k in noise_keys]
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
    importer = (
        "# Re-import these tables with: ptares import import.toml --out DIR\n"
        "[array]\ntable = \"toas.csv\"\ncatalogue = \"pulsars.csv\"\nsignals = \"signals.json\"\n"
        f"window = [{dataset.start_mjd!r}, {end!r}]\n\n[timing_model]\nfit = {terms!r}\n".replace("'", '"')
    )
    texts = (("toas.csv", _csv_text(header, rows)), ("pulsars.csv", _csv_text(catalogue_header, catalogue_rows)),
             ("signals.json", signals_text(dataset.signals)), ("import.toml", importer))
    paths = []
    for name, text in texts:
        with atomic_path(directory / name) as temporary:
            temporary.write_text(text, encoding="utf-8")
        paths.append(directory / name)
    return paths


# ---------------------------------------------------------------- the signals file

_NON_FINITE = {"NaN": math.nan, "Infinity": math.inf, "-Infinity": -math.inf}
#: Whole numbers outside arrays: what an HDF5 attribute holds without loss.
_WHOLE_RANGE = (-(2**63), 2**63 - 1)
_LONGEST_TEXT = 2**16  #: bytes of one byte-string entry
_TYPES = f"whole numbers i1 to i8 or u1 to u8, floats f2, f4 or f8, b1, or byte strings S1 to S{_LONGEST_TEXT}"
_MARKER = 'write NaN and infinities as {"kind": "float", "value": "NaN"}'


def _non_finite_record(value: float) -> dict:
    text = "NaN" if math.isnan(value) else ("Infinity" if value > 0 else "-Infinity")
    return {"kind": "float", "value": text}


def _type_text(dtype: np.dtype, where: str) -> str:
    """The type string of one plain (not structured) array type; types the file cannot hold are refused."""
    allowed = dtype.subdtype is None and dtype.names is None and (
        dtype.kind in "biu" or (dtype.kind == "f" and dtype.itemsize in (2, 4, 8))
        or (dtype.kind == "S" and 0 < dtype.itemsize <= _LONGEST_TEXT))
    if not allowed:
        raise InputError(f"an array of type {dtype} cannot be written to signals.json ({_TYPES})", where)
    return dtype.str


def _entries(value, where: str):
    """Array entries from ``tolist()`` as JSON data: rows become lists, bytes UTF-8 text."""
    if isinstance(value, (list, tuple)):
        return [_entries(v, where) for v in value]
    if isinstance(value, bytes):
        try:
            return value.decode("utf-8")
        except UnicodeDecodeError:
            raise InputError(f"holds bytes {value!r} that are not UTF-8 text", where) from None
    if isinstance(value, float) and not math.isfinite(value):
        return _non_finite_record(value)
    return value


def _encoded(value, where: str):
    """One signal parameter as JSON data (see the module docstring)."""
    if isinstance(value, np.ndarray):
        if value.dtype.names is None:
            dtype = _type_text(value.dtype, where)
        else:
            dtype = [[field, _type_text(value.dtype.fields[field][0], f"{where}.{field}")] for field in value.dtype.names]
        return {"kind": "array", "dtype": dtype, "shape": list(value.shape), "values": _entries(value.tolist(), where)}
    if isinstance(value, np.generic):
        value = value.item()
    if isinstance(value, bytes):  # as the dataset file reads an attribute back
        value = _entries(value, where)
    if isinstance(value, (list, tuple)):
        return [_encoded(v, where) for v in value]
    if isinstance(value, float) and not math.isfinite(value):
        return _non_finite_record(value)
    if isinstance(value, (bool, int, float, str)):
        return value
    raise TypeError(f"{where}: a {type(value).__name__} cannot be written to signals.json")


def _value_text(encoded) -> str:
    """JSON text of one encoded parameter; an array's outermost entries (a table's rows) one per line."""
    if isinstance(encoded, dict) and encoded.get("kind") == "array" and encoded["values"] and encoded["shape"]:
        head = json.dumps({k: v for k, v in encoded.items() if k != "values"}, allow_nan=False)[:-1]
        rows = ",\n".join("   " + json.dumps(row, allow_nan=False) for row in encoded["values"])
        return f'{head}, "values": [\n{rows}\n  ]}}'
    return json.dumps(encoded, allow_nan=False)


def signals_text(signals: dict) -> str:
    """The text of ``signals.json`` for a dataset's ``signals`` (component -> parameters), arrays included."""
    blocks = []
    for name, parameters in signals.items():
        lines = [f"  {json.dumps(key)}: {_value_text(_encoded(value, f'signals.{name}.{key}'))}"
                 for key, value in parameters.items()]
        blocks.append(f" {json.dumps(name)}: {{" + ("\n" + ",\n".join(lines) + "\n }" if lines else "}"))
    return "{" + ("\n" + ",\n".join(blocks) + "\n" if blocks else "") + "}\n"


def _float_value(value, where: str, path: str) -> float:
    """A JSON number, or the record of a non-finite float, as a float."""
    if isinstance(value, dict):
        if set(value) != {"kind", "value"} or value["kind"] != "float" or value["value"] not in _NON_FINITE:
            raise InputError(f'{where}: expected a number or {{"kind": "float", "value": "NaN"}} '
                             '(or "Infinity", "-Infinity")', path)
        return _NON_FINITE[value["value"]]
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        raise InputError(f"{where}: expected a number", path)
    try:
        number = float(value)
    except OverflowError:
        raise InputError(f"{where}: {value} is beyond the range of a double-precision number", path) from None
    if not math.isfinite(number):
        raise InputError(f"{where}: not a finite double-precision number ({_MARKER})", path)
    return number


def _whole_value(value: int, where: str, path: str) -> int:
    if not _WHOLE_RANGE[0] <= value <= _WHOLE_RANGE[1]:
        raise InputError(f"{where}: {value} is outside the range of a 64-bit whole number", path)
    return value


def _text_value(value: str, where: str, path: str) -> str:
    """A string an HDF5 attribute can hold: UTF-8, without NUL characters."""
    try:
        value.encode("utf-8")
    except UnicodeEncodeError:
        raise InputError(f"{where}: the text is not valid Unicode (a lone surrogate)", path) from None
    if "\x00" in value:
        raise InputError(f"{where}: the text holds a NUL character", path)
    return value


def _scalar(value, where: str, path: str):
    """``(kind, value)`` of a plain value: kind is "number", "bool" or "string"."""
    if isinstance(value, bool):
        return "bool", value
    if isinstance(value, int):
        return "number", _whole_value(value, where, path)
    if isinstance(value, (float, dict)):
        return "number", _float_value(value, where, path)
    if isinstance(value, str):
        return "string", _text_value(value, where, path)
    what = "null" if value is None else "a list"
    raise InputError(f"{where}: expected a number, a string or true/false, not {what}", path)


def _plain_list(items: list, where: str, path: str) -> list:
    """A list of numbers, of strings or of true/false, possibly nested, with equal lengths at each level."""
    kinds = set()

    def walk(node, at):
        if node and all(isinstance(item, list) for item in node):
            parts = [walk(item, f"{at}[{i}]") for i, item in enumerate(node)]
            if len({shape for shape, _ in parts}) > 1:
                raise InputError(f"{at}: nested lists of unequal lengths", path)
            return (len(node),) + parts[0][0], [value for _, value in parts]
        values = []
        for i, item in enumerate(node):
            if isinstance(item, list):
                raise InputError(f"{at}[{i}]: a list among single values", path)
            kind, value = _scalar(item, f"{at}[{i}]", path)
            kinds.add(kind)
            values.append(value)
        return (len(node),), values

    _, values = walk(items, where)
    if len(kinds) > 1:
        raise InputError(f"{where}: expected a list of numbers, of strings or of true/false, not a mix", path)
    return values


def _plain_type(text, where: str, path: str) -> np.dtype:
    dtype = None
    if isinstance(text, str):
        with warnings.catch_warnings():
            warnings.simplefilter("error", DeprecationWarning)  # an outdated alias is refused like an unknown type
            try:
                dtype = np.dtype(text)
            except (TypeError, ValueError, DeprecationWarning):
                pass
    if dtype is None or dtype.names is not None:
        raise InputError(f"{where}: {json.dumps(text)} is not a supported type ({_TYPES})", path)
    try:
        _type_text(dtype, where)
    except InputError:
        raise InputError(f"{where}: {json.dumps(text)} is not a supported type ({_TYPES})", path) from None
    return dtype


def _array_type(description, where: str, path: str) -> np.dtype:
    """The numpy type of an array record's ``dtype``: a type string or a list of ``[field, type]``."""
    if isinstance(description, str):
        return _plain_type(description, where, path)
    if not isinstance(description, list) or not description:
        raise InputError(f'{where}: expected a type such as "<f8", or a list of [field, type] pairs', path)
    fields = []
    for i, pair in enumerate(description):
        if not (isinstance(pair, list) and len(pair) == 2 and isinstance(pair[0], str)):
            raise InputError(f"{where}[{i}]: expected a pair [field, type]", path)
        if not NAME_PATTERN.fullmatch(pair[0]):
            raise InputError(f"{where}[{i}]: field name {pair[0]!r} is not 1-64 letters, digits, '_', '+', '-', '.'", path)
        fields.append((pair[0], _plain_type(pair[1], f"{where}[{i}]", path)))
    repeated = sorted({name for name, _ in fields if [n for n, _ in fields].count(name) > 1})
    if repeated:
        raise InputError(f"{where}: field(s) {', '.join(repeated)} appear more than once", path)
    return np.dtype(fields)


def _array_entry(value, dtype: np.dtype, where: str, path: str):
    """One entry of an array record as the Python value numpy stores exactly; a table's row as a tuple."""
    if dtype.names is not None:
        if not isinstance(value, list) or len(value) != len(dtype.names):
            raise InputError(f"{where}: expected a row of {len(dtype.names)} values ({', '.join(dtype.names)})", path)
        return tuple(_array_entry(v, dtype.fields[field][0], f"{where}.{field}", path) for v, field in zip(value, dtype.names))
    kind = dtype.kind
    if kind == "f":
        number = _float_value(value, where, path)
        if dtype.itemsize < 8 and math.isfinite(number) and abs(number) > float(np.finfo(dtype).max):
            raise InputError(f"{where}: {number!r} is beyond the range of {dtype.name}", path)
        return number
    if kind == "b":
        if not isinstance(value, bool):
            raise InputError(f"{where}: expected true or false", path)
        return value
    if kind in "iu":
        if isinstance(value, bool) or not isinstance(value, int):
            raise InputError(f"{where}: expected a whole number", path)
        limits = np.iinfo(dtype)
        if not limits.min <= value <= limits.max:
            raise InputError(f"{where}: {value} is outside the range of {dtype.name}", path)
        return value
    if not isinstance(value, str):  # byte strings, the only other kind _plain_type lets through
        raise InputError(f"{where}: expected a string", path)
    try:
        encoded = value.encode("utf-8")
    except UnicodeEncodeError:
        raise InputError(f"{where}: the text is not valid Unicode (a lone surrogate)", path) from None
    if len(encoded) > dtype.itemsize:
        raise InputError(f"{where}: {len(encoded)} bytes of UTF-8, more than the {dtype.itemsize} of its type {dtype.str}",
                         path)
    return encoded


def _array(record: dict, where: str, path: str) -> np.ndarray:
    """The numpy array of an array record ``{"kind": "array", "dtype", "shape", "values"}``."""
    keys = {"kind", "dtype", "shape", "values"}
    if set(record) != keys:
        missing, extra = sorted(keys - set(record)), sorted(set(record) - keys)
        words = "; ".join(w for w in (f"missing {', '.join(missing)}" if missing else "",
                                      f"unknown {', '.join(extra)}" if extra else "") if w)
        raise InputError(f"{where}: an array needs exactly kind, dtype, shape and values ({words})", path)
    dtype = _array_type(record["dtype"], f"{where}.dtype", path)
    shape = record["shape"]
    if (not isinstance(shape, list) or len(shape) > NESTING_LIMIT
            or not all(isinstance(n, int) and not isinstance(n, bool) and n >= 0 for n in shape)):
        raise InputError(f"{where}.shape: expected a list of whole numbers, at least 0", path)
    if math.prod(shape) * dtype.itemsize > MEMORY_LIMIT:
        raise InputError(f"{where}.shape: an array of shape {shape} of {dtype.itemsize}-byte entries is larger than "
                         f"ptares holds ({MEMORY_LIMIT / 1e9:.0f} GB)", path)
    entries = []

    def walk(node, dimensions, at):
        if not dimensions:
            entries.append(_array_entry(node, dtype, at, path))
            return
        if not isinstance(node, list) or len(node) != dimensions[0]:
            raise InputError(f"{at}: expected a list of {dimensions[0]} entries (shape {shape})", path)
        for i, item in enumerate(node):
            walk(item, dimensions[1:], f"{at}[{i}]")

    walk(record["values"], tuple(shape), f"{where}.values")
    return np.array(entries, dtype=dtype).reshape(shape)


def _parameter(value, where: str, path: str):
    """One checked parameter of the signals file, as the dataset holds it."""
    if isinstance(value, dict) and value.get("kind") == "array":
        return _array(value, where, path)
    if isinstance(value, dict) and value.get("kind") != "float":
        raise InputError(f'{where}: an object here must be an array ("kind": "array") or a non-finite float '
                         '("kind": "float")', path)
    if isinstance(value, list):
        return _plain_list(value, where, path)
    return _scalar(value, where, path)[1]


def read_signals(path) -> dict:
    """The injected-signal parameters of a signals file (see the module docstring), checked.

    Every fault, from bytes that are not UTF-8 to an array entry of the wrong type, is an
    :class:`InputError` naming the file and the key.
    """
    path = Path(path)
    where = str(path)
    try:
        content = read_json(path)
    except ValueError as exc:  # not a JSON syntax error, e.g. an integer of more digits than Python converts
        raise InputError(f"not valid JSON: {exc}", where) from None
    if not isinstance(content, dict):
        raise InputError("signals: expected an object of signal components (name -> parameters)", where)
    signals = {}
    for name, parameters in content.items():
        if not NAME_PATTERN.fullmatch(name):
            raise InputError(f"signals.{name}: a component name is 1-64 letters, digits, '_', '+', '-', '.'", where)
        if not isinstance(parameters, dict):
            raise InputError(f"signals.{name}: expected an object of parameters (name -> value)", where)
        signals[name] = {}
        for key, value in parameters.items():
            if not NAME_PATTERN.fullmatch(key):
                raise InputError(f"signals.{name}.{key}: a parameter name is 1-64 letters, digits, '_', '+', '-', '.'", where)
            signals[name][key] = _parameter(value, f"signals.{name}.{key}", where)
    stored = list(signals) + [k for entry in signals.values() for k in entry]
    stored += [f for entry in signals.values() for v in entry.values() if isinstance(v, np.ndarray) for f in v.dtype.names or ()]
    note = earlier_names(stored)
    if note:
        raise InputError(f"written by an earlier ptares ({note}); export the dataset again", where)
    return signals


# --- wave profiles ---------------------------------------------------------------

#: Time columns of a wave-profile table: absolute MJD (days), or a duration from the wave's ``epoch``.
WAVE_TIME_COLUMNS = {"mjd": None, "time_s": 1.0, "time_d": 86400.0, "time_yr": 365.25 * 86400.0}
#: Fewest rows a wave-profile table may have (a cubic spline and its error estimate need them).
MIN_WAVE_ROWS = 8


@dataclass
class WaveTable:
    """A wave profile read from CSV: ``times`` (MJD when ``relative`` is false, else seconds from the wave's
    epoch), and the dimensionless strains ``plus`` and ``cross``."""

    times: np.ndarray
    plus: np.ndarray
    cross: np.ndarray
    relative: bool


def read_wave_table(path) -> WaveTable:
    """A wave profile: one row per time, columns ``mjd`` (or ``time_s``, ``time_d``, ``time_yr`` from the wave's
    epoch), ``plus`` and ``cross`` (dimensionless strain, no unit suffix); times strictly increasing, every value
    finite, at least :data:`MIN_WAVE_ROWS` rows.  Every fault is one :class:`InputError` naming the file, the row
    and the column."""
    path = Path(path)
    header, rows = _rows(path)
    where = str(path)
    times = [h for h in header if h in WAVE_TIME_COLUMNS]
    if len(times) > 1:
        raise InputError(f"has several time columns: {', '.join(times)} (give one)", where)
    if not times:
        near = [h for h in header if h.startswith("time")]
        if near:
            unit = near[0].partition("_")[2] or "none"
            raise InputError(f"column {_column_label(near[0])}: unit {unit!r} is not a time unit (write mjd, time_s, "
                             "time_d or time_yr)", where)
        raise InputError("has no time column (expected mjd, time_s, time_d or time_yr)", where)
    for stem in ("plus", "cross"):
        if stem not in header:
            suffixed = [h for h in header if h.startswith(stem + "_")]
            if suffixed:
                raise InputError(f"column {_column_label(suffixed[0])}: strain is dimensionless; name the column "
                                 f"{stem!r}, without a unit", where)
            raise InputError(f"has no {stem} column (the {stem} polarisation's strain)", where)
    column = times[0]
    values = {column: [], "plus": [], "cross": []}
    previous = None
    for number, row in rows:
        for key in values:
            values[key].append(_number(path, number, key, row[key]))
        if previous is not None and not values[column][-1] > previous:
            raise InputError(f"row {number}, column {column}: {row[column]} is not after the row before "
                             "(times must increase)", where)
        previous = values[column][-1]
        if len(values[column]) > MAX_TOAS:
            raise InputError(f"has more than {MAX_TOAS} rows", where)
    if len(values[column]) < MIN_WAVE_ROWS:
        raise InputError(f"has {len(values[column])} rows; a wave profile needs at least {MIN_WAVE_ROWS}", where)
    scale = WAVE_TIME_COLUMNS[column]
    plus, cross = (np.array(values[k]) for k in ("plus", "cross"))
    if np.max(np.abs(np.concatenate([plus, cross]))) > 1e-9:
        raise InputError("a strain above 1e-9 (residuals beyond a second): is the column in strain?", where)
    stamps = np.array(values[column])
    return WaveTable(stamps if scale is None else stamps * scale, plus, cross, relative=scale is not None)

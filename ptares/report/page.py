"""One self-contained HTML page for an output folder of any ptares command.

:func:`build_report` reads what a folder holds (``dataset.h5``, ``correlations.json``,
``posterior.json``, ``comparison.json``, ``results.csv`` with ``detection.json``,
``sensitivity.json``, ``pulsar_noise.json``, ``provenance.json``) and writes one page:
provenance (version, seed, command, time), every warning the results carry (fits that have
not converged, few effective samples, unreliable Bayes factors, failed tasks), the key
numbers and tables of each kind of result, its figures embedded as data URIs, and the
config.  The page makes no request of its own: no scripts, fonts or style sheets from
elsewhere.
"""

from __future__ import annotations

import base64
import datetime
import html
import json
from dataclasses import dataclass, field
from pathlib import Path

import numpy as np

from ptares.dataset import atomic_path, describe_signal, load_dataset
from ptares.inference.samplers.chains import EVIDENCE
from ptares.inputs.config import read_json
from ptares.physics.constants import YEAR
from ptares.errors import InputError
from ptares.version import __version__

__all__ = ["KNOWN_OUTPUTS", "Report", "build_report"]

#: The files that make a folder reportable.
KNOWN_OUTPUTS = ("dataset.h5", "correlations.json", "posterior.json", "comparison.json", "results.csv",
                 "sensitivity.json", "pulsar_noise.json")
#: Fewest effective samples a parameter should have before its interval is quoted without a warning.
FEW_EFFECTIVE_SAMPLES = 100


@dataclass
class Table:
    caption: str
    header: list
    rows: list
    id: str = ""


@dataclass
class Section:
    """One kind of result: its key numbers, tables, figures (PNG paths), warnings and free text."""

    id: str
    title: str
    numbers: list = field(default_factory=list)  #: (label, value) pairs
    tables: list = field(default_factory=list)
    figures: list = field(default_factory=list)
    warnings: list = field(default_factory=list)
    text: list = field(default_factory=list)  #: (heading, preformatted text)


@dataclass
class Report:
    """The page's content; :meth:`html` renders it."""

    folder: Path
    provenance: list
    sections: list
    path: Path = None  #: where the page was written

    @property
    def warnings(self) -> list:
        return [(s.title, w) for s in self.sections for w in s.warnings]

    def html(self) -> str:
        parts = [_HEAD.format(title=html.escape(f"ptares report: {self.folder.name}"))]
        parts.append(f"<h1>ptares report: {html.escape(self.folder.name)}</h1>")
        parts.append(f"<p class='where'>{html.escape(str(self.folder.resolve()))}</p>")
        parts.append(_table(Table("Provenance", ["", ""], self.provenance, "provenance")))
        warnings = self.warnings
        parts.append("<section id='warnings'><h2>Warnings</h2>")
        if warnings:
            parts.append("<ul class='warnings'>" + "".join(
                f"<li><b>{html.escape(where)}</b>: {html.escape(text)}</li>" for where, text in warnings) + "</ul>")
        else:
            parts.append("<p>None: every fit converged, every estimate has enough effective samples, nothing failed.</p>")
        parts.append("</section>")
        parts.append("<nav>" + " · ".join(f"<a href='#{s.id}'>{html.escape(s.title)}</a>" for s in self.sections) + "</nav>")
        for s in self.sections:
            parts.append(f"<section id='{s.id}'><h2>{html.escape(s.title)}</h2>")
            if s.numbers:
                parts.append(_table(Table("Key numbers", ["quantity", "value"], s.numbers, f"{s.id}-numbers")))
            parts.extend(_table(t) for t in s.tables)
            for path in s.figures:
                parts.append(_figure(path))
            for heading, text in s.text:
                parts.append(f"<h3>{html.escape(heading)}</h3><pre>{html.escape(text)}</pre>")
            parts.append("</section>")
        parts.append(f"<footer>Written by ptares {html.escape(__version__)} on "
                     f"{datetime.datetime.now(datetime.timezone.utc).isoformat(timespec='seconds')}. Simulated results "
                     "are not detections: claims on real data need a full timing and noise analysis under the "
                     "collaboration's own review.</footer></body></html>")
        return "\n".join(parts)


_HEAD = """<!DOCTYPE html>
<html lang="en"><head><meta charset="utf-8"><title>{title}</title>
<style>
body {{ font-family: sans-serif; max-width: 1100px; margin: 1.5em auto; padding: 0 1em; color: #1b1b1b; }}
h1 {{ font-size: 1.5em; margin-bottom: 0.2em; }} h2 {{ border-bottom: 2px solid #2a6f97; padding-bottom: 0.2em; }}
.where {{ color: #666; font-size: 0.85em; margin-top: 0; }}
table {{ border-collapse: collapse; margin: 0.8em 0; font-size: 0.9em; }}
caption {{ text-align: left; font-weight: bold; padding: 0.3em 0; }}
td, th {{ border: 1px solid #ccc; padding: 0.25em 0.6em; text-align: left; vertical-align: top; }}
th {{ background: #eef3f7; }}
ul.warnings li {{ color: #9b1c1c; margin: 0.3em 0; }}
figure {{ margin: 1em 0; }} figure img {{ max-width: 100%; border: 1px solid #ddd; }}
figcaption {{ color: #555; font-size: 0.85em; }}
pre {{ background: #f6f6f6; padding: 0.6em; overflow-x: auto; max-height: 30em; font-size: 0.8em; }}
nav {{ margin: 1em 0; }} footer {{ margin-top: 3em; color: #666; font-size: 0.8em; }}
</style></head><body>"""


def _cell(value) -> str:
    if isinstance(value, float):
        return html.escape(f"{value:.4g}") if np.isfinite(value) else "—"
    if value is None:
        return "—"
    return html.escape(str(value))


def _table(table: Table) -> str:
    ident = f" id='{table.id}'" if table.id else ""
    head = "".join(f"<th>{html.escape(str(h))}</th>" for h in table.header) if any(table.header) else ""
    body = "".join("<tr>" + "".join(f"<td>{_cell(v)}</td>" for v in row) + "</tr>" for row in table.rows)
    return f"<table{ident}><caption>{html.escape(table.caption)}</caption>" + (f"<tr>{head}</tr>" if head else "") \
        + body + "</table>"


def _figure(path: Path) -> str:
    data = base64.b64encode(path.read_bytes()).decode("ascii")
    name = html.escape(path.name)
    return f"<figure><img src='data:image/png;base64,{data}' alt='{name}'><figcaption>{name}</figcaption></figure>"


def _read_json(path: Path):
    """An output's JSON object, read by the one checked reader (:func:`ptares.inputs.config.read_json`); None when
    the folder has no such file."""
    if not path.is_file():
        return None
    content = read_json(path)
    if not isinstance(content, dict):
        raise InputError("expected a JSON object, as ptares writes it", str(path))
    return content


def _figures(folder: Path, names) -> list:
    """The PNGs among ``names`` (patterns allowed) that exist, in that order."""
    found = []
    for name in names:
        found.extend(sorted(folder.glob(name), key=lambda p: (len(p.name), p.name)))
    return [p for p in found if p.is_file()]


def _dataset_section(folder: Path):
    path = folder / "dataset.h5"
    if not path.is_file():
        return None
    dataset = load_dataset(path)
    section = Section("dataset", "Simulated dataset")
    section.numbers = [("pulsars", len(dataset.pulsars)), ("TOAs", dataset.toa_count),
                       ("span (yr)", dataset.span / YEAR), ("first epoch (MJD)", f"{dataset.start_mjd:.4f}"),
                       ("seed", dataset.seed)]
    section.numbers += [(f"signal: {name}", describe_signal(name, values)) for name, values in dataset.signals.items()]
    section.tables.append(Table(
        "Pulsars", ["name", "RA (deg)", "Dec (deg)", "distance (kpc)", "TOAs", "median TOA error (µs)", "residual rms (µs)"],
        [[p.name, float(np.degrees(p.ra) % 360), float(np.degrees(p.dec)), p.distance, p.toa_count,
          float(np.median(p.errors) * 1e6), float(np.std(p.residuals) * 1e6)] for p in dataset.pulsars], "pulsars"))
    section.figures = _figures(folder, ["sky.png", "residuals*.png", "noise_budget*.png", "correlation.png"])
    if dataset.config:
        section.text.append(("Config", dataset.config))
    return section, dataset


def _correlate_section(folder: Path):
    content = _read_json(folder / "correlations.json")
    if content is None:
        return None
    section = Section("correlate", "Cross-correlations and optimal statistic")
    rows = []
    for name in ("hellings-downs", "monopole", "dipole"):
        e = content.get("estimates", {}).get(name, {})
        rows.append([name, e.get("amplitude2"), e.get("sigma"), e.get("sigma_signal"), e.get("snr"), e.get("p_value"),
                     e.get("p_exact")])
        if e.get("p_value_is_bound"):
            section.warnings.append(f"{name}: no null trial reached the observed S/N; its p-value is only a bound "
                                    "(run more trials)")
    section.tables.append(Table("Optimal statistic (A², s⁴ units as estimated; S/N against the noise-only error)",
                                ["pattern", "A²", "σ (noise only)", "σ (with the background's scatter)", "S/N",
                                 "p (null trials)", "p (exact, noise only)"], rows, "statistics"))
    quality = content.get("fit_quality", {})
    section.numbers = [("injected A²", content.get("injected_amplitude2")),
                       ("Hellings–Downs curve fit χ² / dof", f"{quality.get('chi2', float('nan')):.3g} / {quality.get('dof')}"),
                       ("curve fit p (calibrated)", quality.get("p_calibrated")),
                       ("noise model", content.get("settings", {}).get("noise"))]
    section.figures = _figures(folder, ["correlations.png", "nulls.png"])
    section.text.append(("Settings", json.dumps(content.get("settings", {}), indent=1)))
    return section


def _fit_warnings(summary: dict, label: str) -> list:
    warnings = []
    if not summary.get("converged", True):
        warnings.append(f"{label} has not converged: {summary.get('not_converged_because', 'see posterior.json')}")
    few = [name for name, p in summary.get("parameters", {}).items()
           if isinstance(p.get("effective_samples"), (int, float)) and p["effective_samples"] < FEW_EFFECTIVE_SAMPLES]
    if few:
        warnings.append(f"{label}: fewer than {FEW_EFFECTIVE_SAMPLES} effective samples of {', '.join(few[:8])}"
                        + (f" and {len(few) - 8} more" if len(few) > 8 else ""))
    return warnings


def _fit_section(folder: Path, ident: str = "fit", title: str = "Bayesian fit"):
    summary = _read_json(folder / "posterior.json")
    if summary is None:
        return None
    section = Section(ident, title)
    section.numbers = [("converged", summary.get("converged")), ("sampler", summary.get("sampler")),
                       ("steps", summary.get("steps")), ("walkers or chains", summary.get("walkers")),
                       ("burn-in", summary.get("burn"))]
    for key, signal in EVIDENCE.items():
        entry = summary.get(key) or {}
        limit = entry.get("upper_limit") or {}
        if limit:
            section.numbers.append((f"95% upper limit on the {signal.label}'s amplitude {signal.symbol}",
                                    limit.get("amplitude")))
        dickey = entry.get("savage_dickey") or {}
        if dickey:
            value = dickey.get("ln_bayes_factor")
            if value is None and dickey.get("ln_bayes_factor_lower_bound") is not None:
                value = f"> {dickey['ln_bayes_factor_lower_bound']:.3g} (no draw near the prior's lower edge)"
            section.numbers.append((f"Savage–Dickey ln B ({signal.label})", value))
    rows = []
    for name, p in summary.get("parameters", {}).items():
        low68, high68 = (p.get("interval68") or [None, None])[:2]
        low95, high95 = (p.get("interval95") or [None, None])[:2]
        rows.append([name, p.get("median"), low68, high68, low95, high95, p.get("injected"), p.get("autocorr_time"),
                     p.get("effective_samples")])
    section.tables.append(Table("Parameters", ["parameter", "median", "68% low", "68% high", "95% low", "95% high",
                                               "injected", "autocorrelation time", "effective samples"], rows,
                                f"{ident}-parameters"))
    section.warnings = _fit_warnings(summary, title)
    section.figures = _figures(folder, ["corner.png", "trace.png", "spectrum.png"])
    return section


def _compare_section(folder: Path):
    content = _read_json(folder / "comparison.json")
    if content is None:
        return None
    section = Section("compare", "Bayes factor")
    section.numbers = [("ln B (Hellings–Downs against uncorrelated)", content.get("ln_bayes_factor")),
                       ("its standard error", content.get("ln_bayes_factor_error")), ("method", content.get("method")),
                       ("effective samples", content.get("effective_samples")), ("reliable", content.get("reliable"))]
    rows = [[name, e.get("ln_bayes_factor"), e.get("ln_bayes_factor_error"), e.get("method"), e.get("reliable")]
            for name, e in content.get("patterns", {}).items() if isinstance(e, dict)]
    if rows:
        section.tables.append(Table("Each pattern against the uncorrelated model",
                                    ["pattern", "ln B", "error", "method", "reliable"], rows, "patterns"))
    if content.get("reliable") is False:
        section.warnings.append("the Bayes factor is unreliable: " + str(content.get("warning", "see comparison.json")))
    elif content.get("warning"):
        section.warnings.append(str(content["warning"]))
    section.figures = _figures(folder, ["comparison.png"])
    return section


def _sweep_section(folder: Path):
    path = folder / "results.csv"
    if not path.is_file():
        return None
    from ptares.campaign.sweep import read_results

    rows = read_results(path)
    section = Section("sweep", "Campaign")
    failed = [r for r in rows if r.get("status") != "ok"]
    section.numbers = [("tasks", len(rows)), ("failed", len(failed))]
    content = _read_json(folder / "detection.json")
    if content is not None:
        section.numbers += [("false-alarm probability", content.get("false_alarm")), ("detection rule", content.get("rule")),
                            ("threshold set", content.get("how"))]
        section.tables.append(Table("Detection probability", ["injected amplitude", "detected share", "binomial error", "tasks"],
                                    [[d["amplitude"], d["fraction"], d["error"], d["tasks"]]
                                     for d in content.get("detection_probability", [])], "detection"))
    else:
        section.warnings.append("detection.json is missing (written at the end of a campaign): rerun ptares sweep to "
                                "finish it")
    if failed:
        errors = sorted({str(r.get("error")) for r in failed})
        section.warnings.append(f"{len(failed)} task(s) failed: " + "; ".join(errors[:3]))
    unconverged = [r for r in rows if r.get("fit_converged") in ("False", False, 0.0)]
    if unconverged:
        section.warnings.append(f"{len(unconverged)} task(s) with a fit that has not converged")
    unreliable = [r for r in rows if r.get("bayes_reliable") in ("False", False, 0.0)]
    if unreliable:
        section.warnings.append(f"{len(unreliable)} task(s) with an unreliable Bayes factor")
    section.figures = _figures(folder, ["detection.png", "recovery.png", "snr.png", "coverage.png", "bayes.png"])
    return section


def _sensitivity_section(folder: Path):
    content = _read_json(folder / "sensitivity.json")
    if content is None:
        return None
    section = Section("sensitivity", "Sensitivity and forecasts")
    r = content.get("reference_background", {})
    settings = content.get("settings", {})
    section.numbers = [("pulsars", len(content.get("pulsars", []))),
                       ("background amplitude", f"{r.get('amplitude', float('nan')):.3g} "
                                                f"({'injected' if r.get('injected') else 'reference'})"),
                       ("expected S/N", r.get("snr")), ("S/N scatter between realisations", r.get("snr_spread")),
                       ("detection probability", r.get("detection_probability")),
                       ("false-alarm probability", settings.get("false_alarm")),
                       ("method of the distributions", settings.get("forecast_method"))]
    b = content.get("background", {})
    section.tables.append(Table("Against amplitude", ["amplitude", "expected S/N", "scatter", "weak-signal S/N",
                                                      "detection probability"],
                                [list(v) for v in zip(b.get("amplitude", []), b.get("snr", []), b.get("snr_spread", []),
                                                      b.get("snr_weak", []), b.get("detection_probability", []))],
                                "forecast"))
    y = content.get("years", {})
    section.tables.append(Table("Against observing span", ["years", "pulsars", "expected S/N", "detection probability"],
                                [list(v) for v in zip(y.get("years", []), y.get("pulsars", []), y.get("snr", []),
                                                      y.get("detection_probability", []))], "forecast-years"))
    section.figures = _figures(folder, ["sensitivity.png", "detection.png", "continuous_wave.png",
                                        "continuous_wave_sky.png"])
    return section


def _noise_section(folder: Path):
    content = _read_json(folder / "pulsar_noise.json")
    if content is None:
        return None
    section = Section("noise", "Per-pulsar noise")
    rows = []
    for name, row in content.get("pulsars", {}).items():
        rows.append([name, row.get("status"), row.get("converged")])
        if row.get("status") != "ok":
            section.warnings.append(f"{name}: its noise fit failed ({row.get('error', '')})")
        elif row.get("converged") is False:
            section.warnings.append(f"{name}: its noise fit has not converged")
    section.tables.append(Table("Pulsars", ["pulsar", "status", "converged"], rows, "noise-pulsars"))
    section.figures = _figures(folder, ["pulsar_noise.png"])
    return section


def _provenance(folder: Path, dataset) -> list:
    rows = []
    record = _read_json(folder / "provenance.json") or {}
    for key, label in (("command", "command"), ("kind", "what ran"), ("ptares_version", "ptares version"),
                       ("finished", "finished (UTC)"), ("seed", "seed"), ("source", "source"), ("threads", "threads"),
                       ("python", "Python")):
        if record.get(key) is not None:
            rows.append([label, record[key]])
    if dataset is not None:
        rows.append(["dataset seed", dataset.seed])
        rows.append(["dataset created", dataset.created])
        rows.append(["dataset written by ptares", dataset.ptares_version])
    if not record:
        rows.append(["provenance.json", "absent (written by ptares 0.2 and later)"])
    return rows


def build_report(folder, out=None) -> Report:
    """Read ``folder`` and write its page to ``out`` (default ``folder/report.html``) atomically; returns the
    :class:`Report`.  A folder with none of :data:`KNOWN_OUTPUTS` is an :class:`InputError`."""
    folder = Path(folder)
    if not folder.is_dir():
        raise InputError("is not a folder", str(folder))
    if not any((folder / name).is_file() for name in KNOWN_OUTPUTS):
        raise InputError(f"holds no ptares outputs (none of {', '.join(KNOWN_OUTPUTS)})", str(folder))
    sections, dataset = [], None
    found = _dataset_section(folder)
    if found is not None:
        section, dataset = found
        sections.append(section)
    for reader in (_sensitivity_section, _correlate_section, _fit_section, _compare_section, _noise_section,
                   _sweep_section):
        section = reader(folder)
        if section is not None:
            sections.append(section)
    section = _fit_section(folder / "uncorrelated", "uncorrelated-fit", "Uncorrelated fit (for the Bayes factor)")
    if section is not None:
        sections.append(section)
    claimed = {p for s in sections for p in s.figures}
    others = [p for p in sorted(folder.glob("*.png")) if p not in claimed]
    if others:
        sections.append(Section("other-figures", "Other figures", figures=others))
    target = Path(out) if out is not None else folder / "report.html"
    report = Report(folder, _provenance(folder, dataset), sections, target)
    try:
        with atomic_path(target) as temporary:
            temporary.write_text(report.html(), encoding="utf-8")
    except OSError as exc:
        raise InputError(f"cannot write the report ({exc.strerror or exc})", str(target)) from None
    return report

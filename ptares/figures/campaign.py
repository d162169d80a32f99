"""Figures of a campaign: detection probability, recovered amplitude, S/N distributions and credible-interval coverage."""

from __future__ import annotations

import matplotlib

matplotlib.use("Agg")

import matplotlib.pyplot as plt
import numpy as np

from ptares.campaign.detection import (
    detection_probability,
    detection_rule,
    finished,
)
from ptares.figures.common import COMPONENT_COLOURS
from ptares.inference import parameters

__all__ = ["COVERAGE_PARAMETERS", "coverage_figure", "interval_coverage", "sweep_figures"]

#: Parameters whose credible intervals the coverage figure checks; results.csv has ``<name>.quantile``.
COVERAGE_PARAMETERS = (parameters.COMMON_AMPLITUDE, parameters.COMMON_INDEX)


def _groups(rows):
    """Rows grouped by the axes other than the background amplitude."""
    import json

    keys = sorted({k for r in rows for k in r if k.startswith("axis:") and k != "axis:gwb.amplitude"})
    groups = {}
    for r in rows:  # values may be lists (e.g. timing-model terms): group on their JSON text
        label = tuple((k[5:], r.get(k) if isinstance(r.get(k), (int, float, str)) else json.dumps(r.get(k))) for k in keys)
        groups.setdefault(label, []).append(r)
    return groups


def sweep_figures(rows, false_alarm: float = 0.05, statistic: str = "snr", ln_bayes_threshold: float = 3.0) -> dict:
    """Campaign figures by file name: detection probability, recovered amplitude, S/N distributions
    (``detection.png``, ``recovery.png``, ``snr.png``), the coverage of credible intervals (``coverage.png``,
    when fits ran) and the Bayes factors (``bayes.png``, when the compare stage ran).  ``statistic`` and
    ``ln_bayes_threshold`` choose the detection rule (:func:`~ptares.campaign.detection.detection_rule`)."""
    figures = {}
    every_row = rows
    rule = detection_rule(every_row, false_alarm, statistic, ln_bayes_threshold)
    rows = finished(rows, "hd_snr")
    counted = finished(every_row, rule.column)
    if counted:
        fig, ax = plt.subplots(figsize=(7.0, 4.5))
        for label, members in _groups(counted).items():
            detections = detection_probability(members, rule)
            amplitudes = list(detections)
            fractions = [d.fraction for d in detections.values()]
            errors = [d.error for d in detections.values()]
            text = ", ".join(f"{k} = {v:g}" if isinstance(v, float) else f"{k} = {v}" for k, v in label) or "all tasks"
            ax.errorbar(amplitudes, fractions, yerr=errors, fmt="o-", capsize=3, label=text)
        ax.axhline(false_alarm, color="#9a9a9a", ls="--", lw=1, label=f"false-alarm probability {false_alarm:g}")
        ax.set_xlabel("injected amplitude A")
        ax.set_ylabel("detection probability")
        ax.set_ylim(-0.03, 1.03)
        ax.set_title(f"{rule} ({rule.how})", fontsize=9)
        ax.legend(fontsize=7)
        ax.grid(alpha=0.3)
        fig.tight_layout()
        figures["detection.png"] = fig
    if rows:
        fig, ax = plt.subplots(figsize=(6.0, 5.0))
        injected = np.array([r["injected_amplitude"] ** 2 for r in rows])
        recovered = np.array([r["hd_amplitude2"] for r in rows])
        sigma = np.array([r["hd_sigma"] for r in rows])
        ax.errorbar(injected, recovered, yerr=sigma, fmt=".", alpha=0.5, color=COMPONENT_COLOURS["gwb"], lw=0.6)
        for a2 in np.unique(injected):
            ax.plot(a2, np.mean(recovered[injected == a2]), "s", color="#c1121f", ms=7)
        top = max(injected.max(), 1e-300)
        ax.plot([0, top], [0, top], color="k", lw=1, label="recovered = injected")
        ax.plot([], [], "s", color="#c1121f", label="mean per injected value")
        ax.set_xlabel("injected A\u00b2")
        ax.set_ylabel("recovered A\u00b2 (optimal statistic, \u00b1 sigma)")
        ax.set_title("Amplitude recovery", fontsize=10)
        ax.legend(fontsize=8)
        ax.grid(alpha=0.3)
        fig.tight_layout()
        figures["recovery.png"] = fig

        fig, ax = plt.subplots(figsize=(7.0, 4.5))
        amplitudes = sorted({r["injected_amplitude"] for r in rows})
        data = [[r["hd_snr"] for r in rows if r["injected_amplitude"] == a] for a in amplitudes]
        ax.boxplot(data, tick_labels=[f"{a:.2g}" for a in amplitudes])
        _mark_rule(ax, rule, "hd_snr")
        ax.set_xlabel("injected amplitude A")
        ax.set_ylabel("Hellings\u2013Downs S/N")
        ax.set_title("S/N distributions", fontsize=10)
        ax.legend(fontsize=8)
        ax.grid(alpha=0.3, axis="y")
        fig.tight_layout()
        figures["snr.png"] = fig

    compared = finished(every_row, "ln_bayes_factor")
    if compared:
        figures["bayes.png"] = bayes_figure(compared, rule)
    coverage = coverage_figure(every_row)
    if coverage is not None:
        figures["coverage.png"] = coverage
    return figures


def _mark_rule(ax, rule, column: str) -> None:
    """The detection threshold as a dashed line where ``rule`` reads ``column`` (the figure's statistic),
    else the rule in the legend."""
    if rule.column == column:
        ax.axhline(rule.threshold, color="#c1121f", ls="--", lw=1, label=f"detection: {rule} ({rule.how})")
    else:
        ax.plot([], [], " ", label=f"detection: {rule}")


def bayes_figure(rows, rule):
    """ln Bayes factor (Hellings–Downs against uncorrelated) of every task against its injected amplitude, with
    its standard error; unreliable reweightings hollow; the detection threshold when the rule uses ln B."""
    fig, ax = plt.subplots(figsize=(7.0, 4.5))
    amplitudes = sorted({r["injected_amplitude"] for r in rows})
    position = {a: i for i, a in enumerate(amplitudes)}
    offsets = np.random.default_rng(0).uniform(-0.15, 0.15, len(rows))  # spread the points of one amplitude
    for r, offset in zip(rows, offsets):
        reliable = bool(r.get("bayes_reliable", True))
        ax.errorbar(position[r["injected_amplitude"]] + offset, r["ln_bayes_factor"], yerr=r.get("ln_bayes_factor_error"),
                    fmt="o", ms=4, color=COMPONENT_COLOURS["gwb"], mfc=COMPONENT_COLOURS["gwb"] if reliable else "white",
                    lw=0.8, alpha=0.8)
    _mark_rule(ax, rule, "ln_bayes_factor")
    ax.axhline(0.0, color="0.5", lw=0.8)
    ax.plot([], [], "o", color=COMPONENT_COLOURS["gwb"], mfc="white", label="unreliable reweighting")
    ax.set_xticks(range(len(amplitudes)), [f"{a:.2g}" for a in amplitudes])
    ax.set_xlim(-0.6, len(amplitudes) - 0.4)
    ax.set_xlabel("injected amplitude A")
    ax.set_ylabel("ln B, Hellings–Downs against uncorrelated")
    ax.set_title("Bayes factors by reweighting", fontsize=10)
    ax.legend(fontsize=7)
    ax.grid(alpha=0.3, axis="y")
    fig.tight_layout()
    return fig


def interval_coverage(quantiles, widths):
    """Fraction of ``quantiles`` inside the central credible interval of each width in ``widths``.

    A task's quantile ``q`` is the fraction of its posterior draws below the
    injected value; the injected value lies inside the central interval of
    width ``c`` when ``|2 q - 1| <= c``.
    """
    distance = np.abs(2.0 * np.asarray(quantiles, dtype=float) - 1.0)
    return np.mean(distance[:, None] <= np.asarray(widths, dtype=float)[None, :], axis=0)


def coverage_figure(rows):
    """How often the injected common-process parameters fall inside central credible intervals, by width.

    Uses the fit columns ``<parameter>.quantile`` of the tasks with a background
    (without one the injected values are not defined); ``None`` when there are none.
    The band is the central 95% of a binomial count for the number of tasks.
    """
    from scipy import stats

    quantiles = {}
    for name in COVERAGE_PARAMETERS:
        key = f"{name}.quantile"
        values = np.array([r[key] for r in finished(rows, key) if r.get("injected_amplitude", 1.0) != 0.0], dtype=float)
        values = values[np.isfinite(values)]
        if values.size:
            quantiles[name] = values
    if not quantiles:
        return None
    widths = np.linspace(0.0, 1.0, 1001)
    count = min(v.size for v in quantiles.values())
    fig, ax = plt.subplots(figsize=(5.6, 6.3))
    low = stats.binom.ppf(0.025, count, widths) / count
    high = stats.binom.ppf(0.975, count, widths) / count
    ax.fill_between(widths, low, high, color="#d9d4c7", lw=0, gid="band",
                    label=f"95% binomial range, {count} tasks")
    ax.plot([0, 1], [0, 1], color="#5c5c5c", lw=0.9, label="fraction = width")
    colours = (COMPONENT_COLOURS["gwb"], COMPONENT_COLOURS["red"])
    for (name, values), colour in zip(quantiles.items(), colours):
        inside = interval_coverage(values, widths)
        ax.plot(widths, inside, color=colour, lw=1.8, gid=f"coverage:{name}",
                label=f"{parameters.label(name)} ({values.size} tasks)")
        marks = np.array([0.68, 0.95])
        ax.plot(marks, interval_coverage(values, marks), "o", color=colour, mfc="white", mew=1.4, ms=5,
                clip_on=False, zorder=4)
    ax.plot([], [], "o", color="#5c5c5c", mfc="white", mew=1.4, ms=5, label="widths 0.68 and 0.95")
    ax.set_xlim(0, 1)
    ax.set_ylim(0, 1)
    ax.set_aspect("equal")
    ax.set_xticks(np.linspace(0, 1, 6))
    ax.set_yticks(np.linspace(0, 1, 6))
    ax.grid(color="#e6e6e6", lw=0.6)
    ax.set_axisbelow(True)
    ax.set_xlabel("credible interval width")
    ax.set_ylabel("fraction of injections inside")
    ax.set_title("Coverage of central credible intervals", fontsize=10)
    ax.legend(fontsize=8, loc="upper center", bbox_to_anchor=(0.5, -0.13), ncol=2, frameon=False)
    fig.tight_layout()
    return fig

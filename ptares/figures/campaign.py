"""Figures of a campaign: detection probability, recovered amplitude, S/N distributions and credible-interval coverage.

Amplitude axes are logarithmic when the positive injected amplitudes on them span more than
:data:`LOG_SPAN` (a factor ten), linear otherwise.  No-signal tasks (A = 0) cannot sit on a
logarithmic axis: the detection figure says in its legend how many there are and what they
did (set the threshold, or how often they detected), the S/N and Bayes-factor figures give them
a narrow panel of their own at the left.  On a linear axis the power of ten is written once in
the axis label (``x10^k``), never as an offset above the axis.
"""

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
from ptares.figures.common import COMPONENT_COLOURS, RESIDUAL_COLOUR, STAMP_COLOUR, display_scale, times_power
from ptares.inference import parameters

__all__ = ["COVERAGE_PARAMETERS", "LOG_SPAN", "bayes_figure", "coverage_figure", "detection_figure",
           "interval_coverage", "recovery_figure", "snr_figure", "sweep_figures"]

#: Parameters whose credible intervals the coverage figure checks; results.csv has ``<name>.quantile``.
COVERAGE_PARAMETERS = (parameters.COMMON_AMPLITUDE, parameters.COMMON_INDEX, parameters.memory("lg_strain"),
                       parameters.memory("epoch"))

#: Positive values spanning more than this ratio get a logarithmic axis.
LOG_SPAN = 10.0



def _groups(rows):
    """Rows grouped by the axes other than the background amplitude."""
    import json

    keys = sorted({k for r in rows for k in r if k.startswith("axis:") and k != "axis:gwb.amplitude"})
    groups = {}
    for r in rows:  # values may be lists (e.g. timing-model terms): group on their JSON text
        label = tuple((k[5:], r.get(k) if isinstance(r.get(k), (int, float, str)) else json.dumps(r.get(k))) for k in keys)
        groups.setdefault(label, []).append(r)
    return groups


def spans_decades(values) -> bool:
    """Whether the positive ``values`` span more than :data:`LOG_SPAN` (then their axis is logarithmic)."""
    positive = np.array([v for v in values if isinstance(v, (int, float)) and v > 0], dtype=float)
    return positive.size >= 2 and positive.max() > LOG_SPAN * positive.min()


def _amplitudes(rows) -> list:
    """The distinct injected amplitudes of ``rows``, ascending (tasks without one left out)."""
    return sorted({float(r["injected_amplitude"]) for r in rows if isinstance(r.get("injected_amplitude"), (int, float))})


def _tasks(count, kind: str = "") -> str:
    """``"1 task"``, ``"3 tasks"``, ``"3 no-signal tasks"``."""
    noun = f"{kind} task" if kind else "task"
    return f"{count} {noun}" if count == 1 else f"{count} {noun}s"


def _no_signal_note(silent, rule) -> str:
    """What the no-signal tasks left off a logarithmic amplitude axis did, for a legend."""
    count = len(silent)
    if rule.from_null_tasks:
        return f"{_tasks(count, 'no-signal')} (A = 0) set the threshold; not on the log axis"
    (detection,) = detection_probability(silent, rule).values()
    return (f"{_tasks(count, 'no-signal')} (A = 0), not on the log axis: "
            f"detection probability {detection.fraction:.2f} \u00b1 {detection.error:.2f}")


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
        figures["detection.png"] = detection_figure(counted, rule, false_alarm)
    if rows:
        figures["recovery.png"] = recovery_figure(rows)
        figures["snr.png"] = snr_figure(rows, rule)
    compared = finished(every_row, "ln_bayes_factor")
    if compared:
        figures["bayes.png"] = bayes_figure(compared, rule)
    coverage = coverage_figure(every_row)
    if coverage is not None:
        figures["coverage.png"] = coverage
    return figures


def detection_figure(rows, rule, false_alarm: float):
    """Share of tasks that detect under ``rule`` against injected amplitude, one curve per group of the
    other campaign axes, with binomial standard errors (:func:`~ptares.campaign.detection.detection_probability`)
    and the false-alarm probability as a dashed line.

    The amplitude axis is logarithmic when the positive amplitudes span more than :data:`LOG_SPAN`; the
    no-signal tasks are then left off it and the legend gives their count and what they did.
    """
    fig, ax = plt.subplots(figsize=(7.0, 4.5))
    amplitudes = _amplitudes(rows)
    log = spans_decades(amplitudes)
    scale = 1.0 if log else display_scale(amplitudes)
    for label, members in _groups(rows).items():
        shown = [(a, d) for a, d in detection_probability(members, rule).items()
                 if isinstance(a, (int, float)) and (a > 0 or not log)]
        if not shown:
            continue
        text = ", ".join(f"{k} = {v:g}" if isinstance(v, float) else f"{k} = {v}" for k, v in label) or "all tasks"
        ax.errorbar([a / scale for a, _ in shown], [d.fraction for _, d in shown], yerr=[d.error for _, d in shown],
                    fmt="o-", capsize=3, label=text)
    ax.axhline(false_alarm, color="#9a9a9a", ls="--", lw=1, label=f"false-alarm probability {false_alarm:g}")
    silent = [r for r in rows if r.get("injected_amplitude") == 0.0]
    if log:
        ax.set_xscale("log")
        if silent:
            ax.plot([], [], " ", label=_no_signal_note(silent, rule))
    else:
        ax.ticklabel_format(axis="x", style="plain", useOffset=False)
    ax.set_xlabel("injected amplitude A" + times_power(scale))
    ax.set_ylabel("detection probability")
    ax.set_ylim(-0.03, 1.03)
    ax.set_title(f"{rule} ({rule.how})", fontsize=9)
    ax.legend(fontsize=7, loc="best")
    ax.grid(alpha=0.3)
    ax.grid(alpha=0.15, which="minor", axis="x")
    fig.tight_layout()
    return fig


def recovery_figure(rows):
    """Recovered A^2 (the optimal statistic, +- its sigma) of every task against its injected A^2, the mean per
    injected value, and the line recovered = injected.

    Both axes have one scale: the same limits (the panel is square) and, on linear axes, the same power of ten
    written in both labels.  When the positive injected values span more than :data:`LOG_SPAN` both axes are
    logarithmic: the no-signal tasks are then left out, and tasks recovering less than a tenth of the smallest
    injected value (or a negative A^2) are drawn as open triangles on the lower edge; the legend counts both.
    """
    fig, ax = plt.subplots(figsize=(6.0, 6.0))
    injected = np.array([r["injected_amplitude"] ** 2 for r in rows], dtype=float)
    recovered = np.array([r["hd_amplitude2"] for r in rows], dtype=float)
    sigma = np.array([r["hd_sigma"] for r in rows], dtype=float)
    colour = COMPONENT_COLOURS["gwb"]
    values = np.unique(injected)
    if spans_decades(values):
        on_axis = injected > 0
        injected, recovered, sigma = injected[on_axis], recovered[on_axis], sigma[on_axis]
        floor = injected.min() / 10.0
        top = 3.0 * max(injected.max(), recovered.max())
        low = recovered < floor
        ax.errorbar(injected[~low], recovered[~low], yerr=sigma[~low], fmt=".", alpha=0.5, color=colour, lw=0.6,
                    label="tasks (\u00b1 1\u03c3)")
        if low.any():
            ax.plot(injected[low], np.full(low.sum(), floor), "v", color=colour, mfc="white", ms=5, alpha=0.8,
                    clip_on=False, label=f"{_tasks(low.sum())} recovering A\u00b2 < {floor:.2g}, on the lower edge")
        limits = (floor, top)
        ax.set_xscale("log")
        ax.set_yscale("log")
        scale = 1.0
        if not on_axis.all():
            ax.plot([], [], " ", label=f"{_tasks((~on_axis).sum(), 'no-signal')} (A = 0), not on the log axes")
    else:
        scale = display_scale(np.concatenate([injected, recovered - sigma, recovered + sigma]))
        injected, recovered, sigma = injected / scale, recovered / scale, sigma / scale
        lowest = min(0.0, injected.min(), (recovered - sigma).min())
        highest = max(injected.max(), (recovered + sigma).max())
        pad = 0.05 * (highest - lowest) or 1.0
        limits = (lowest - pad, highest + pad)
        ax.errorbar(injected, recovered, yerr=sigma, fmt=".", alpha=0.5, color=colour, lw=0.6,
                    label="tasks (\u00b1 1\u03c3)")
        ax.ticklabel_format(style="plain", useOffset=False)
    values = np.unique(injected)
    means = np.array([np.mean(recovered[injected == a2]) for a2 in values])
    inside = means >= limits[0]
    ax.plot(values[inside], means[inside], "s", color=RESIDUAL_COLOUR, mfc="white", mew=1.4, ms=7, zorder=4,
            label="mean per injected value", gid="means")
    if not inside.all():  # a mean below a logarithmic axis: a filled triangle on its lower edge
        ax.plot(values[~inside], np.full((~inside).sum(), limits[0]), "v", color=RESIDUAL_COLOUR, ms=7, zorder=4,
                clip_on=False, label="mean below the axis")
    ax.plot(limits, limits, color="#5c5c5c", lw=1, zorder=1, label="recovered = injected", gid="recovered=injected")
    ax.set_xlim(*limits)
    ax.set_ylim(*limits)
    ax.set_aspect("equal", adjustable="box")
    ax.set_xlabel("injected A\u00b2" + times_power(scale))
    ax.set_ylabel("recovered A\u00b2, optimal statistic" + times_power(scale))
    ax.set_title("Amplitude recovery", fontsize=10)
    ax.legend(fontsize=7, loc="best")
    ax.grid(alpha=0.3)
    fig.tight_layout()
    return fig


class _AmplitudeAxis:
    """Where tasks of each injected amplitude go on a figure of a statistic against amplitude.

    Logarithmic (see :func:`spans_decades`) or linear (values divided by a power of ten); with a log axis
    and no-signal tasks, those get a narrow panel of their own at the left, sharing the vertical axis.
    """

    def __init__(self, amplitudes, figsize):
        self.amplitudes = amplitudes
        self.log = spans_decades(amplitudes)
        self.scale = 1.0 if self.log else display_scale(amplitudes)
        if self.log and 0.0 in amplitudes:
            self.fig, (self.null, self.ax) = plt.subplots(
                1, 2, sharey=True, figsize=(figsize[0] + 0.6, figsize[1]),
                gridspec_kw={"width_ratios": [1, 8]})
        else:
            self.fig, self.ax = plt.subplots(figsize=figsize)
            self.null = None
        positions = [self._position(a) for a in amplitudes if a > 0 or not self.log]
        if self.log:
            steps = np.diff(np.log10(positions))
            self.half = 0.3 * min(1.0, steps.min() if steps.size else 1.0)  # half a box width in decades
        else:
            steps = np.diff(positions)
            self.half = 0.3 * (steps.min() if steps.size else (positions[0] or 1.0))
        self.ax.set_gid("amplitude axis")

    def _position(self, amplitude):
        return amplitude if self.log else amplitude / self.scale

    def place(self, amplitude, offsets=0.0):
        """``(axes, x)`` of tasks with ``amplitude``, spread across the box width by ``offsets`` in [-1, 1]."""
        offsets = np.asarray(offsets, dtype=float)
        if self.log and amplitude == 0.0:
            return self.null, offsets * 0.3
        x = self._position(amplitude)
        return self.ax, (x * 10.0 ** (offsets * self.half) if self.log else x + offsets * self.half)

    def box(self, data, amplitude, colour="#1b1b1b"):
        """A box-and-whisker plot of ``data`` (box: quartiles; whiskers to 1.5 IQR) at ``amplitude``."""
        ax, x = self.place(amplitude)
        width = 0.6 if ax is self.null else (2.0 * self.half if not self.log else 2.0 * x * np.sinh(self.half * np.log(10)))
        drawn = ax.boxplot([data], positions=[x], widths=[width], manage_ticks=False,
                           medianprops={"color": colour, "lw": 1.6}, flierprops={"ms": 3, "mec": "#5c5c5c"})
        if self.log and ax is self.ax:  # boxplot widths are linear: make them symmetric in log
            for line in drawn["boxes"] + drawn["medians"] + drawn["caps"]:
                xs = np.asarray(line.get_xdata(), dtype=float)
                line.set_xdata(x * 10.0 ** ((xs - x) / (width / 2.0) * self.half))

    def finish(self, ylabel: str):
        """Scales, limits, ticks and labels."""
        ax = self.ax
        shown = [self._position(a) for a in self.amplitudes if a > 0 or not self.log]
        if self.log:
            ax.set_xscale("log")
            ax.set_xlim(min(shown) / 10.0 ** (2.0 * self.half), max(shown) * 10.0 ** (2.0 * self.half))
        else:
            ax.set_xlim(min(shown) - 2.0 * self.half, max(shown) + 2.0 * self.half)
            ax.set_xticks(shown, [f"{x:.3g}" for x in shown])
        ax.set_xlabel("injected amplitude A" + times_power(self.scale))
        if self.null is not None:
            self.null.set_xlim(-0.6, 0.6)
            self.null.set_xticks([0.0], ["A = 0"])
            self.null.set_ylabel(ylabel)
            self.null.set_xlabel("no signal")
            self.null.grid(alpha=0.3, axis="y")
        else:
            ax.set_ylabel(ylabel)

    def layout(self):
        """Tight layout, the no-signal panel close to the main one; returns the figure."""
        self.fig.tight_layout()
        if self.null is not None:
            self.fig.subplots_adjust(wspace=0.04)
        return self.fig


def snr_figure(rows, rule):
    """Box-and-whisker plots of the Hellings–Downs S/N of the tasks at each injected amplitude (box: quartiles
    and median; whiskers: 1.5 times the interquartile range; points beyond), with the detection threshold
    when the rule reads the S/N.  On a logarithmic amplitude axis the no-signal tasks have a panel at the left."""
    amplitudes = _amplitudes(rows)
    axis = _AmplitudeAxis(amplitudes, (7.0, 4.5))
    for a in amplitudes:
        axis.box([r["hd_snr"] for r in rows if r.get("injected_amplitude") == a], a)
    _mark_rule(axis.ax, rule, "hd_snr")
    if axis.null is not None:
        _mark_rule(axis.null, rule, "hd_snr", label=False)
    axis.finish("Hellings\u2013Downs S/N")
    ax = axis.ax
    ax.set_title("S/N distributions", fontsize=10)
    ax.legend(fontsize=7, loc="best")
    ax.grid(alpha=0.3, axis="y")
    return axis.layout()


def _mark_rule(ax, rule, column: str, label: bool = True) -> None:
    """The detection threshold as a dashed line where ``rule`` reads ``column`` (the figure's statistic),
    else the rule in the legend."""
    if rule.column == column:
        ax.axhline(rule.threshold, color=STAMP_COLOUR, ls="--", lw=1,
                   label=f"detection: {rule} ({rule.how})" if label else None)
    elif label:
        ax.plot([], [], " ", label=f"detection: {rule}")


def bayes_figure(rows, rule):
    """ln Bayes factor (Hellings–Downs against uncorrelated) of every task against its injected amplitude, with
    its standard error; unreliable reweightings hollow; the detection threshold when the rule uses ln B.  The
    points of one amplitude are spread sideways; on a logarithmic amplitude axis the no-signal tasks have a
    panel at the left."""
    amplitudes = _amplitudes(rows)
    axis = _AmplitudeAxis(amplitudes, (7.0, 4.5))
    offsets = np.random.default_rng(0).uniform(-0.5, 0.5, len(rows))  # spread the points of one amplitude
    colour = COMPONENT_COLOURS["gwb"]
    for r, offset in zip(rows, offsets):
        reliable = bool(r.get("bayes_reliable", True))
        ax, x = axis.place(float(r["injected_amplitude"]), offset)
        ax.errorbar(x, r["ln_bayes_factor"], yerr=r.get("ln_bayes_factor_error"), fmt="o", ms=4, color=colour,
                    mfc=colour if reliable else "white", lw=0.8, alpha=0.8)
    for ax in (axis.ax, axis.null):
        if ax is not None:
            _mark_rule(ax, rule, "ln_bayes_factor", label=ax is axis.ax)
            ax.axhline(0.0, color="0.5", lw=0.8)
    ax = axis.ax
    ax.plot([], [], "o", color=colour, label="reliable reweighting")
    ax.plot([], [], "o", color=colour, mfc="white", label="unreliable reweighting")
    axis.finish("ln B, Hellings\u2013Downs against uncorrelated")
    ax.set_title("Bayes factors by reweighting", fontsize=10)
    ax.legend(fontsize=7, loc="best")
    ax.grid(alpha=0.3, axis="y")
    return axis.layout()


def interval_coverage(quantiles, widths):
    """Fraction of ``quantiles`` inside the central credible interval of each width in ``widths``.

    A task's quantile ``q`` is the fraction of its posterior draws below the
    injected value; the injected value lies inside the central interval of
    width ``c`` when ``|2 q - 1| <= c``.
    """
    distance = np.abs(2.0 * np.asarray(quantiles, dtype=float) - 1.0)
    return np.mean(distance[:, None] <= np.asarray(widths, dtype=float)[None, :], axis=0)


def coverage_figure(rows):
    """How often the injected common-process (and memory-step) parameters fall inside central credible intervals, by width.

    Uses the fit columns ``<parameter>.quantile`` of the tasks with a background
    (without one the injected values are not defined); ``None`` when there are none.
    The band is the central 95% of a binomial count for the number of tasks.
    """
    from scipy import stats

    quantiles = {}
    for name in COVERAGE_PARAMETERS:
        key = f"{name}.quantile"
        common = name in (parameters.COMMON_AMPLITUDE, parameters.COMMON_INDEX)  # no background: nothing to cover
        values = np.array([r[key] for r in finished(rows, key) if not common or r.get("injected_amplitude", 1.0) != 0.0],
                          dtype=float)
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
    colours = (COMPONENT_COLOURS["gwb"], COMPONENT_COLOURS["red"], COMPONENT_COLOURS["wave"], COMPONENT_COLOURS["binary"])
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

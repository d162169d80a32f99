"""Detection statistics of a campaign: the detection rule at a false-alarm probability, and
the detection probability at each injected amplitude with its binomial uncertainty.

With the optimal statistic (``[sweep] detection = "snr"``) a task detects when its
Hellings–Downs S/N exceeds the (1 - false_alarm) quantile of the no-signal tasks' S/N (at
least five of them); with fewer, when its exact noise-only p-value (``hd_p_exact``,
:mod:`ptares.correlation.null_distribution`) is below the false-alarm probability; only
without either, when the S/N exceeds the unit-normal value.  With the Bayes factor
(``detection = "bayes_factor"``, the ``compare`` stage) a task detects when its
``ln_bayes_factor`` exceeds the same quantile of the no-signal tasks' values, or, with fewer
than five, the fixed ``[sweep] ln_bayes_threshold`` (which carries no false-alarm probability).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = ["Detection", "DetectionRule", "MIN_NULL_TASKS", "detection_probability", "detection_rule", "finished"]

#: No-signal tasks needed before a threshold is read from their distribution.
MIN_NULL_TASKS = 5

_LABELS = {"hd_snr": "Hellings\u2013Downs S/N", "hd_p_exact": "exact noise-only p", "ln_bayes_factor": "ln B"}


def finished(rows, key: str) -> list:
    """The rows of tasks that finished and have a number under ``key``."""
    return [r for r in rows if r.get("status") == "ok" and isinstance(r.get(key), float)]


@dataclass(frozen=True)
class DetectionRule:
    """A task detects when its ``column`` is above ``threshold`` (``above``) or below it; ``how`` says
    how the threshold was set, ``from_null_tasks`` whether the no-signal tasks set it."""

    column: str
    threshold: float
    above: bool
    how: str
    from_null_tasks: bool = False

    def detects(self, row) -> bool:
        value = row[self.column]
        return value > self.threshold if self.above else value < self.threshold

    def __str__(self) -> str:
        return f"{_LABELS.get(self.column, self.column)} {'>' if self.above else '<'} {self.threshold:.3g}"


def detection_rule(rows, false_alarm: float, statistic: str = "snr", ln_bayes_threshold: float = 3.0) -> DetectionRule:
    """The rule at ``false_alarm`` for ``statistic`` (``"snr"`` or ``"bayes_factor"``) from the campaign's rows."""
    from scipy import stats

    column = "ln_bayes_factor" if statistic == "bayes_factor" else "hd_snr"
    done = finished(rows, column)
    silent = [r[column] for r in done if r.get("injected_amplitude") == 0.0]
    if len(silent) >= MIN_NULL_TASKS:
        return DetectionRule(column, float(np.quantile(silent, 1.0 - false_alarm)), True,
                             f"from {len(silent)} no-signal tasks", from_null_tasks=True)
    if statistic == "bayes_factor":
        return DetectionRule(column, float(ln_bayes_threshold), True,
                             f"fixed ln B threshold: fewer than {MIN_NULL_TASKS} no-signal tasks, no false-alarm probability")
    if done and len(finished(done, "hd_p_exact")) == len(done):
        return DetectionRule("hd_p_exact", float(false_alarm), False,
                             f"each task's exact noise-only p-value: fewer than {MIN_NULL_TASKS} no-signal tasks")
    return DetectionRule(column, float(stats.norm.isf(false_alarm)), True,
                         f"unit-normal S/N (fewer than {MIN_NULL_TASKS} no-signal tasks, no exact p-values)")


@dataclass(frozen=True)
class Detection:
    """Share ``k / n`` of ``n = tasks`` that detect, and its binomial standard error
    ``sqrt(p (1 - p) / n)`` with ``p = (k + 1/2) / (n + 1)``, which is never zero, not even
    when no task or every task detects."""

    fraction: float
    error: float
    tasks: int

    def __str__(self) -> str:
        return f"{self.fraction:.2f} +/- {self.error:.2f} ({self.tasks} tasks)"


def detection_probability(rows, rule: DetectionRule) -> dict:
    """Injected amplitude -> :class:`Detection` over the finished tasks with that amplitude."""
    groups = {}
    for r in finished(rows, rule.column):
        groups.setdefault(r.get("injected_amplitude"), []).append(rule.detects(r))
    result = {}
    for amplitude in sorted(groups, key=lambda a: a or 0.0):
        hits = np.asarray(groups[amplitude])
        n, k = hits.size, int(hits.sum())
        p = (k + 0.5) / (n + 1.0)
        result[amplitude] = Detection(k / n, float(np.sqrt(p * (1.0 - p) / n)), n)
    return result

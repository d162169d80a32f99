"""Detection statistics of a campaign: the detection rule at a false-alarm probability, and
the detection probability at each injected amplitude with its binomial uncertainty.

A task detects when its Hellings-Downs S/N exceeds a common threshold, the quantile of
the no-signal tasks' S/N; with too few of those, when its exact noise-only p-value
(``hd_p_exact``, :mod:`ptares.correlation.null_distribution`) is below the false-alarm
probability, a threshold of its own; only without either, the unit-normal S/N.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = ["Detection", "PerTaskThreshold", "detection_probability", "detection_threshold", "detects", "finished"]


def finished(rows, key: str) -> list:
    """The rows of tasks that finished and have a number under ``key``."""
    return [r for r in rows if r.get("status") == "ok" and isinstance(r.get(key), float)]


class PerTaskThreshold(float):
    """No common S/N threshold (its value as a number is NaN): a task detects when its exact
    noise-only p-value ``hd_p_exact`` is below ``false_alarm``."""

    def __new__(cls, false_alarm: float):
        value = super().__new__(cls, float("nan"))
        value.false_alarm = float(false_alarm)
        return value

    def __repr__(self) -> str:
        return f"PerTaskThreshold(false_alarm={self.false_alarm!r})"


def detection_threshold(rows, false_alarm: float):
    """Detection rule at ``false_alarm`` from the campaign's rows; ``(threshold, how)``.

    With at least five finished tasks whose injected amplitude is 0, ``threshold`` is the
    (1 - false_alarm) quantile of their Hellings-Downs S/N.  With fewer, and every finished
    task carrying ``hd_p_exact``, it is a :class:`PerTaskThreshold` (exact null of each task);
    otherwise the unit-normal value, which assumes the null S/N is Gaussian (it is skewed).
    """
    from scipy import stats

    done = finished(rows, "hd_snr")
    silent = [r["hd_snr"] for r in done if r.get("injected_amplitude") == 0.0]
    if len(silent) >= 5:
        return float(np.quantile(silent, 1.0 - false_alarm)), f"from {len(silent)} no-signal tasks"
    if done and len(finished(done, "hd_p_exact")) == len(done):
        return PerTaskThreshold(false_alarm), "per task: exact noise-only p-value below the false-alarm probability"
    return float(stats.norm.isf(false_alarm)), "unit-normal S/N (fewer than 5 no-signal tasks, no exact p-values)"


def detects(row, threshold) -> bool:
    """Whether a finished task detects: its exact p-value below a :class:`PerTaskThreshold`'s
    false-alarm probability, else its Hellings-Downs S/N above ``threshold``."""
    if isinstance(threshold, PerTaskThreshold):
        return row["hd_p_exact"] < threshold.false_alarm
    return row["hd_snr"] > threshold


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


def detection_probability(rows, threshold) -> dict:
    """Injected amplitude -> :class:`Detection` over the finished tasks with that amplitude;
    ``threshold`` a common S/N or a :class:`PerTaskThreshold` (see :func:`detects`)."""
    key = "hd_p_exact" if isinstance(threshold, PerTaskThreshold) else "hd_snr"
    groups = {}
    for r in finished(rows, key):
        groups.setdefault(r.get("injected_amplitude"), []).append(detects(r, threshold))
    result = {}
    for amplitude in sorted(groups, key=lambda a: a or 0.0):
        hits = np.asarray(groups[amplitude])
        n, k = hits.size, int(hits.sum())
        p = (k + 0.5) / (n + 1.0)
        result[amplitude] = Detection(k / n, float(np.sqrt(p * (1.0 - p) / n)), n)
    return result

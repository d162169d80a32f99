"""Detection statistics of a campaign: the S/N threshold at a false-alarm probability, and
the detection probability at each injected amplitude with its binomial uncertainty."""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

__all__ = ["Detection", "finished", "detection_threshold", "detection_probability"]


def finished(rows, key: str) -> list:
    """The rows of tasks that finished and have a number under ``key``."""
    return [r for r in rows if r.get("status") == "ok" and isinstance(r.get(key), float)]


def detection_threshold(rows, false_alarm: float):
    """S/N threshold at ``false_alarm`` from the tasks without a background; ``(threshold, how)``.

    The threshold is the (1 - false_alarm) quantile of the Hellings-Downs S/N of the
    finished tasks whose injected amplitude is 0 (at least five of them); with fewer,
    the unit-normal value, which assumes the null S/N is Gaussian.
    """
    from scipy import stats

    silent = [r["hd_snr"] for r in finished(rows, "hd_snr") if r.get("injected_amplitude") == 0.0]
    if len(silent) >= 5:
        return float(np.quantile(silent, 1.0 - false_alarm)), f"from {len(silent)} no-signal tasks"
    return float(stats.norm.isf(false_alarm)), "unit-normal S/N (fewer than 5 no-signal tasks)"


@dataclass(frozen=True)
class Detection:
    """Share ``k / n`` of ``n = tasks`` whose S/N exceeds the threshold, and its binomial standard
    error ``sqrt(p (1 - p) / n)`` with ``p = (k + 1/2) / (n + 1)``, which is never zero, not even
    when no task or every task detects."""

    fraction: float
    error: float
    tasks: int

    def __str__(self) -> str:
        return f"{self.fraction:.2f} +/- {self.error:.2f} ({self.tasks} tasks)"


def detection_probability(rows, threshold: float) -> dict:
    """Injected amplitude -> :class:`Detection` over the finished tasks with that amplitude."""
    groups = {}
    for r in finished(rows, "hd_snr"):
        groups.setdefault(r.get("injected_amplitude"), []).append(r["hd_snr"] > threshold)
    result = {}
    for amplitude in sorted(groups, key=lambda a: a or 0.0):
        hits = np.asarray(groups[amplitude])
        n, k = hits.size, int(hits.sum())
        p = (k + 0.5) / (n + 1.0)
        result[amplitude] = Detection(k / n, float(np.sqrt(p * (1.0 - p) / n)), n)
    return result

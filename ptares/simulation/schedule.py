"""Observing schedules: when each pulsar is observed and how well.

Epochs fall every ``cadence`` days from ``start`` over ``span``, each moved by a
Gaussian offset of standard deviation ``cadence_jitter``; epochs moved outside
the window, or inside ``gaps``, are dropped.  Each TOA's quoted uncertainty is
the pulsar's ``toa_error`` times a log-normal factor of ``toa_error_scatter``
dex.  All times are MJD (days), uncertainties seconds.
"""

from __future__ import annotations

import numpy as np

__all__ = ["observation_epochs", "toa_uncertainties", "array_window"]


def observation_epochs(start, span_days, cadence, jitter, gaps, rng: np.random.Generator) -> np.ndarray:
    """Sorted, distinct observing epochs (MJD) inside ``[start, start + span_days]``."""
    end = start + span_days
    nominal = start + cadence * np.arange(int(np.floor(span_days / cadence)) + 1)
    offsets = rng.normal(0.0, jitter, nominal.size) if jitter > 0 else np.zeros(nominal.size)
    epochs = nominal + offsets
    keep = (epochs >= start) & (epochs <= end)
    for gap_start, gap_end in gaps:
        keep &= ~((epochs >= gap_start) & (epochs <= gap_end))
    return np.unique(epochs[keep])


def toa_uncertainties(count: int, toa_error: float, scatter_dex: float, rng: np.random.Generator) -> np.ndarray:
    """Per-TOA uncertainties (s) scattered log-normally about ``toa_error`` (s)."""
    if scatter_dex == 0:
        return np.full(count, float(toa_error))
    return toa_error * 10.0 ** (scatter_dex * rng.standard_normal(count))


def array_window(starts, ends) -> tuple[float, float]:
    """The union of the pulsars' observing windows: ``(first start, span)`` in days."""
    first = float(np.min(starts))
    return first, float(np.max(ends)) - first

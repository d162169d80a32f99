"""Figures of a campaign: detection probability, recovered amplitude, S/N distributions and interval coverage."""

from __future__ import annotations

import matplotlib

matplotlib.use("Agg")

import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402

from ptares.figures.common import COMPONENT_COLOURS

__all__ = ["detection_threshold", "sweep_figures"]


def _ok(rows, key):
    return [r for r in rows if r.get("status") == "ok" and isinstance(r.get(key), float)]


def detection_threshold(rows, false_alarm: float):
    """S/N threshold at ``false_alarm`` from the tasks without a background; ``(threshold, how)``."""
    from scipy import stats

    silent = [r["hd_snr"] for r in _ok(rows, "hd_snr") if r.get("injected_amplitude") == 0.0]
    if len(silent) >= 5:
        return float(np.quantile(silent, 1.0 - false_alarm)), f"from {len(silent)} no-signal tasks"
    return float(stats.norm.isf(false_alarm)), "unit-normal S/N (fewer than 5 no-signal tasks)"


def _groups(rows):
    """Rows grouped by the axes other than the background amplitude."""
    import json

    keys = sorted({k for r in rows for k in r if k.startswith("axis:") and k != "axis:gwb.amplitude"})
    groups = {}
    for r in rows:  # values may be lists (e.g. timing-model terms): group on their JSON text
        label = tuple((k[5:], r.get(k) if isinstance(r.get(k), (int, float, str)) else json.dumps(r.get(k))) for k in keys)
        groups.setdefault(label, []).append(r)
    return groups


def sweep_figures(rows, false_alarm: float = 0.05) -> dict:
    """Campaign figures by file name: detection probability, recovered amplitude, S/N, and a P-P plot."""
    figures = {}
    rows = _ok(rows, "hd_snr")
    if rows:
        threshold, how = detection_threshold(rows, false_alarm)
        fig, ax = plt.subplots(figsize=(7.0, 4.5))
        for label, members in _groups(rows).items():
            amplitudes = sorted({r["injected_amplitude"] for r in members})
            fractions, errors = [], []
            for a in amplitudes:
                snr = np.array([r["hd_snr"] for r in members if r["injected_amplitude"] == a])
                f = np.mean(snr > threshold)
                fractions.append(f)
                errors.append(np.sqrt(max(f * (1 - f), 1.0 / snr.size) / snr.size))
            text = ", ".join(f"{k} = {v:g}" if isinstance(v, float) else f"{k} = {v}" for k, v in label) or "all tasks"
            ax.errorbar(amplitudes, fractions, yerr=errors, fmt="o-", capsize=3, label=text)
        ax.axhline(false_alarm, color="#9a9a9a", ls="--", lw=1, label=f"false-alarm probability {false_alarm:g}")
        ax.set_xlabel("injected amplitude A")
        ax.set_ylabel("detection probability")
        ax.set_ylim(-0.03, 1.03)
        ax.set_title(f"Hellings\u2013Downs S/N > {threshold:.2f} ({how})", fontsize=10)
        ax.legend(fontsize=7)
        ax.grid(alpha=0.3)
        fig.tight_layout()
        figures["detection.png"] = fig

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
        ax.axhline(threshold, color="#c1121f", ls="--", lw=1, label=f"detection threshold {threshold:.2f}")
        ax.set_xlabel("injected amplitude A")
        ax.set_ylabel("Hellings\u2013Downs S/N")
        ax.set_title("S/N distributions", fontsize=10)
        ax.legend(fontsize=8)
        ax.grid(alpha=0.3, axis="y")
        fig.tight_layout()
        figures["snr.png"] = fig

    # only tasks with a background: without one the injected amplitude and index are not defined
    quantiles = {name: np.sort([r[f"{name}_quantile"] for r in _ok(rows, f"{name}_quantile")
                                if r.get("injected_amplitude", 1.0) != 0.0])
                 for name in ("gwb_log10_A", "gwb_gamma")}
    quantiles = {k: v for k, v in quantiles.items() if v.size}
    if quantiles:
        fig, ax = plt.subplots(figsize=(5.0, 5.0))
        count = min(v.size for v in quantiles.values())
        grid = np.linspace(0, 1, 101)
        half_width = 1.36 / np.sqrt(count)  # Kolmogorov-Smirnov 95% band, for the smallest sample shown
        ax.fill_between(grid, np.clip(grid - half_width, 0, 1), np.clip(grid + half_width, 0, 1), color="#9a9a9a",
                        alpha=0.25, label=f"95% band ({count} tasks)")
        for name, values in quantiles.items():
            ax.plot(np.concatenate([[0], values, [1]]), np.concatenate([[0], np.arange(1, values.size + 1) / values.size, [1]]),
                    drawstyle="steps-post", label=name)
        ax.plot([0, 1], [0, 1], color="k", lw=0.8)
        ax.set_xlabel("credible level")
        ax.set_ylabel("fraction of injections within it")
        ax.set_title("P-P plot of posterior coverage", fontsize=10)
        ax.legend(fontsize=8)
        fig.tight_layout()
        figures["pp.png"] = fig
    return figures

"""Figures of ``ptares correlate``: binned pair correlations with the expected band, and the null distributions."""

from __future__ import annotations

import matplotlib

matplotlib.use("Agg")

import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402

from ptares.figures.common import COMPONENT_COLOURS, display_scale
from ptares.physics.patterns import pattern_function  # noqa: E402

__all__ = ["correlations_figure", "nulls_figure"]


def correlations_figure(result):
    """Binned pair correlations against angle with the recovered Hellings–Downs curve and its expected scatter.

    ``result`` is a :class:`ptares.correlation.analysis.CorrelationResult`.
    """
    hd = result.estimates["hellings-downs"]
    binned = result.binned
    scale = display_scale(np.concatenate([binned.rho + binned.error, binned.rho - binned.error, [hd["amplitude2"]]]))
    angle = np.linspace(0.0, np.pi, 400)
    curve = hd["amplitude2"] * pattern_function("hellings-downs")(angle) / scale
    width = np.interp(angle, binned.centres, result.band / scale)
    fig, ax = plt.subplots(figsize=(8.0, 5.0))
    ax.axhline(0.0, color="k", lw=0.6)
    ax.fill_between(np.degrees(angle), curve - width, curve + width, color=COMPONENT_COLOURS["gwb"], alpha=0.18,
                    lw=0, label=f"expected scatter at that amplitude ({result.band_method})")
    ax.plot(np.degrees(angle), curve, color=COMPONENT_COLOURS["gwb"], lw=1.8,
            label=f"Hellings\u2013Downs x recovered A\u00b2 ({hd['amplitude2']:.3g})")
    if result.settings.get("overlays"):
        for name, style in (("monopole", "--"), ("dipole", ":")):
            value = result.estimates[name]["amplitude2"]
            ax.plot(np.degrees(angle), value * pattern_function(name)(angle) / scale, style, color="#6d597a", lw=1.2,
                    label=f"{name} fit (A\u00b2 = {value:.3g})")
    if result.injected_amplitude2:
        ax.plot(np.degrees(angle), result.injected_amplitude2 * pattern_function("hellings-downs")(angle) / scale,
                color="#9a9a9a", lw=1.0, ls="--", label=f"injected A\u00b2 ({result.injected_amplitude2:.3g})")
    ax.errorbar(np.degrees(binned.centres), binned.rho / scale, yerr=binned.error / scale, fmt="o", ms=6,
                color="#c1121f", capsize=3, zorder=5, label="binned pair correlations (noise-only errors)")
    relation = "\u2264" if hd.get("p_value_is_bound") else "="
    p_text = f", p {relation} {hd['p_value']:.3g}" if "p_value" in hd else ""
    ax.set_title(f"Cross-correlations of {len(result.names)} pulsars, {result.pairs.rho.size} pairs: "
                 f"S/N = {hd['snr']:.2f}{p_text}; fit \u03c7\u00b2 = {result.fit['chi2']:.1f} / {result.fit['dof']}",
                 fontsize=10)
    ax.set_xlim(0, 180)
    ax.set_xticks(np.arange(0, 181, 30))
    ax.set_xlabel("angular separation (degrees)")
    ax.set_ylabel(f"correlation \u03c1 (units of {scale:.0e})")
    ax.legend(fontsize=7, loc="upper right")
    ax.grid(alpha=0.3)
    fig.tight_layout()
    return fig


def nulls_figure(result):
    """Histograms of the null S/N of each pattern with the observed S/N marked."""
    from scipy import stats

    kinds = [kind for kind in ("phase_shifts", "sky_scrambles") if kind in result.nulls]
    names = ["hellings-downs", "monopole", "dipole"]
    fig, axes = plt.subplots(1, 3, figsize=(11.0, 3.6), squeeze=False)
    colours = {"phase_shifts": "#2a6f97", "sky_scrambles": "#b8553a"}
    for ax, name in zip(axes[0], names):
        observed = result.estimates[name]["snr"]
        values = [result.nulls[k][name] for k in kinds if name in result.nulls[k]]
        high = max([abs(observed) + 1] + [np.max(np.abs(v)) for v in values])
        bins = np.linspace(-high, high, 40)
        for kind in kinds:
            if name in result.nulls[kind]:
                ax.hist(result.nulls[kind][name], bins=bins, density=True, alpha=0.55, color=colours[kind],
                        label=f"{kind.replace('_', ' ')} ({result.nulls[kind][name].size})")
        x = np.linspace(-high, high, 200)
        ax.plot(x, stats.norm.pdf(x), color="k", lw=0.8, label="unit normal")
        ax.axvline(observed, color="#c1121f", lw=2, label=f"observed {observed:.2f}")
        ax.set_title(f"{name}: p = {result.estimates[name].get('p_value', float('nan')):.3g}", fontsize=10)
        ax.set_xlabel("S/N")
        ax.legend(fontsize=7)
    axes[0, 0].set_ylabel("density")
    fig.tight_layout()
    return fig

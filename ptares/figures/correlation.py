"""Figures of ``ptares correlate``: binned pair correlations with the expected band, and the null distributions."""

from __future__ import annotations

import matplotlib

matplotlib.use("Agg")

import matplotlib.pyplot as plt
import numpy as np

from ptares.figures.common import COMPONENT_COLOURS, INJECTED_COLOUR, STAMP_COLOUR, display_scale, times_power
from ptares.physics.patterns import pattern_function

__all__ = ["correlations_figure", "nulls_figure"]



def correlations_figure(result):
    """Binned pair correlations against angle with the recovered Hellings–Downs curve and its expected scatter,
    the injected curve (orange, dashed) when the dataset records one, and the monopole and dipole fits when
    asked for.

    Every value on the vertical axis (the binned correlations rho, which estimate A^2 times the pattern, their
    errors, the band and the curves) is divided by one power of ten, written once in the axis label.
    ``result`` is a :class:`ptares.correlation.analysis.CorrelationResult`.
    """
    hd = result.estimates["hellings-downs"]
    binned = result.binned
    scale = display_scale(np.concatenate([binned.rho + binned.error, binned.rho - binned.error, [hd["amplitude2"]],
                                          [result.injected_amplitude2 or 0.0]]))
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
                color=INJECTED_COLOUR, lw=1.2, ls="--", gid="injected",
                label=f"injected: Hellings\u2013Downs x A\u00b2 = {result.injected_amplitude2:.3g}")
    ax.errorbar(np.degrees(binned.centres), binned.rho / scale, yerr=binned.error / scale, fmt="o", ms=6,
                color="#1b1b1b", capsize=3, zorder=5, label="binned pair correlations (noise-only errors)")
    relation = "\u2264" if hd.get("p_value_is_bound") else "="
    p_text = f", p {relation} {hd['p_value']:.3g}" if "p_value" in hd else ""
    ax.set_title(f"Cross-correlations of {len(result.names)} pulsars, {result.pairs.rho.size} pairs: "
                 f"S/N = {hd['snr']:.2f}{p_text}; fit \u03c7\u00b2 = {result.fit['chi2']:.1f} / {result.fit['dof']}"
                 + (f", p calibrated = {result.fit['p_calibrated']:.3g}" if result.fit.get("p_calibrated") is not None else ""),
                 fontsize=10)
    ax.set_xlim(0, 180)
    ax.set_xticks(np.arange(0, 181, 30))
    ax.set_xlabel("angular separation (degrees)")
    ax.set_ylabel("correlation \u03c1" + times_power(scale))
    ax.ticklabel_format(axis="y", style="plain", useOffset=False)
    ax.legend(fontsize=7, loc="best")
    ax.grid(alpha=0.3)
    fig.tight_layout()
    return fig


def nulls_figure(result):
    """Histograms of the null S/N of each pattern, the exact noise-only density, and the observed S/N.

    The density comes from the null's eigenvalues by Imhof's inversion integral
    (:func:`ptares.correlation.null_distribution.null_density`).
    """
    from ptares.correlation.null_distribution import null_density

    kinds = [kind for kind in ("phase_shifts", "sky_scrambles") if kind in result.nulls]
    names = ["hellings-downs", "monopole", "dipole"]
    fig, axes = plt.subplots(1, 3, figsize=(11.0, 3.8), squeeze=False)
    colours = {"phase_shifts": "#2a6f97", "sky_scrambles": "#b8553a"}
    for ax, name in zip(axes[0], names):
        entry = result.estimates[name]
        observed = entry["snr"]
        values = [result.nulls[k][name] for k in kinds if name in result.nulls[k]]
        high = max([abs(observed) + 1, 4.0] + [np.max(np.abs(v)) for v in values])
        bins = np.linspace(-high, high, 40)
        for kind in kinds:
            if name in result.nulls[kind]:
                ax.hist(result.nulls[kind][name], bins=bins, density=True, alpha=0.45, color=colours[kind],
                        label=f"{kind.replace('_', ' ')} ({result.nulls[kind][name].size})")
        eigenvalues = result.null_eigenvalues.get(name)
        exact_text = ""
        if eigenvalues is not None and eigenvalues.size:
            x = np.linspace(-high, high, 300)
            ax.plot(x, null_density(x, eigenvalues), color="k", lw=1.2,
                    label=f"exact noise-only density (skewness {entry['null_skewness']:.2f})")
            exact_text = f", p exact = {entry['p_exact']:.2g}"
        ax.axvline(observed, color=STAMP_COLOUR, lw=2, label=f"observed {observed:.2f}{exact_text}")
        p_trials = entry.get("p_value")
        relation = "\u2264" if entry.get("p_value_is_bound") else "="
        trials_text = f"p from trials {relation} {p_trials:.3g}" if p_trials is not None else "no null trials"
        ax.set_title(f"{name}: {trials_text}", fontsize=10)
        ax.set_xlabel("S/N")
        ax.set_ylim(0.0, 1.45 * ax.get_ylim()[1])  # room for the legend above the curves
        ax.legend(fontsize=7, loc="upper left")
    axes[0, 0].set_ylabel("density")
    fig.tight_layout()
    return fig

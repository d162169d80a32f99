"""Figures of a fit: marginal posteriors (corner) and walker traces.

The corner figure shows, below its diagonal, the 68% and 95% highest-density
regions of each pair of parameters as shaded areas (from a Gaussian-smoothed
2-D histogram) with the median as a point; on its diagonal, each parameter's
smoothed marginal density with its central 68% and 95% intervals shaded and the
median as a point on a stem.  Injected values are orange.  An unconverged fit
is stamped "not converged" in red.
"""

from __future__ import annotations

import matplotlib

matplotlib.use("Agg")

import matplotlib.pyplot as plt
import numpy as np
from matplotlib.lines import Line2D
from matplotlib.patches import Patch
from matplotlib.ticker import MaxNLocator
from scipy.ndimage import gaussian_filter

from ptares.figures.common import COMPONENT_COLOURS, INJECTED_COLOUR, STAMP_COLOUR
from ptares.inference import parameters

__all__ = ["NOT_CONVERGED", "central_interval", "corner_figure", "hpd_thresholds", "title_stamp", "trace_figure"]


MAX_CORNER = 8  #: parameters shown in corner and trace figures

#: Probability held by the shaded regions: inner (darker) and outer (lighter).
INNER, OUTER = 0.68, 0.95

NOT_CONVERGED = "not converged"  #: the stamp on figures of an unconverged fit

_DARK = "#173f5a"  # outlines and median edges
_INNER_FILL = "#3d7fa8"
_OUTER_FILL = "#bcd5e5"


def title_stamp(ax, text: str, fontsize: float, linewidth: float):
    """``text`` as a warning stamp over the right of ``ax``: bold, in :data:`STAMP_COLOUR`, in a white rounded box."""
    return ax.set_title(text, loc="right", fontsize=fontsize, fontweight="bold", color=STAMP_COLOUR,
                        bbox={"boxstyle": f"round,pad={0.025 * fontsize:.2f}", "facecolor": "white",
                              "edgecolor": STAMP_COLOUR, "linewidth": linewidth})


def _shown(names):
    """Array-wide common-process and binary parameters first, then the rest, at most :data:`MAX_CORNER`."""
    order = sorted(range(len(names)), key=lambda i: (not parameters.is_array_signal(names[i]), i))
    return order[:MAX_CORNER]


def _scale(values) -> float:
    """A robust spread of ``values``: the smaller of the standard deviation and IQR / 1.349 (0 if none)."""
    std = float(np.std(values))
    q25, q75 = np.percentile(values, [25.0, 75.0])
    iqr = float(q75 - q25) / 1.349
    return min(std, iqr) if iqr > 0 else std


def _bandwidth(values, dimensions: int) -> float:
    """Smoothing length of a density estimate from ``values``: Silverman's rule in 1-D, Scott's in 2-D."""
    factor = 0.9 * values.size ** -0.2 if dimensions == 1 else values.size ** (-1.0 / 6.0)
    return factor * _scale(values)


def _limits(values, truth=None):
    """Axis limits holding all but the outer 0.1% of ``values`` on each side (and ``truth``), padded.

    The padding leaves room for the smoothing of the density estimates.
    """
    lo, hi = (float(v) for v in np.percentile(values, [0.1, 99.9]))
    if truth is not None and np.isfinite(truth):
        lo, hi = min(lo, float(truth)), max(hi, float(truth))
    span = hi - lo
    if not span > 1e-12 * max(abs(lo), abs(hi)):  # no spread: a window around the value
        centre = 0.5 * (lo + hi)
        pad = 0.05 * abs(centre) if centre != 0.0 else 0.5
        return centre - pad, centre + pad
    pad = max(0.08 * span, 2.5 * _bandwidth(values, 2))
    return lo - pad, hi + pad


def _degenerate(values) -> bool:
    return float(np.ptp(values)) == 0.0


def hpd_thresholds(density, fractions):
    """Density levels whose super-level sets hold ``fractions`` of the total of ``density``.

    The cells are taken from the densest down; the level for fraction ``p`` is
    the density of the cell at which the running total first reaches ``p``.
    """
    flat = np.sort(np.asarray(density, dtype=float).ravel())[::-1]
    total = np.cumsum(flat)
    if total[-1] <= 0:
        return [0.0 for _ in fractions]
    total /= total[-1]
    return [float(flat[min(int(np.searchsorted(total, p)), flat.size - 1)]) for p in fractions]


def _smoothed(counts, edges, values, dimensions):
    """``counts`` smoothed by a Gaussian of the density-estimate bandwidth of each column of ``values``."""
    sigma = [max(_bandwidth(v, dimensions) / (e[1] - e[0]), 0.5) for v, e in zip(values, edges)]
    return gaussian_filter(counts.astype(float), sigma, mode="constant")


def central_interval(values, probability: float = INNER):
    """``(low, median, high)``: the median and the central interval holding ``probability`` of ``values``."""
    tail = 50.0 * (1.0 - probability)
    low, median, high = np.percentile(values, [tail, 50.0, 100.0 - tail])
    return float(low), float(median), float(high)


def _marginal(ax, values, limits, truth):
    """Smoothed 1-D density within the draws' range, central 68% and 95% intervals shaded, median on a stem,
    injected value as a solid line."""
    low, median, high = central_interval(values)
    if _degenerate(values):
        ax.plot([median, median], [0, 1], color=_DARK, lw=1.6, solid_capstyle="butt")
        ax.plot(median, 1, "o", mfc="white", mec=_DARK, ms=5, mew=1.2, zorder=4)
        ax.set_ylim(0, 1.15)
    else:
        counts, edges = np.histogram(values, bins=200, range=limits)
        width = edges[1] - edges[0]
        density = _smoothed(counts, [edges], [values], 1) / (values.size * width)
        centres = 0.5 * (edges[:-1] + edges[1:])
        grid = np.linspace(*limits, 400)
        curve = np.interp(grid, centres, density, left=0.0, right=0.0)
        curve[(grid < values.min()) | (grid > values.max())] = 0.0  # no density where no draw is (a prior's edge)
        outer_low, _, outer_high = central_interval(values, OUTER)
        band = np.linspace(outer_low, outer_high, 300)
        ax.fill_between(band, 0, np.interp(band, grid, curve), color=_OUTER_FILL, lw=0, zorder=1, gid="interval95")
        band = np.linspace(low, high, 200)
        ax.fill_between(band, 0, np.interp(band, centres, density), color=_INNER_FILL, lw=0, zorder=2,
                        gid="interval68")
        ax.plot(grid, curve, color=_DARK, lw=0.9, zorder=3)
        peak = float(np.interp(median, centres, density))
        ax.plot([median, median], [0, peak], color="white", lw=1.0, zorder=3)
        ax.plot(median, peak, "o", mfc="white", mec=_DARK, ms=5, mew=1.2, zorder=4, gid="median")
        ax.set_ylim(0, 1.12 * max(curve.max(), peak, 1e-300))
    if truth is not None:
        ax.axvline(truth, color=INJECTED_COLOUR, lw=1.1, zorder=5, gid="injected")
    ax.set_yticks([])
    for side in ("left", "right", "top"):
        ax.spines[side].set_visible(False)


def _joint(ax, x, y, limits_x, limits_y, truth_x, truth_y):
    """68% and 95% highest-density regions from a smoothed 2-D histogram; the median as a point."""
    median = (float(np.median(x)), float(np.median(y)))
    drawn = False
    if not (_degenerate(x) or _degenerate(y)):
        counts, xe, ye = np.histogram2d(x, y, bins=80, range=[limits_x, limits_y])
        density = _smoothed(counts, [xe, ye], [x, y], 2)
        outer, inner = hpd_thresholds(density, (OUTER, INNER))
        top = float(density.max())
        levels = np.unique([outer, inner])
        if top > 0 and levels[0] > 0 and levels[-1] < top:
            levels = np.append(levels, top * (1 + 1e-9))
            xc, yc = 0.5 * (xe[:-1] + xe[1:]), 0.5 * (ye[:-1] + ye[1:])
            colours = [_OUTER_FILL, _INNER_FILL][-(levels.size - 1):]
            ax.contourf(xc, yc, density.T, levels=levels, colors=colours, zorder=1)
            ax.contour(xc, yc, density.T, levels=levels[:-1], colors=_DARK, linewidths=0.6, zorder=2)
            drawn = True
    if not drawn:  # too few distinct values for regions: the draws themselves
        step = max(1, x.size // 2000)
        ax.plot(x[::step], y[::step], ".", color=_INNER_FILL, ms=2, alpha=0.5, zorder=1)
    ax.plot(*median, "o", mfc="white", mec=_DARK, ms=5, mew=1.2, zorder=4, gid="median")
    if truth_x is not None and truth_y is not None:
        ax.plot(truth_x, truth_y, "+", color=INJECTED_COLOUR, ms=11, mew=1.6, zorder=5, gid="injected")
    elif truth_x is not None:
        ax.axvline(truth_x, color=INJECTED_COLOUR, lw=0.8, zorder=5)
    elif truth_y is not None:
        ax.axhline(truth_y, color=INJECTED_COLOUR, lw=0.8, zorder=5)


def _stamp(fig, x, y, size, rotation=10.0, **kwargs):
    """The red "not converged" stamp at figure coordinates ``(x, y)``."""
    return fig.text(x, y, NOT_CONVERGED, ha="center", va="center", fontsize=size, fontweight="bold", color=STAMP_COLOUR,
                    rotation=rotation, zorder=10,
                    bbox={"boxstyle": "round,pad=0.4", "facecolor": "white", "edgecolor": STAMP_COLOUR, "linewidth": 2.0,
                          "alpha": kwargs.pop("alpha", 1.0)}, **kwargs)


def corner_figure(samples, names, injected=None, converged: bool = True):
    """One- and two-dimensional marginal posteriors of ``samples`` (shape (draws, parameters)).

    Below the diagonal: the 68% and 95% highest-density regions of each pair,
    shaded, and the median as a point.  On the diagonal: the smoothed marginal
    density with its central 68% interval shaded darker and the median on a
    stem.  Injected values (``injected``, by parameter name) are orange.  Large
    models show the array-wide (``common_``, ``binary_``) parameters first, at
    most :data:`MAX_CORNER`.  ``converged=False`` stamps "not converged".
    """
    samples = np.asarray(samples, dtype=float)
    if samples.ndim == 1:
        samples = samples[:, None]
    injected = {k: float(v) for k, v in (injected or {}).items() if v is not None}
    shown = _shown(names)
    n = len(shown)
    truths = [injected.get(names[i]) for i in shown]
    limits = [_limits(samples[:, i], t) for i, t in zip(shown, truths)]

    panel, left, bottom, right = 1.75, 0.9, 0.85, 0.25
    top = 0.3 if n > 1 else 0.75
    width, height = left + n * panel + right, bottom + n * panel + top
    fig, axes = plt.subplots(n, n, figsize=(width, height), squeeze=False)
    fig.subplots_adjust(left=left / width, right=1 - right / width, bottom=bottom / height, top=1 - top / height,
                        wspace=0.07, hspace=0.07)
    for row in range(n):
        for column in range(n):
            ax = axes[row, column]
            if column > row:
                ax.set_visible(False)
                continue
            i, j = shown[row], shown[column]
            if row == column:
                _marginal(ax, samples[:, i], limits[row], truths[row])
            else:
                _joint(ax, samples[:, j], samples[:, i], limits[column], limits[row], truths[column], truths[row])
                ax.set_ylim(limits[row])
            ax.set_xlim(limits[column])
            ax.xaxis.set_major_locator(MaxNLocator(4, prune="both"))
            ax.ticklabel_format(useOffset=False, axis="x")
            ax.tick_params(labelsize=6.5, direction="out", length=2.5)
            if row == n - 1:
                ax.set_xlabel(parameters.label(names[j]), fontsize=9)
                for tick in ax.get_xticklabels():
                    tick.set_rotation(40)
                    tick.set_horizontalalignment("right")
            else:
                ax.set_xticklabels([])
            if row != column:
                ax.yaxis.set_major_locator(MaxNLocator(4, prune="both"))
                ax.ticklabel_format(useOffset=False, axis="y")
                if column == 0:
                    ax.set_ylabel(parameters.label(names[i]), fontsize=9)
                else:
                    ax.set_yticklabels([])
    fig.align_labels()

    inner, outer = ((f"central {INNER:.0%}", f"central {OUTER:.0%}") if n == 1 else
                    (f"{INNER:.0%} region (1-D: central)", f"{OUTER:.0%} region (1-D: central)"))
    handles = [Patch(facecolor=_INNER_FILL, edgecolor=_DARK, lw=0.6, label=inner),
               Patch(facecolor=_OUTER_FILL, edgecolor=_DARK, lw=0.6, label=outer),
               Line2D([], [], ls="none", marker="o", mfc="white", mec=_DARK, mew=1.2, ms=5, label="median")]
    if any(t is not None for t in truths):
        handles.append(Line2D([], [], ls="none", marker="+", color=INJECTED_COLOUR, ms=10, mew=1.6, label="injected"))
    title = f"{n} of {len(names)} parameters shown" if len(names) > n else None
    corner = axes[0, n - 1].get_position()
    fig.legend(handles=handles, loc="upper right", bbox_to_anchor=(corner.x1, 1 - 0.05 / height if n == 1 else corner.y1),
               fontsize=7 if n <= 2 else 8.5, title=title, title_fontsize=7 if n <= 2 else 8.5, frameon=False,
               handlelength=1.6,
               ncol=2 if n == 1 else 1)
    if not converged:
        if n == 1:
            _stamp(fig, 0.5 * (corner.x0 + corner.x1), 0.5 * (corner.y0 + corner.y1), 15, alpha=0.85)
        else:
            block = n // 2  # the empty upper-right block: rows [0, n - block), columns [n - block, n)
            first, last = axes[0, n - block].get_position(), axes[n - block - 1, n - 1].get_position()
            y = 0.5 * (first.y1 + last.y0) if n > 2 else last.y0 + 0.3 * (last.y1 - last.y0)
            _stamp(fig, 0.5 * (first.x0 + last.x1), y, 14 if n <= 3 else 22)
    return fig


def trace_figure(chain, names, burn: int = 0, injected=None, converged: bool = True, independent: bool = False):
    """Traces of the shown parameters (``chain``: steps, walkers or chains, parameters); the burn-in is shaded.

    ``independent``: the second axis holds independent chains (Gibbs), not ensemble walkers.

    Injected values are orange lines; ``converged=False`` says "not converged" in red above the traces.
    """
    chain = np.asarray(chain, dtype=float)
    if chain.ndim == 2:
        chain = chain[:, None, :]
    injected = {k: float(v) for k, v in (injected or {}).items() if v is not None}
    shown = _shown(names)
    fig, axes = plt.subplots(len(shown), 1, figsize=(8.5, 1.25 * len(shown) + 0.9), sharex=True, squeeze=False)
    steps = np.arange(chain.shape[0])
    walkers = chain.shape[1]
    alpha = min(1.0, max(0.08, 2.0 / walkers))
    for ax, i in zip(axes[:, 0], shown):
        if burn > 0:
            ax.axvspan(0, burn, color="#e9c46a", alpha=0.3, lw=0)
        ax.plot(steps, chain[:, :, i], color=COMPONENT_COLOURS["gwb"], alpha=alpha, lw=0.6)
        if names[i] in injected:
            ax.axhline(injected[names[i]], color=INJECTED_COLOUR, lw=1.2)
        ax.set_ylabel(parameters.label(names[i]), fontsize=8.5, rotation=0, ha="right", va="center")
        ax.tick_params(labelsize=7)
        ax.margins(x=0)
    axes[-1, 0].set_xlabel("step")
    noun = "chain" if independent else "walker"
    words = [f"{walkers} {noun}{'s' if walkers != 1 else ''}"]
    if burn > 0:
        words.append(f"shaded: burn-in ({burn} steps)")
    if any(names[i] in injected for i in shown):
        words.append("orange: injected")
    if len(names) > len(shown):
        words.append(f"{len(shown)} of {len(names)} parameters")
    title = f"{noun.capitalize()} traces: " + "; ".join(words)
    if len(title) > 60:  # two lines, clear of the stamp on the right
        middle = len(words) // 2
        title = f"{noun.capitalize()} traces: " + "; ".join(words[:middle]) + ";\n" + "; ".join(words[middle:])
    axes[0, 0].set_title(title, fontsize=9, loc="left")
    if not converged:
        title_stamp(axes[0, 0], NOT_CONVERGED, fontsize=12, linewidth=1.8)
    fig.tight_layout()
    return fig


def pulsar_noise_figure(rows: dict):
    """Each pulsar's noise from the per-pulsar noise stage: one panel per quantity, a row per pulsar with
    its posterior median and 68% interval; injected values orange; pulsars whose fit failed or did not
    converge named in red."""
    quantities = [q for q in parameters.PER_PULSAR
                  if any(parameters.for_pulsar(q, n) in row.get("parameters", {}) for n, row in rows.items())]
    names = list(rows)
    height = 1.2 + 0.22 * len(names)
    fig, axes = plt.subplots(1, max(len(quantities), 1), figsize=(2.6 * max(len(quantities), 1) + 1.4, height),
                             sharey=True, squeeze=False)
    y = np.arange(len(names))[::-1]
    troubled = {n for n, row in rows.items() if row.get("status") != "ok" or not row.get("converged")}
    for ax, q in zip(axes[0], quantities):
        for position, name in zip(y, names):
            entry = rows[name].get("parameters", {}).get(parameters.for_pulsar(q, name))
            if entry is None:
                continue
            low, high = entry["interval68"]
            colour = STAMP_COLOUR if name in troubled else COMPONENT_COLOURS["gwb"]
            ax.plot([low, high], [position, position], color=colour, lw=2.2, solid_capstyle="butt")
            ax.plot(entry["median"], position, "o", color=colour, ms=3.5)
            if entry.get("injected") is not None:
                ax.plot(entry["injected"], position, "x", color=INJECTED_COLOUR, ms=5, mew=1.4)
        ax.set_xlabel(parameters.LABELS[q], fontsize=9)
        ax.tick_params(labelsize=7)
        ax.grid(axis="x", color="#dddddd", lw=0.6)
    axes[0, 0].set_yticks(y)
    axes[0, 0].set_yticklabels(names, fontsize=7 if len(names) < 60 else 6)
    for label in axes[0, 0].get_yticklabels():
        if label.get_text() in troubled:
            label.set_color(STAMP_COLOUR)
    axes[0, 0].set_ylim(-0.8, len(names) - 0.2)
    note = "median and 68% interval of each pulsar's noise fitted alone; orange x: injected"
    if troubled:
        note += f"; red: failed or not converged ({len(troubled)})"
    fig.suptitle(note, fontsize=8.5, x=0.01, ha="left")
    fig.tight_layout()
    return fig


#: Colours of refitted spectral models in ``spectrum.png``.
_MODEL_COLOURS = {"power_law": "#2a9d8f", "turnover": "#8d5fd3"}


def spectrum_figure(content: dict, refit_draws: dict, converged: bool = True):
    """``spectrum.png``: the free spectrum of the common process, in residual power S(f_k) = T rho_k (s^2/Hz)
    against frequency, each frequency's posterior median with its 68% (thick) and 95% (thin) intervals; the
    injected spectrum (orange crosses) when known; each refitted model's median curve with its 68% band."""
    from ptares.inference.spectral_models import MODELS

    span = content["span"]
    bins = content["bins"]
    frequency = np.array([b["frequency"] for b in bins])
    fig, ax = plt.subplots(figsize=(6.4, 4.4))
    power = lambda lg_rho: span * 10.0 ** np.asarray(lg_rho)  # noqa: E731 - S(f_k) = T rho_k
    medians = power([b["median"] for b in bins])
    for f, b in zip(frequency * 1e9, bins):
        ax.plot([f, f], power(b["interval95"]), color=_DARK, lw=0.8, solid_capstyle="butt")
        ax.plot([f, f], power(b["interval68"]), color=_DARK, lw=3.0, solid_capstyle="butt")
    ax.plot(frequency * 1e9, medians, "o", color="white", markeredgecolor=_DARK, markersize=4.5, zorder=3,
            label="free spectrum (median, 68%, 95%)")
    if any("injected" in b for b in bins):
        known = [(f, b["injected"]) for f, b in zip(frequency, bins) if "injected" in b]
        ax.plot([f * 1e9 for f, _ in known], power([v for _, v in known]), "x", color=INJECTED_COLOUR, markersize=6,
                mew=1.5, zorder=4, label="injected")
    grid = np.geomspace(frequency[0] * 0.8, frequency[-1] * 1.25, 200)
    for name, draws in refit_draws.items():
        spec = MODELS[name]
        picked = draws[:: max(1, len(draws) // 300)]
        curves = np.array([spec.psd(grid, theta) for theta in picked])
        low, middle, high = np.percentile(curves, [15.865, 50, 84.135], axis=0)
        colour = _MODEL_COLOURS.get(name, "#555555")
        ax.fill_between(grid * 1e9, low, high, color=colour, alpha=0.25, lw=0)
        ax.plot(grid * 1e9, middle, color=colour, lw=1.6, label=f"{name.replace('_', ' ')} refit (median, 68%)")
    ax.set_xscale("log")
    ax.set_yscale("log")
    from matplotlib.ticker import FormatStrFormatter

    ax.xaxis.set_major_formatter(FormatStrFormatter("%g"))
    ax.xaxis.set_minor_formatter(FormatStrFormatter("%g"))
    ax.tick_params(axis="x", which="minor", labelsize=7)
    ax.set_xlabel("frequency (nHz)")
    ax.set_ylabel(r"residual power $S(f_k) = T\,\rho_k$ (s$^2$/Hz)")
    ax.set_title("Common-process spectrum: one power per frequency", fontsize=10)
    ax.grid(which="major", alpha=0.3)
    ax.legend(fontsize=7, frameon=False, loc="lower left")
    if not converged:
        _stamp(fig, 0.72, 0.85, 20)
    fig.tight_layout()
    return fig

"""Figures of a dataset: residuals, the array on the sky, the injected correlation.

Every function takes a :class:`~ptares.dataset.Dataset` and returns a
matplotlib ``Figure``; :func:`save_figure` writes one atomically and closes it.
Colours are fixed per component so that every figure reads the same way.
"""

from __future__ import annotations

from pathlib import Path

import matplotlib

matplotlib.use("Agg")
import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402

from .correlations import pattern_function  # noqa: E402
from .dataset import Dataset, atomic_path  # noqa: E402
from .signals.white import effective_uncertainties  # noqa: E402
from .sky import separation_matrix  # noqa: E402
from .timing_model import fit_timing_model  # noqa: E402

__all__ = [
    "residuals_figure",
    "sky_figure",
    "correlation_figure",
    "correlations_figure",
    "nulls_figure",
    "corner_figure",
    "trace_figure",
    "sweep_figures",
    "save_figure",
    "dataset_figures",
]

#: Colour of each injected component, shared by all figures.
COMPONENT_COLOURS = {"white": "#9a9a9a", "red": "#b8553a", "gwb": "#2a6f97", "cw": "#6a994e"}
RESIDUAL_COLOUR = "#1b1b1b"
PER_PAGE = 50  #: pulsars per residuals figure; larger arrays get residuals-2.png and so on


def _year(mjd):
    """Decimal year (Julian years from J2000, MJD 51544.5)."""
    return 2000.0 + (np.asarray(mjd) - 51544.5) / 365.25


def _after_fit(p, series):
    """``series`` with the pulsar's timing model fitted out, as it would appear in the residuals."""
    weights = effective_uncertainties(p.errors, p.noise.get("white_scale", 1.0), p.noise.get("white_quadrature", 0.0))
    return fit_timing_model(series, p.design_matrix, weights)[0]


def residuals_figure(dataset: Dataset, first: int = 0, count: int = PER_PAGE):
    """Residuals of pulsars ``first`` to ``first + count``, each in its own row, with the injected signals.

    Each row has its own vertical scale (its range is printed at the right).
    The injected components are drawn with the timing model fitted out of
    them, so they lie over the residuals they helped make.
    """
    pulsars = dataset.pulsars[first : first + count]
    fig, axes = plt.subplots(len(pulsars), 1, sharex=True, squeeze=False,
                             figsize=(9.0, max(3.0, 0.55 * len(pulsars) + 1.2)))
    labelled = set()
    for ax, p in zip(axes[:, 0], pulsars):
        years = _year(p.mjd)
        ax.errorbar(years, p.residuals * 1e6, yerr=p.errors * 1e6, fmt=".", ms=2.0, lw=0.4,
                    color=RESIDUAL_COLOUR, alpha=0.6, label="residuals" if not labelled else None)
        labelled.add("residuals")
        for name, series in p.injected.items():
            if name == "white" or not np.any(series):
                continue
            ax.plot(years, _after_fit(p, series) * 1e6, lw=1.2, color=COMPONENT_COLOURS.get(name, "#7b2cbf"),
                    label=f"injected {name}" if name not in labelled else None)
            labelled.add(name)
        low, high = ax.get_ylim()
        ax.set_yticks([])
        ax.set_ylabel(p.name, rotation=0, ha="right", va="center", fontsize=7)
        ax.text(1.005, 0.5, f"{high - low:.2g} µs", transform=ax.transAxes, fontsize=6, va="center")
        ax.grid(axis="x", alpha=0.3)
    title = f"Timing residuals after the timing-model fit: {len(dataset.pulsars)} pulsars"
    if len(pulsars) < len(dataset.pulsars):
        title += f" ({first + 1} to {first + len(pulsars)} here)"
    axes[0, 0].set_title(title + " (row height in µs at right)", fontsize=10)
    axes[-1, 0].set_xlabel("year")
    fig.legend(loc="upper right", fontsize=7, ncol=3, frameon=False)
    fig.subplots_adjust(hspace=0.0, left=0.12, right=0.93, top=1 - 0.6 / fig.get_figheight(),
                        bottom=0.5 / fig.get_figheight())
    return fig


def sky_figure(dataset: Dataset):
    """The array on the sky (equatorial, Mollweide; right ascension increasing to the left)."""
    ra = np.array([p.ra for p in dataset.pulsars])
    dec = np.array([p.dec for p in dataset.pulsars])
    median_error = np.array([np.median(p.errors) for p in dataset.pulsars]) * 1e6
    counts = np.array([p.toa_count for p in dataset.pulsars])
    longitude = -np.angle(np.exp(1j * ra))  # wrap to (-pi, pi], flipped so RA grows leftwards
    fig = plt.figure(figsize=(9.0, 5.2))
    ax = fig.add_subplot(projection="mollweide")
    size = 20 + 80 * counts / counts.max()
    points = ax.scatter(longitude, dec, c=median_error, s=size, cmap="viridis_r", edgecolor="k", linewidth=0.4, zorder=3)
    if len(dataset.pulsars) <= 40:
        for p, x, y in zip(dataset.pulsars, longitude, dec):
            ax.annotate(p.name, (x, y), xytext=(3, 3), textcoords="offset points", fontsize=6)
    hours = np.arange(-10, 12, 2)
    cw = dataset.signals.get("cw")
    if cw is not None and "sources" in cw:
        sources = cw["sources"]
        x = -np.angle(np.exp(1j * sources["ra"]))
        ax.scatter(x, sources["dec"], marker="*", s=160, color=COMPONENT_COLOURS["cw"], edgecolor="k", linewidth=0.5,
                   zorder=4, label="continuous-wave sources")
        for name, xs, ys in zip(sources["name"], x, sources["dec"]):
            label = name.decode() if isinstance(name, bytes) else str(name)
            ax.annotate(label, (xs, ys), xytext=(5, -9), textcoords="offset points", fontsize=7, color=COMPONENT_COLOURS["cw"])
        ax.legend(loc="lower right", fontsize=7)
    ax.set_xticks(np.radians(hours * 15.0), [f"{(-h) % 24:d}h" for h in hours], fontsize=7)
    ax.grid(alpha=0.35)
    fig.colorbar(points, ax=ax, orientation="horizontal", fraction=0.05, pad=0.08, label="median TOA uncertainty (\u00b5s); marker size: TOA count")
    ax.set_title(f"Array on the sky (equatorial): {len(dataset.pulsars)} pulsars", pad=14)
    return fig


def _pair_correlations(dataset: Dataset, component: str, grid_points: int = 512):
    """Realised correlation coefficient of ``component`` for each pair, on a common time grid."""
    series = [(p.mjd, p.injected[component]) for p in dataset.pulsars]
    n = len(series)
    rho = []
    for a in range(n):
        for b in range(a + 1, n):
            lo = max(series[a][0][0], series[b][0][0])
            hi = min(series[a][0][-1], series[b][0][-1])
            grid = np.linspace(lo, hi, grid_points)
            x = np.interp(grid, *series[a])
            y = np.interp(grid, *series[b])
            norm = np.sqrt(np.mean(x * x) * np.mean(y * y))
            rho.append(np.mean(x * y) / norm if hi > lo and norm > 0 else np.nan)
    return np.array(rho)


def correlation_figure(dataset: Dataset, bins: int = 10):
    """The injected correlation pattern against angle, with this realisation's pair correlations."""
    gwb = dataset.signals.get("gwb")
    pattern = gwb["correlation"] if gwb else "hellings-downs"
    curve_angle = np.linspace(0.0, np.pi, 400)
    positions = np.array([p.position for p in dataset.pulsars])
    upper = np.triu_indices(len(dataset.pulsars), 1)
    angles = separation_matrix(positions)[upper]
    fig, ax = plt.subplots(figsize=(8.0, 5.0))
    ax.axhline(0.0, color="k", lw=0.6)
    ax.plot(np.degrees(curve_angle), pattern_function(pattern)(curve_angle), color="#1b1b1b", lw=1.6, label=f"{pattern} pattern")
    if gwb and len(angles) and gwb.get("amplitude", 0) > 0:
        rho = _pair_correlations(dataset, "gwb")
        ax.scatter(np.degrees(angles), rho, s=6, color=COMPONENT_COLOURS["gwb"], alpha=0.35, label="pairs (this realisation)")
        edges = np.linspace(0.0, np.pi, bins + 1)
        which = np.digitize(angles, edges[1:-1])
        for k in range(bins):
            values = rho[(which == k) & np.isfinite(rho)]
            if values.size >= 2:
                mid = np.degrees(0.5 * (edges[k] + edges[k + 1]))
                ax.errorbar(mid, values.mean(), yerr=values.std(ddof=1) / np.sqrt(values.size), fmt="s", ms=5,
                            color="#c1121f", capsize=3, label="bin mean \u00b1 standard error of its pairs" if k == 0 else None)
        ax.set_title(f"Injected background: A = {gwb['amplitude']:.3g}, gamma = {gwb['gamma']:.3g}, {len(angles)} pairs")
    else:
        ax.set_title("Correlation pattern (no background injected)")
    ax.set_xlim(0, 180)
    ax.set_xticks(np.arange(0, 181, 30))
    ax.set_xlabel("angular separation (degrees)")
    ax.set_ylabel("correlation coefficient")
    ax.legend(fontsize=8)
    ax.grid(alpha=0.3)
    fig.tight_layout()
    return fig


def _scale(values) -> float:
    """A power of ten that brings ``values`` to order one, for axis labels."""
    largest = np.max(np.abs(values)) if np.size(values) else 0.0
    return 10.0 ** np.floor(np.log10(largest)) if largest > 0 else 1.0


def correlations_figure(result):
    """Binned pair correlations against angle with the recovered Hellings–Downs curve and its expected scatter.

    ``result`` is a :class:`ptares.correlate.CorrelationResult`.
    """
    hd = result.estimates["hellings-downs"]
    binned = result.binned
    scale = _scale(np.concatenate([binned.rho + binned.error, binned.rho - binned.error, [hd["amplitude2"]]]))
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


MAX_CORNER = 8  #: parameters shown in corner and trace figures


def _shown(names):
    """Common-process and continuous-wave parameters first, then the rest, at most :data:`MAX_CORNER`."""
    order = sorted(range(len(names)), key=lambda i: (not names[i].startswith(("gwb_", "cw_")), i))
    return order[:MAX_CORNER]


def corner_figure(samples, names, injected=None):
    """One- and two-dimensional marginal posteriors; injected values as lines where known.

    ``samples`` has shape (draws, parameters).  Large models show the common and
    continuous-wave parameters first, at most :data:`MAX_CORNER` of them.
    """
    injected = injected or {}
    shown = _shown(names)
    n = len(shown)
    fig, axes = plt.subplots(n, n, figsize=(1.9 * n + 1.0, 1.9 * n + 1.0), squeeze=False)
    for row, i in enumerate(shown):
        for column, j in enumerate(shown):
            ax = axes[row, column]
            if column > row:
                ax.set_visible(False)
                continue
            if row == column:
                ax.hist(samples[:, i], bins=40, color=COMPONENT_COLOURS["gwb"], histtype="stepfilled", alpha=0.6)
                for q in np.percentile(samples[:, i], [15.865, 50, 84.135]):
                    ax.axvline(q, color="k", lw=0.7, ls="--")
                if names[i] in injected:
                    ax.axvline(injected[names[i]], color="#c1121f", lw=1.5)
                ax.set_yticks([])
            else:
                ax.hist2d(samples[:, j], samples[:, i], bins=40, cmap="Blues")
                if names[i] in injected and names[j] in injected:
                    ax.plot(injected[names[j]], injected[names[i]], "s", color="#c1121f", ms=5)
            if row == n - 1:
                ax.set_xlabel(names[j], fontsize=7)
            else:
                ax.set_xticklabels([])
            if column == 0 and row > 0:
                ax.set_ylabel(names[i], fontsize=7)
            elif column > 0:
                ax.set_yticklabels([])
            ax.tick_params(labelsize=6)
    title = "Posterior (red: injected; dashed: 16, 50, 84%)"
    if len(names) > n:
        title += f" - {n} of {len(names)} parameters"
    fig.suptitle(title, fontsize=9)
    fig.tight_layout()
    return fig


def trace_figure(chain, names, burn: int = 0, injected=None):
    """Walker traces of the shown parameters; the burn-in is shaded."""
    injected = injected or {}
    shown = _shown(names)
    fig, axes = plt.subplots(len(shown), 1, figsize=(8.0, 1.3 * len(shown) + 0.8), sharex=True, squeeze=False)
    steps = np.arange(chain.shape[0])
    for ax, i in zip(axes[:, 0], shown):
        ax.axvspan(0, burn, color="#e9c46a", alpha=0.25, lw=0)
        ax.plot(steps, chain[:, :, i], color=COMPONENT_COLOURS["gwb"], alpha=max(0.08, 2.0 / chain.shape[1]), lw=0.6)
        if names[i] in injected:
            ax.axhline(injected[names[i]], color="#c1121f", lw=1.2)
        ax.set_ylabel(names[i], fontsize=7)
        ax.tick_params(labelsize=7)
    axes[-1, 0].set_xlabel("step")
    axes[0, 0].set_title(f"Walker traces ({chain.shape[1]} walkers; shaded: burn-in; red: injected)", fontsize=9)
    fig.tight_layout()
    return fig


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


def save_figure(fig, path) -> Path:
    """Write ``fig`` as PNG to ``path`` atomically and close it."""
    path = Path(path)
    with atomic_path(path) as temporary:
        fig.savefig(temporary, format="png", dpi=130)
    plt.close(fig)
    return path


def dataset_figures(dataset: Dataset, directory) -> list:
    """Write the dataset figures into ``directory``; returns their paths.

    ``residuals.png`` (then ``residuals-2.png``... for every further
    :data:`PER_PAGE` pulsars), ``sky.png`` and ``correlation.png``.
    """
    directory = Path(directory)
    paths = []
    for page, first in enumerate(range(0, len(dataset.pulsars), PER_PAGE), start=1):
        name = "residuals.png" if page == 1 else f"residuals-{page}.png"
        paths.append(save_figure(residuals_figure(dataset, first), directory / name))
    paths.append(save_figure(sky_figure(dataset), directory / "sky.png"))
    paths.append(save_figure(correlation_figure(dataset), directory / "correlation.png"))
    return paths

"""Figures of a dataset: residuals, the array on the sky, the injected correlation.

Every function takes a :class:`~ptares.dataset.Dataset` and returns a
matplotlib ``Figure``; :func:`dataset_figures` writes them all.
"""

from __future__ import annotations

from pathlib import Path

import matplotlib

matplotlib.use("Agg")

import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402

from ptares.dataset import Dataset  # noqa: E402
from ptares.figures.common import COMPONENT_COLOURS, RESIDUAL_COLOUR, save_figure
from ptares.physics.patterns import pattern_function  # noqa: E402
from ptares.physics.sky import separation_matrix  # noqa: E402
from ptares.physics.timing_model import fit_timing_model  # noqa: E402
from ptares.simulation.signals.white import effective_uncertainties  # noqa: E402

__all__ = ["residuals_figure", "sky_figure", "correlation_figure", "dataset_figures"]


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
    binary = dataset.signals.get("binary")
    if binary is not None and "sources" in binary:
        sources = binary["sources"]
        x = -np.angle(np.exp(1j * sources["ra"]))
        ax.scatter(x, sources["dec"], marker="*", s=160, color=COMPONENT_COLOURS["binary"], edgecolor="k", linewidth=0.5,
                   zorder=4, label="continuous-wave sources")
        for name, xs, ys in zip(sources["name"], x, sources["dec"]):
            label = name.decode() if isinstance(name, bytes) else str(name)
            ax.annotate(label, (xs, ys), xytext=(5, -9), textcoords="offset points", fontsize=7, color=COMPONENT_COLOURS["binary"])
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
        ax.set_title(f"Injected background: A = {gwb['amplitude']:.3g}, spectral index {gwb['spectral_index']:.3g}, {len(angles)} pairs")
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

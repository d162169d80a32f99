"""Figures of a dataset: residuals, the array on the sky, the injected correlation, the noise budget.

Every function takes a :class:`~ptares.dataset.Dataset` and returns a
matplotlib ``Figure``; :func:`dataset_figures` writes them all.
"""

from __future__ import annotations

from pathlib import Path

import matplotlib

matplotlib.use("Agg")

import matplotlib.pyplot as plt  # noqa: E402
import numpy as np  # noqa: E402
from matplotlib import colors as mcolors  # noqa: E402
from matplotlib import patheffects, ticker  # noqa: E402
from matplotlib.cm import ScalarMappable  # noqa: E402
from matplotlib.lines import Line2D  # noqa: E402

from ptares.dataset import Dataset, text_of  # noqa: E402
from ptares.figures.common import COMPONENT_COLOURS, INJECTED_COLOUR, RESIDUAL_COLOUR, save_figure
from ptares.physics.patterns import pattern_function  # noqa: E402
from ptares.physics.spectra import chromatic_scale, residual_psd, turnover  # noqa: E402
from ptares.physics.sky import separation_matrix  # noqa: E402
from ptares.physics.timing_model import fit_timing_model  # noqa: E402
from ptares.simulation.signals.white import effective_uncertainties  # noqa: E402

__all__ = ["residuals_figure", "sky_figure", "correlation_figure", "noise_budget_figure", "one_sided_psd",
           "dataset_figures"]


PER_PAGE = 20  #: pulsars per residuals (and noise-budget) figure; larger arrays get residuals-2.png and so on
ROW_HEIGHT = 0.62  #: inches per pulsar row of a residuals page
BUDGET_COLUMNS = 5  #: panels per row of a noise-budget page

#: Colours of the observing systems on the residual pages, in order of first use in the dataset
#: (chosen to stay apart from the component colours; more systems than these reuse matplotlib's tab20).
SYSTEM_COLOURS = ("#2b3a55", "#f08a24", "#3fa7d6", "#8e44ad", "#1f9e89", "#e63946", "#c9a227", "#7f5539",
                  "#ff6fa5", "#7cb518")
#: Sequential colours for the radio frequency (low: dark violet, high: orange; the pale end of plasma left out).
FREQUENCY_COLOURS = mcolors.LinearSegmentedColormap.from_list("ptares_frequency", plt.get_cmap("plasma")(np.linspace(0.0, 0.8, 256)))
#: Frequencies spanning more than this ratio get a logarithmic colour scale.
LOG_FREQUENCY_RATIO = 3.0


def _year(mjd):
    """Decimal year (Julian years from J2000, MJD 51544.5)."""
    return 2000.0 + (np.asarray(mjd) - 51544.5) / 365.25


def _after_fit(p, series):
    """``series`` with the pulsar's timing model fitted out, as it would appear in the residuals."""
    weights = effective_uncertainties(p.errors, p.noise.get("white_scale", 1.0), p.noise.get("white_quadrature", 0.0))
    return fit_timing_model(series, p.design_matrix, weights)[0]


def _varies_within_epochs(mjd, values) -> bool:
    """Whether ``values`` differ between TOAs that share an MJD (a chromatic series in several sub-bands)."""
    mjd = np.asarray(mjd)
    if mjd.size == np.unique(mjd).size:
        return False
    order = np.argsort(mjd, kind="stable")
    starts = np.flatnonzero(np.r_[True, np.diff(mjd[order]) != 0])
    ordered = np.asarray(values)[order]
    spread = np.maximum.reduceat(ordered, starts) - np.minimum.reduceat(ordered, starts)
    return bool(np.max(spread) > 1e-6 * np.ptp(ordered))


def _system_colours(dataset: Dataset) -> dict:
    """Observing-system name -> colour, in order of first use across the whole dataset (so a system keeps
    its colour on every page)."""
    names = dict.fromkeys(s for p in dataset.pulsars for s in p.systems)
    extra = plt.get_cmap("tab20").colors
    return {name: (SYSTEM_COLOURS[i] if i < len(SYSTEM_COLOURS) else extra[(i - len(SYSTEM_COLOURS)) % len(extra)])
            for i, name in enumerate(names)}


def _frequency_norm(dataset: Dataset):
    """The colour scale of the radio frequencies of the whole dataset (logarithmic when they span more than
    :data:`LOG_FREQUENCY_RATIO`), or None when the TOAs have fewer than two distinct frequencies."""
    recorded = [np.asarray(p.frequency_mhz, dtype=float) for p in dataset.pulsars if p.frequency_mhz is not None]
    values = np.unique(np.concatenate(recorded)) if recorded else np.array([])
    values = values[np.isfinite(values)]
    if values.size < 2:
        return None
    low, high = float(values[0]), float(values[-1])
    if low > 0 and high / low > LOG_FREQUENCY_RATIO:
        return mcolors.LogNorm(low, high)
    return mcolors.Normalize(low, high)


def _point_colours(p, systems, norm):
    """RGBA of each of ``p``'s TOAs by observing system or radio frequency; None to draw it plainly."""
    if systems is not None and p.system is not None:
        return mcolors.to_rgba_array([systems[str(s)] for s in p.system])
    if norm is not None and p.frequency_mhz is not None:
        return FREQUENCY_COLOURS(norm(np.asarray(p.frequency_mhz, dtype=float)))
    return None


def residuals_figure(dataset: Dataset, first: int = 0, count: int = PER_PAGE):
    """Residuals of pulsars ``first`` to ``first + count``, each in its own row, with the injected signals.

    Each row has its own vertical scale, shown by a vertical scale bar at its
    right edge labelled with its length, a round value (1, 2 or 5 times a
    power of ten, in µs or ms) of about half the row's range.
    The injected components are drawn with the timing model fitted out of
    them, so they lie over the residuals they helped make: as a line through
    the epochs, or, for one that differs between the TOAs of an epoch (a
    chromatic one observed in several bands), as a short tick at each TOA.

    When the dataset's TOAs come from more than one observing system, each
    point and its error bar take the colour of its system (a legend at the
    top left names them); otherwise, when they have more than one radio
    frequency, the colour of its frequency (a colour bar in MHz at the top
    left, logarithmic if the frequencies span more than a factor
    :data:`LOG_FREQUENCY_RATIO`).  Colours are fixed over the whole dataset,
    so they agree from page to page.
    """
    pulsars = dataset.pulsars[first : first + count]
    systems = _system_colours(dataset)
    systems = systems if len(systems) > 1 else None
    norm = None if systems is not None else _frequency_norm(dataset)
    coloured = systems is not None or norm is not None
    page_systems = [s for s in systems if any(s in p.systems for p in pulsars)] if systems else []
    system_columns = min(len(page_systems), 4) or 1
    if systems is not None:
        block = 0.2 + 0.17 * -(-len(page_systems) // system_columns)
    else:
        block = 0.45
    header = 0.6 if not coloured else 0.38 + block  # inches above the first row
    height = max(3.0, ROW_HEIGHT * len(pulsars) + 0.6 + header)
    fig, axes = plt.subplots(len(pulsars), 1, sharex=True, squeeze=False, figsize=(9.0, height))
    outline = [patheffects.withStroke(linewidth=2.4, foreground="white", alpha=0.8)] if coloured else None
    labelled = set()
    for ax, p in zip(axes[:, 0], pulsars):
        years = _year(p.mjd)
        residuals, errors = p.residuals * 1e6, p.errors * 1e6
        colours = _point_colours(p, systems, norm) if coloured else None
        if colours is None:
            ax.errorbar(years, residuals, yerr=errors, fmt=".", ms=2.0, lw=0.4,
                        color=RESIDUAL_COLOUR, alpha=0.6, label="residuals" if "residuals" not in labelled else None)
            labelled.add("residuals")
        else:  # one colour per TOA: the bars as one collection, the points as another, in the same colours
            ax.vlines(years, residuals - errors, residuals + errors, colors=colours, lw=0.4, alpha=0.6, gid="errorbars")
            ax.scatter(years, residuals, c=colours, s=5.0, marker="o", linewidths=0, alpha=0.75, gid="points")
        for name, series in p.injected.items():
            if name == "white" or not np.any(series):
                continue
            fitted = _after_fit(p, series) * 1e6
            chromatic = _varies_within_epochs(p.mjd, fitted)
            style = {"marker": "_", "ms": 3.0, "mew": 0.9, "ls": ""} if chromatic else {"lw": 1.2}
            ax.plot(years, fitted, color=COMPONENT_COLOURS.get(name, "#7b2cbf"), path_effects=outline,
                    label=f"injected {name}" if name not in labelled else None, gid=f"injected:{name}", **style)
            labelled.add(name)
        ax.set_yticks([])
        ax.set_ylabel(p.name, rotation=0, ha="right", va="center", fontsize=8)
        _scale_bar(ax)
        ax.grid(axis="x", alpha=0.3)
    title = f"Timing residuals after the timing-model fit: {len(dataset.pulsars)} pulsars"
    if len(pulsars) < len(dataset.pulsars):
        title += f" ({first + 1} to {first + len(pulsars)} here)"
    axes[0, 0].set_title(title + "\n(each row has its own vertical scale: the bar at its right)", fontsize=10)
    axes[-1, 0].set_xlabel("year")
    if labelled:
        fig.legend(loc="upper right", fontsize=7, ncol=3, frameon=False)
    if page_systems:
        handles = [Line2D([], [], ls="", marker="o", ms=4.5, color=systems[s]) for s in page_systems]
        fig.legend(handles, page_systems, loc="upper left", bbox_to_anchor=(0.01, 1.0), fontsize=7,
                   ncol=system_columns, frameon=False, title="residuals by observing system", title_fontsize=7,
                   alignment="left", handletextpad=0.2, columnspacing=1.0).set_gid("systems")
    elif norm is not None:
        cax = fig.add_axes([0.12, 1 - 0.3 / height, 0.34, 0.09 / height])
        bar = fig.colorbar(ScalarMappable(norm=norm, cmap=FREQUENCY_COLOURS), cax=cax, orientation="horizontal")
        bar.set_label("residuals by radio frequency (MHz)", fontsize=7, labelpad=2)
        cax.xaxis.set_label_position("top")
        if isinstance(norm, mcolors.LogNorm):
            cax.xaxis.set_major_locator(ticker.LogLocator(subs=(1.0, 2.0, 3.0, 5.0)))
            cax.xaxis.set_minor_locator(ticker.NullLocator())
        cax.xaxis.set_major_formatter(ticker.FuncFormatter(lambda value, _: f"{value:g}"))
        cax.tick_params(labelsize=6, length=2, pad=1)
        cax.set_gid("frequency colour bar")
    fig.subplots_adjust(hspace=0.0, left=0.13, right=0.92, top=1 - header / height, bottom=0.5 / height)
    return fig


def round_length(extent: float) -> float:
    """The largest of 1, 2 and 5 times a power of ten not above ``extent`` (> 0)."""
    power = 10.0 ** np.floor(np.log10(extent))
    return max(step * power for step in (1.0, 2.0, 5.0) if step * power <= extent * (1 + 1e-9))


def _length_text(microseconds: float) -> str:
    """A scale-bar length in µs as text, in ms from 1000 µs."""
    if microseconds >= 1000.0:
        return f"{microseconds / 1000.0:g} ms"
    return f"{microseconds:g} µs"


def _scale_bar(ax) -> None:
    """A vertical bar at the right edge of ``ax`` (residuals in µs), centred on the row, of a round length
    about half its range (:func:`round_length`), with its length written beside it; fixes the row's limits."""
    low, high = ax.get_ylim()
    ax.set_ylim(low, high)
    length = round_length(0.5 * (high - low))
    middle = 0.5 * (low + high)
    where = ax.get_yaxis_transform()  # x in axes fractions, y in µs
    ax.plot([1.012, 1.012], [middle - length / 2, middle + length / 2], transform=where, color="#1b1b1b", lw=1.6,
            solid_capstyle="butt", clip_on=False, gid="scale-bar")
    ax.text(1.022, middle, _length_text(length), transform=where, fontsize=7, va="center", ha="left",
            gid="scale-bar-label")


#: At most this many pulsars are named on the sky map.
MAX_SKY_NAMES = 40
_OUTLINE = [patheffects.withStroke(linewidth=2.2, foreground="white")]  # keeps names readable over grid lines


def sky_figure(dataset: Dataset):
    """The array on the sky (equatorial, Mollweide; right ascension increasing to the left).

    Each pulsar is a dot coloured by its median TOA uncertainty and sized by its number of TOAs; up to
    :data:`MAX_SKY_NAMES` pulsars are named.  The right-ascension hours are written small and grey on
    the equator, the declinations at the left edge; names (white-outlined) and the names of injected
    continuous-wave sources (stars) and waves (diamonds) are placed around their points where they cover none of these
    labels, and as few other names and points as can be.
    """
    ra = np.array([p.ra for p in dataset.pulsars])
    dec = np.array([p.dec for p in dataset.pulsars])
    median_error = np.array([np.median(p.errors) for p in dataset.pulsars]) * 1e6
    counts = np.array([p.toa_count for p in dataset.pulsars])
    longitude = -np.angle(np.exp(1j * ra))  # wrap to (-pi, pi], flipped so RA grows leftwards
    fig = plt.figure(figsize=(9.0, 5.2))
    ax = fig.add_subplot(projection="mollweide")
    size = 20 + 80 * counts / counts.max()
    points = ax.scatter(longitude, dec, c=median_error, s=size, cmap="viridis_r", edgecolor="k", linewidth=0.4, zorder=3)
    hours = np.arange(-10, 12, 2)
    ax.set_xticks(np.radians(hours * 15.0), [""] * hours.size)  # meridians as grid lines; their labels below
    hour_labels = [ax.annotate(f"{(-h) % 24:d}h", (np.radians(h * 15.0), 0.0), xytext=(0, 0), textcoords="offset points",
                               ha="center", va="center", fontsize=6.5, color="#5c5c5c", zorder=2.5, gid="hour-label",
                               bbox={"boxstyle": "round,pad=0.12", "fc": "white", "ec": "none", "alpha": 0.75})
                   for h in hours]
    ax.tick_params(axis="y", labelsize=7, labelcolor="#5c5c5c")
    ax.grid(alpha=0.35)
    names = []  # (text, longitude, latitude, marker radius in points, text style)
    markers = [(x, y, 0.5 * np.sqrt(s)) for x, y, s in zip(longitude, dec, size)]  # radii in points
    for component, marker, size, what in (("binary", "*", 160, "continuous-wave sources"),
                                          ("wave", "D", 60, "wave sources (bursts, memory, tables)")):
        signal = dataset.signals.get(component)
        if signal is None or "sources" not in signal:
            continue
        sources = signal["sources"]
        x = -np.angle(np.exp(1j * sources["ra"]))
        ax.scatter(x, sources["dec"], marker=marker, s=size, color=COMPONENT_COLOURS[component], edgecolor="k",
                   linewidth=0.5, zorder=4, label=what)
        for name, xs, ys in zip(sources["name"], x, sources["dec"]):
            label = text_of(name)
            names.append((label, xs, ys, 6.0, {"fontsize": 7, "color": COMPONENT_COLOURS[component], "gid": "source-name"}))
            markers.append((xs, ys, 6.0))
        ax.legend(loc="lower right", fontsize=7)
    if len(dataset.pulsars) <= MAX_SKY_NAMES:
        names += [(p.name, x, y, r, {"fontsize": 6.5, "gid": "pulsar-name"})
                  for p, (x, y, r) in zip(dataset.pulsars, markers)]
    fig.colorbar(points, ax=ax, orientation="horizontal", fraction=0.05, pad=0.08, label="median TOA uncertainty (\u00b5s); marker size: TOA count")
    ax.set_title(f"Array on the sky (equatorial): {len(dataset.pulsars)} pulsars", pad=14)
    _place_names(fig, ax, names, hour_labels, np.array(markers))
    return fig


#: Directions (in units of the marker radius plus a gap) tried for a name around its point, in order.
_NAME_DIRECTIONS = [(1, 1), (-1, 1), (1, -1), (-1, -1), (1, 0), (-1, 0), (0, 1), (0, -1)]


def _overlap(a, b) -> float:
    """Area shared by two display bounding boxes."""
    width = min(a.x1, b.x1) - max(a.x0, b.x0)
    height = min(a.y1, b.y1) - max(a.y0, b.y0)
    return max(width, 0.0) * max(height, 0.0)


def _marker_overlap(box, centres, radii) -> float:
    """Area of ``box`` covered by the squares around the markers at ``centres`` (display units) of ``radii``."""
    width = np.minimum(box.x1, centres[:, 0] + radii) - np.maximum(box.x0, centres[:, 0] - radii)
    height = np.minimum(box.y1, centres[:, 1] + radii) - np.maximum(box.y0, centres[:, 1] - radii)
    return float(np.sum(np.clip(width, 0.0, None) * np.clip(height, 0.0, None)))


def _place_names(fig, ax, names, hour_labels, markers) -> None:
    """Move each of ``hour_labels`` (annotations on the equator) just below or above it where a marker covers
    it, then annotate each of ``names`` (text, x, y, marker radius in points, text style) at one of several
    offsets around its point (:data:`_NAME_DIRECTIONS`, at three distances): the first that covers none of
    the axis labels, the title and the legend, stays inside the figure and covers neither the names placed
    before it nor the other ``markers`` (rows of x, y, radius in points); failing that, the one that covers
    least of those, in that order of importance."""
    fig.canvas.draw()  # the layout is final: extents in display units hold from here on
    renderer = fig.canvas.get_renderer()
    pixels = fig.dpi / 72.0
    centres = ax.transData.transform(markers[:, :2])
    radii = markers[:, 2] * pixels
    for label in hour_labels:
        best = None
        for shift in (0.0, -7.0, 7.0, -12.0, 12.0):
            label.xyann = (0.0, shift)
            score = _marker_overlap(label.get_window_extent(renderer), centres, radii)
            if best is None or score < best[0]:
                best = (score, shift)
            if score == 0.0:
                break
        label.xyann = (0.0, best[1])
    fixed = hour_labels + list(ax.get_yticklabels()) + [ax.title] + ([ax.get_legend()] if ax.get_legend() else [])
    hard = [t.get_window_extent(renderer) for t in fixed if t.get_visible() and (not hasattr(t, "get_text") or t.get_text())]
    frame = fig.bbox
    placed = []
    for text, x, y, radius, style in names:
        own = ax.transData.transform((x, y))
        others = np.hypot(*(centres - own).T) > 0.5
        annotation = ax.annotate(text, (x, y), xytext=(0, 0), textcoords="offset points", zorder=5,
                                 path_effects=_OUTLINE, annotation_clip=False, **style)
        best = None
        for reach, (dx, dy) in [(r, d) for r in (1.0, 2.2, 3.6) for d in _NAME_DIRECTIONS]:
            gap = reach * (radius + 1.5)
            annotation.xyann = (dx * gap, dy * gap)
            annotation.set_ha("left" if dx > 0 else "right" if dx < 0 else "center")
            annotation.set_va("bottom" if dy > 0 else "top" if dy < 0 else "center")
            box = annotation.get_window_extent(renderer)
            covered = sum(_overlap(box, b) for b in hard) + box.width * box.height - _overlap(box, frame)
            crowded = sum(_overlap(box, b) for b in placed) + _marker_overlap(box, centres[others], radii[others])
            score = (covered, crowded)
            if best is None or score < best[0]:
                best = (score, annotation.xyann, annotation.get_ha(), annotation.get_va())
            if covered == 0.0 and crowded == 0.0:
                break
        _, annotation.xyann, ha, va = best
        annotation.set_ha(ha)
        annotation.set_va(va)
        placed.append(annotation.get_window_extent(renderer))


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
    """The injected correlation pattern against angle (orange, as injected values are everywhere), with this
    realisation's correlation coefficient of the injected background for each pair and their mean in each
    angular bin; without a background, the pattern alone."""
    gwb = dataset.signals.get("gwb")
    pattern = gwb["correlation"] if gwb else "hellings-downs"
    curve_angle = np.linspace(0.0, np.pi, 400)
    positions = np.array([p.position for p in dataset.pulsars])
    upper = np.triu_indices(len(dataset.pulsars), 1)
    angles = separation_matrix(positions)[upper]
    injected = bool(gwb and gwb.get("amplitude", 0) > 0)
    fig, ax = plt.subplots(figsize=(8.0, 5.0))
    ax.axhline(0.0, color="k", lw=0.6)
    ax.plot(np.degrees(curve_angle), pattern_function(pattern)(curve_angle), color=INJECTED_COLOUR if injected else "#1b1b1b",
            lw=1.8, zorder=4, label=f"injected pattern ({pattern})" if injected else f"{pattern} pattern")
    if injected and len(angles):
        rho = _pair_correlations(dataset, "gwb")
        ax.scatter(np.degrees(angles), rho, s=6, color=COMPONENT_COLOURS["gwb"], alpha=0.35, label="pairs (this realisation)")
        edges = np.linspace(0.0, np.pi, bins + 1)
        which = np.digitize(angles, edges[1:-1])
        for k in range(bins):
            values = rho[(which == k) & np.isfinite(rho)]
            if values.size >= 2:
                mid = np.degrees(0.5 * (edges[k] + edges[k + 1]))
                ax.errorbar(mid, values.mean(), yerr=values.std(ddof=1) / np.sqrt(values.size), fmt="s", ms=5,
                            color="#1b1b1b", capsize=3, zorder=5,
                            label="bin mean \u00b1 standard error of its pairs" if k == 0 else None)
        ax.set_title(f"Injected background: A = {gwb['amplitude']:.3g}, spectral index {gwb['spectral_index']:.3g}, {len(angles)} pairs")
    else:
        ax.set_title("Correlation pattern (no background injected)")
    ax.set_xlim(0, 180)
    ax.set_xticks(np.arange(0, 181, 30))
    ax.set_xlabel("angular separation (degrees)")
    ax.set_ylabel("correlation coefficient")
    ax.legend(fontsize=8, loc="best")
    ax.grid(alpha=0.3)
    fig.tight_layout()
    return fig


def one_sided_psd(mjd, series, span: float, start_mjd: float = 0.0, count: int | None = None):
    """One-sided power spectral density of an unevenly sampled ``series`` (s), in s^2/Hz.

    Returns ``(frequency, psd)``: the frequencies k / ``span`` in Hz, k = 1 .. ``count`` (default
    the mean Nyquist frequency of the epochs, half the number of distinct MJDs), and the estimate
    at each.  ``span`` is the dataset's span in s (its Fourier basis starts at ``start_mjd``).

    Method: astropy's Lomb-Scargle periodogram (:class:`astropy.timeseries.LombScargle`,
    unweighted, floating mean, ``normalization="psd"``), which at each frequency f fits
    a + b cos 2 pi f t + c sin 2 pi f t by least squares and returns
    P(f) = (chi2(mean only) - chi2(fit)) / 2 in s^2.  For N samples it equals the classical
    periodogram |sum_i y_i exp(-2 pi i f t_i)|^2 / N when the sampling is even, so with the
    mean spacing T / N it is turned into a one-sided density by

        S(f) = 2 T P(f) / N   (s^2/Hz, T = ``span``, N = number of TOAs).

    Checks of this normalisation: white noise of variance sigma^2 gives E[P] = sigma^2 (the fit
    of two more parameters lowers chi2 by 2 sigma^2 on average, at any sampling), hence
    E[S] = 2 sigma^2 T / N, the density of white noise sampled every T / N up to its Nyquist
    frequency; a sinusoid of amplitude A at k / T, evenly sampled, gives P = A^2 N / 4, hence
    S = A^2 T / 2, its power A^2 / 2 spread over one frequency bin 1 / T.  Several TOAs at one
    epoch (sub-bands) count as separate samples: a series equal in all of them keeps these values.

    This is an estimate of one realisation, not the model: each value scatters by about its own
    size (two degrees of freedom), and with no window, and uneven sampling, strong power at low
    frequencies leaks into the higher ones, where a steep red spectrum flattens.  Fewer than
    four distinct epochs give empty arrays.
    """
    from astropy.timeseries import LombScargle

    mjd = np.asarray(mjd, dtype=float)
    series = np.asarray(series, dtype=float)
    epochs = np.unique(mjd).size
    count = epochs // 2 if count is None else int(count)
    if epochs < 4 or count < 1 or span <= 0:
        return np.array([]), np.array([])
    frequency = np.arange(1, count + 1) / span
    seconds = (mjd - start_mjd) * 86400.0
    power = LombScargle(seconds, series, fit_mean=True, center_data=True, normalization="psd").power(
        frequency, method="fast", assume_regular_frequency=True)
    return frequency, 2.0 * span * power / series.size


def _budget_span(dataset: Dataset, p) -> float:
    """The span of the Fourier frequencies: the dataset's, or (when not recorded) the pulsar's own."""
    if dataset.span > 0:
        return float(dataset.span)
    return float(np.ptp(p.mjd) * 86400.0) if p.toa_count else 0.0


def injected_spectrum(dataset: Dataset, pulsar, name: str):
    """``(frequencies Hz, one-sided PSD s^2/Hz)`` of an injected power-law component of ``pulsar`` on its
    frequencies k/T, k = 1..harmonics (PHYSICS.md: S(f) = A^2 / (12 pi^2) f_yr^-3 (f / f_yr)^-gamma; the
    expectation of :func:`one_sided_psd` at those frequencies), or None for a component without one.  A
    chromatic process's is averaged over the pulsar's TOAs: times the mean of (1400 MHz / nu)^(2 chi)."""
    span = dataset.span
    signal = dataset.signals.get(name, {})
    if name == "red":
        amplitude, gamma = pulsar.noise.get("red_amplitude", 0.0), pulsar.noise.get("red_spectral_index", 13 / 3)
        factor = 1.0
    elif name == "gwb" and signal.get("source") != "binaries":
        amplitude, gamma, factor = signal.get("amplitude", 0.0), signal.get("spectral_index", 13 / 3), 1.0
    elif name in ("dispersion", "scattering") and pulsar.frequency_mhz is not None:
        amplitude = pulsar.noise.get(f"{name}_amplitude", 0.0)
        gamma = pulsar.noise.get(f"{name}_spectral_index", 13 / 3)
        factor = float(np.mean(chromatic_scale(pulsar.frequency_mhz, pulsar.noise.get(f"{name}_chromatic_index", 2.0)) ** 2))
    else:
        return None
    if not amplitude or not span or "harmonics" not in signal:
        return None
    frequency = np.arange(1, int(signal["harmonics"]) + 1) / span
    if name == "gwb" and "bend_frequency" in signal:  # an injected turnover
        factor = factor * turnover(frequency, float(signal["bend_frequency"]), float(signal["bend_index"]))
    return frequency, factor * residual_psd(frequency, float(amplitude), float(gamma))


def noise_budget_figure(dataset: Dataset, first: int = 0, count: int = PER_PAGE):
    """The noise budget of pulsars ``first`` to ``first + count``: one panel a pulsar, in rows of
    :data:`BUDGET_COLUMNS`, with the power spectral density of each injected component.

    Each line is :func:`one_sided_psd` of one series of ``p.injected`` (before the timing-model fit,
    so it shows what went in, including the power the fit later absorbs) against Fourier frequency
    in nHz, on log-log axes shared by all panels, in the colours of
    :data:`~ptares.figures.common.COMPONENT_COLOURS`.  Components that are zero are left out.  Over
    each power-law component, dashed, its injected spectrum (:func:`injected_spectrum`): the estimate
    scatters about it at its frequencies and leaks power above them (uneven sampling).
    """
    pulsars = dataset.pulsars[first : first + count]
    columns = max(1, min(BUDGET_COLUMNS, len(pulsars)))
    rows = max(1, -(-len(pulsars) // columns))
    width, height = max(1.75 * columns + 1.2, 5.0), 1.45 * rows + 1.6
    fig, axes = plt.subplots(rows, columns, sharex=True, sharey=True, squeeze=False, figsize=(width, height))
    labelled = set()
    values = []
    for ax, p in zip(axes.flat, pulsars):
        span = _budget_span(dataset, p)
        drawn = False
        for name, series in p.injected.items():
            if not np.any(series):
                continue
            frequency, psd = one_sided_psd(p.mjd, series, span, dataset.start_mjd)
            keep = psd > 0
            if not keep.any():
                continue
            colour = COMPONENT_COLOURS.get(name, "#7b2cbf")
            ax.loglog(frequency[keep] * 1e9, psd[keep], lw=0.9, color=colour,
                      label=name if name not in labelled else None, gid=f"psd:{name}")
            expected = injected_spectrum(dataset, p, name)
            if expected is not None:
                ax.loglog(expected[0] * 1e9, expected[1], lw=1.6, ls=(0, (3, 2)), color=colour, alpha=0.9,
                          gid=f"model:{name}")
                labelled.add("model")
            labelled.add(name)
            values.append(psd[keep])
            drawn = True
        ax.text(0.96, 0.94, p.name, transform=ax.transAxes, ha="right", va="top", fontsize=7,
                bbox={"boxstyle": "round,pad=0.15", "fc": "white", "ec": "none", "alpha": 0.7})
        if not drawn:
            ax.text(0.5, 0.5, "nothing injected", transform=ax.transAxes, ha="center", va="center", fontsize=7,
                    color="#777777")
        ax.grid(which="major", alpha=0.3)
        ax.tick_params(labelsize=6)
    for index, ax in enumerate(axes.flat):
        if index >= len(pulsars):
            ax.set_axis_off()
        elif index + columns >= len(pulsars):  # nothing drawn below: this panel carries the frequency labels
            ax.tick_params(labelbottom=True)
    if values:
        every = np.concatenate(values)
        top = float(every.max())
        axes[0, 0].set_ylim(max(float(every.min()), top * 1e-9) / 2.0, top * 3.0)
    else:
        axes[0, 0].set_xscale("log")
        axes[0, 0].set_yscale("log")
    title = f"Noise budget: {len(dataset.pulsars)} pulsars"
    if len(pulsars) < len(dataset.pulsars):
        title += f" ({first + 1} to {first + len(pulsars)} here)"
    fig.suptitle(title + "\ninjected components, before the timing-model fit",
                 fontsize=9, x=0.8 / width, ha="left", va="top", y=1 - 0.08 / height, linespacing=1.4)
    fig.supxlabel("Fourier frequency (nHz)", fontsize=8, y=0.06 / height, va="bottom")
    fig.supylabel("one-sided PSD (s$^2$/Hz; Lomb-Scargle)", fontsize=8, x=0.08 / width, ha="left")
    if labelled:
        handles, names = [], []
        for ax in axes.flat:
            for handle, label in zip(*ax.get_legend_handles_labels()):
                if label not in names:
                    handles.append(handle)
                    names.append(label)
        if "model" in labelled:  # one grey key for every component's dashed spectrum
            handles.append(Line2D([], [], lw=1.6, ls=(0, (3, 2)), color="#555555"))
            names.append("injected power law")
        fig.legend(handles, names, loc="upper right", fontsize=7, ncol=min(7, len(names)), frameon=False,
                   bbox_to_anchor=(1 - 0.1 / width, 1 - 0.62 / height), handlelength=1.6, columnspacing=1.2)
    fig.subplots_adjust(hspace=0.08, wspace=0.06, left=0.8 / width, right=1 - 0.2 / width,
                        top=1 - 0.95 / height, bottom=0.5 / height)
    return fig


def _has_injected(dataset: Dataset) -> bool:
    """Whether some pulsar has an injected component that is not zero."""
    return any(np.any(series) for p in dataset.pulsars for series in p.injected.values())


def dataset_figures(dataset: Dataset, directory) -> list:
    """Write the dataset figures into ``directory``; returns their paths.

    ``residuals.png`` (then ``residuals-2.png``... for every further
    :data:`PER_PAGE` pulsars), ``sky.png``, ``correlation.png`` and, when some
    pulsar has an injected component that is not zero, ``noise_budget.png``
    (then ``noise_budget-2.png``..., paged like the residuals).
    """
    directory = Path(directory)
    paths = []
    pages = list(enumerate(range(0, len(dataset.pulsars), PER_PAGE), start=1))
    for page, first in pages:
        name = "residuals.png" if page == 1 else f"residuals-{page}.png"
        paths.append(save_figure(residuals_figure(dataset, first, PER_PAGE), directory / name))
    paths.append(save_figure(sky_figure(dataset), directory / "sky.png"))
    paths.append(save_figure(correlation_figure(dataset), directory / "correlation.png"))
    if _has_injected(dataset):
        for page, first in pages:
            name = "noise_budget.png" if page == 1 else f"noise_budget-{page}.png"
            paths.append(save_figure(noise_budget_figure(dataset, first, PER_PAGE), directory / name))
    return paths

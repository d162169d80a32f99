"""Fit and campaign figures: labels, the "not converged" stamp, shaded intervals and coverage."""

from __future__ import annotations

import matplotlib

matplotlib.use("Agg")

import matplotlib.pyplot as plt
import numpy as np
import pytest
from matplotlib import patheffects
from matplotlib.text import Text
from scipy import stats

from ptares.figures.campaign import sweep_figures
from ptares.figures.inference import (
    MAX_CORNER,
    corner_figure,
    hpd_thresholds,
    trace_figure,
)
from ptares.inference import parameters

NAMES = ["red_lg_amplitude@J.x-1+2", "common_lg_amplitude", "white_scale@B1937+21", "common_spectral_index"]
SHOWN = ["common_lg_amplitude", "common_spectral_index", "red_lg_amplitude@J.x-1+2", "white_scale@B1937+21"]


@pytest.fixture(autouse=True)
def _close_figures():
    yield
    plt.close("all")


def _samples(draws=2000, seed=1):
    rng = np.random.default_rng(seed)
    return rng.normal(size=(draws, len(NAMES))) * [0.3, 0.2, 0.05, 0.5] + [-14.0, -14.6, 1.0, 4.3]


def _texts(fig):
    fig.canvas.draw()  # renders every label, so bad math text fails here
    return [t.get_text() for t in fig.findobj(Text) if t.get_visible()]


def test_corner_and_trace_are_labelled_with_math_text():
    """Axis labels are parameters.label of each shown name, array-wide (common_) parameters first (common practice)."""
    samples = _samples()
    injected = {"common_lg_amplitude": -14.6, "red_lg_amplitude@J.x-1+2": -14.1}
    fig = corner_figure(samples, NAMES, injected)
    axes = np.array(fig.axes).reshape(len(NAMES), len(NAMES))
    labels = [parameters.label(name) for name in SHOWN]
    assert labels[2] == r"$\lg A_\mathrm{red}$ [J.x-1+2]"
    assert [ax.get_xlabel() for ax in axes[-1]] == labels
    assert [ax.get_ylabel() for ax in axes[1:, 0]] == labels[1:]
    assert all(t.startswith("$") for t in labels[:3])
    _texts(fig)

    chain = samples[:1600].reshape(100, 16, len(NAMES))
    fig = trace_figure(chain, NAMES, burn=20, injected=injected)
    assert [ax.get_ylabel() for ax in fig.axes] == labels
    _texts(fig)


def test_large_models_show_array_wide_parameters_first():
    """At most MAX_CORNER parameters, common_ and binary_ ones first, in model order (common practice)."""
    names = [parameters.for_pulsar(parameters.RED_AMPLITUDE, f"P{k}") for k in range(10)]
    names += [parameters.binary("lg_strain"), parameters.COMMON_AMPLITUDE]
    samples = np.random.default_rng(2).normal(size=(500, len(names)))
    fig = corner_figure(samples, names)
    shown = [ax.get_xlabel() for ax in np.array(fig.axes).reshape(MAX_CORNER, MAX_CORNER)[-1]]
    expected = [parameters.binary("lg_strain"), parameters.COMMON_AMPLITUDE] + names[: MAX_CORNER - 2]
    assert shown == [parameters.label(n) for n in expected]
    assert any(f"{MAX_CORNER} of {len(names)}" in t for t in _texts(fig))


@pytest.mark.parametrize("draw", ["corner", "trace"])
def test_not_converged_is_stated(draw):
    """converged=False puts a visible "not converged" text artist on the figure; converged=True does not (common practice)."""
    samples = _samples(800)

    def make(converged):
        if draw == "corner":
            return corner_figure(samples, NAMES, converged=converged)
        return trace_figure(samples.reshape(100, 8, len(NAMES)), NAMES, burn=10, converged=converged)

    assert any("not converged" in t.lower() for t in _texts(make(False)))
    assert not any("not converged" in t.lower() for t in _texts(make(True)))


def test_marginal_shading_is_the_central_68_percent_interval():
    """The shaded 1-D interval of 20000 standard-normal draws matches numpy's 16/84% percentiles and
    scipy.stats.norm's +-0.994 within 5 standard errors of a sample quantile, sqrt(p(1-p)/n)/pdf(z)."""
    draws = 20000
    values = np.random.default_rng(7).normal(size=draws)
    fig = corner_figure(values[:, None], [parameters.COMMON_AMPLITUDE])
    ax = fig.axes[0]
    (band,) = [c for c in ax.collections if c.get_gid() == "interval68"]
    x = np.concatenate([p.vertices[:, 0] for p in band.get_paths()])
    low, high = x.min(), x.max()
    np.testing.assert_allclose([low, high], np.percentile(values, [16, 84]), atol=1e-9)
    z = stats.norm.ppf(0.84)
    error = np.sqrt(0.84 * 0.16 / draws) / stats.norm.pdf(z)
    assert abs(low + z) < 5 * error and abs(high - z) < 5 * error
    (median,) = [line for line in ax.lines if line.get_gid() == "median"]
    assert abs(median.get_xdata()[0]) < 5 * np.sqrt(0.25 / draws) / stats.norm.pdf(0.0)


@pytest.mark.parametrize("p", [0.68, 0.95])
def test_highest_density_levels_of_a_normal(p):
    """hpd_thresholds on a gridded 2-D unit normal gives the analytic level (1 - p) / (2 pi)
    (the density on the circle of radius sqrt(-2 ln(1 - p)), which holds p)."""
    grid = np.linspace(-6, 6, 601)
    x, y = np.meshgrid(grid, grid)
    density = np.exp(-0.5 * (x**2 + y**2)) / (2 * np.pi)
    (level,) = hpd_thresholds(density, [p])
    assert level == pytest.approx((1 - p) / (2 * np.pi), rel=5e-3)


@pytest.mark.parametrize("draws", [20, 3, 1])
def test_degenerate_and_tiny_samples_draw(draws):
    """A parameter with no spread, a single parameter, and a handful of draws all draw without error (common practice)."""
    rng = np.random.default_rng(3)
    samples = rng.normal(size=(draws, 3))
    samples[:, 1] = -14.5  # all draws equal
    names = [parameters.COMMON_AMPLITUDE, parameters.COMMON_INDEX, "red_spectral_index@J.x-1+2"]
    for fig in (
        corner_figure(samples, names, {parameters.COMMON_INDEX: 4.33}, converged=False),
        corner_figure(samples[:, 1:2], names[1:2]),
        corner_figure(samples[:, :1], names[:1], converged=False),
        trace_figure(samples.reshape(draws, 1, 3), names, burn=1),
    ):
        _texts(fig)


def _rows(count=50, seed=4):
    rng = np.random.default_rng(seed)
    return [{"status": "ok", "hd_snr": float(rng.normal()), "injected_amplitude": 1e-15, "hd_amplitude2": 0.0,
             "hd_sigma": 1.0, "common_lg_amplitude.quantile": float(rng.uniform()),
             "common_spectral_index.quantile": float(rng.uniform()), "common_lg_amplitude.median": -14.6,
             "common_lg_amplitude.low68": -14.8, "common_lg_amplitude.high68": -14.4,
             "common_spectral_index.median": 4.3} for _ in range(count)]


def test_sweep_draws_a_coverage_figure():
    """sweep_figures names the figure coverage.png (no pp.png); its curves are numpy's fraction of |2q - 1| <= width
    and its band scipy.stats.binom's central 95% for 50 tasks."""
    rows = _rows()
    figures = sweep_figures(rows)
    assert set(figures) == {"detection.png", "recovery.png", "snr.png", "coverage.png"}
    ax = figures["coverage.png"].axes[0]
    assert ax.get_xlabel() == "credible interval width"
    assert ax.get_ylabel() == "fraction of injections inside"
    assert not any("p-p" in t.lower() for t in _texts(figures["coverage.png"]))
    for name in ("common_lg_amplitude", "common_spectral_index"):
        (line,) = [line for line in ax.lines if line.get_gid() == f"coverage:{name}"]
        widths, inside = line.get_xydata().T
        q = np.array([r[f"{name}.quantile"] for r in rows])
        expected = np.mean(np.abs(2 * q[:, None] - 1) <= widths[None, :], axis=0)
        np.testing.assert_allclose(inside, expected)
    (band,) = [c for c in ax.collections if c.get_gid() == "band"]
    vertices = np.concatenate([p.vertices for p in band.get_paths()])
    at_half = vertices[np.isclose(vertices[:, 0], 0.5), 1]
    np.testing.assert_allclose([at_half.min(), at_half.max()], np.array(stats.binom.interval(0.95, 50, 0.5)) / 50)


def test_coverage_needs_the_new_columns():
    """Only <parameter>.quantile columns of tasks with a background count; old gwb_* names are ignored (common practice)."""
    old = [{"status": "ok", "hd_snr": 0.0, "injected_amplitude": 1e-15, "hd_amplitude2": 0.0, "hd_sigma": 1.0,
            "gwb_log10_A_quantile": 0.5}]
    assert "coverage.png" not in sweep_figures(old)
    silent = [dict(r, injected_amplitude=0.0) for r in _rows(10)]
    assert "coverage.png" not in sweep_figures(silent)
    fit_only = [{"status": "ok", "common_lg_amplitude.quantile": 0.3}]  # no correlation stage: only the coverage
    assert set(sweep_figures(fit_only)) == {"coverage.png"}


# ---------------------------------------------------------------- campaign amplitude axes

def _campaign_rows(amplitudes, per_amplitude=12, seed=5):
    """Rows of a campaign with tasks at each of ``amplitudes``: S/N growing with A^2, recovered A^2 about the
    injected value."""
    rng = np.random.default_rng(seed)
    rows = []
    for a in amplitudes:
        for _ in range(per_amplitude):
            sigma = 1e-31 + 0.3 * a * a
            rows.append({"status": "ok", "injected_amplitude": a, "hd_sigma": sigma,
                         "hd_amplitude2": float(a * a + rng.normal() * sigma),
                         "hd_snr": float(a * a / sigma + rng.normal()), "ln_bayes_factor": float(rng.normal()),
                         "ln_bayes_factor_error": 0.2})
    return rows


def _amplitude_axis(fig):
    (ax,) = [ax for ax in fig.axes if ax.get_gid() == "amplitude axis"]
    return ax


@pytest.mark.parametrize("amplitudes, scale, power", [((0.0, 1e-16, 1e-15, 1e-14), "log", None),
                                                      ((0.0, 1e-15, 2e-15, 4e-15), "linear", -15),
                                                      ((1e-15, 5e-15, 1e-14), "linear", -14)])
def test_amplitude_axes_are_logarithmic_when_amplitudes_span_decades(amplitudes, scale, power):
    """Detection, S/N and Bayes-factor figures put the injected amplitude on a log axis when the positive
    amplitudes span more than a decade, else on a linear one; on a log axis the no-signal tasks are off the axis
    and counted in the detection legend; the error bars stay the binomial ones of detection_probability."""
    from ptares.campaign.detection import detection_probability, detection_rule

    rows = _campaign_rows(amplitudes)
    figures = sweep_figures(rows)
    ax = figures["detection.png"].axes[0]
    assert ax.get_xscale() == scale
    assert _amplitude_axis(figures["snr.png"]).get_xscale() == scale
    assert _amplitude_axis(figures["bayes.png"]).get_xscale() == scale
    (container,) = ax.containers
    x, y = (np.asarray(values, dtype=float) for values in container.lines[0].get_data())
    rule = detection_rule(rows, 0.05)
    expected = {a: d for a, d in detection_probability(rows, rule).items() if a > 0 or scale == "linear"}
    np.testing.assert_allclose(y, [d.fraction for d in expected.values()])
    (bars,) = container.lines[2]
    half = np.array([np.ptp(segment[:, 1]) / 2 for segment in bars.get_segments()])
    np.testing.assert_allclose(half, [d.error for d in expected.values()], rtol=1e-9)
    legend = [t.get_text() for t in ax.get_legend().get_texts()]
    if scale == "log":
        assert 0.0 not in x and len(x) == 3
        assert any("12 no-signal tasks" in t and "threshold" in t for t in legend)
        assert len(figures["snr.png"].axes) == 2  # a panel of its own for the no-signal S/N
    else:
        assert not any("no-signal" in t for t in legend)
        written = rf"($\times 10^{{{power}}}$)"
        assert ax.get_xlabel().endswith(written) and _amplitude_axis(figures["snr.png"]).get_xlabel().endswith(written)
        figures["detection.png"].canvas.draw()
        assert ax.xaxis.get_offset_text().get_text() == ""
        np.testing.assert_allclose(x, [a / 10.0**power for a in expected])


@pytest.mark.parametrize("amplitudes, scale", [((1e-15, 1.5e-15, 2e-15), "linear"), ((0.0, 1e-16, 1e-15, 1e-14), "log")])
def test_recovery_axes_share_one_scale(amplitudes, scale):
    """Recovered against injected A^2: both axes have the same scale and limits, on linear axes one power of ten
    written in both labels (no offset text), on log axes when the injected values span decades; the line
    recovered = injected runs corner to corner."""
    fig = sweep_figures(_campaign_rows(amplitudes))["recovery.png"]
    ax = fig.axes[0]
    fig.canvas.draw()
    assert ax.get_xscale() == ax.get_yscale() == scale
    assert ax.get_xlim() == pytest.approx(ax.get_ylim(), rel=1e-12, abs=0.0)
    (line,) = [line for line in ax.lines if line.get_gid() == "recovered=injected"]
    np.testing.assert_allclose(line.get_xdata(), line.get_ydata())
    np.testing.assert_allclose(line.get_xdata(), ax.get_xlim())
    assert ax.xaxis.get_offset_text().get_text() == ax.yaxis.get_offset_text().get_text() == ""
    if scale == "linear":
        power = r"$\times 10^{-30}$"
        assert power in ax.get_xlabel() and power in ax.get_ylabel()
        (means,) = [line for line in ax.lines if line.get_gid() == "means"]
        np.testing.assert_allclose(means.get_xdata(), np.square(amplitudes) / 1e-30)
    else:
        assert "10^" not in ax.get_xlabel() + ax.get_ylabel()
        assert any("12 no-signal tasks" in t.get_text() for t in ax.get_legend().get_texts())


# ---------------------------------------------------------------- dataset figures

def _array(count, seed=0, on_hours=False):
    """A dataset of ``count`` pulsars with white and red noise; ``on_hours``: the first twelve on the
    equator at the even hours of right ascension, where the hour labels of the sky map are."""
    from ptares.dataset import Dataset, PulsarData

    rng = np.random.default_rng(seed)
    pulsars = []
    for k in range(count):
        mjd = np.sort(53000.0 + rng.uniform(0.0, 3000.0, 40))
        t = (mjd - 53000.0) / 3000.0
        scale = 10.0 ** rng.uniform(-7.0, -5.0)  # rows of very different ranges
        red = scale * np.cumsum(rng.normal(size=mjd.size)) / 6.0
        white = rng.normal(0.0, scale / 3.0, mjd.size)
        design = np.column_stack([np.ones_like(t), t, t * t])
        total = red + white
        residuals = total - design @ np.linalg.lstsq(design, total, rcond=None)[0]
        ra, dec = (k * np.pi / 6.0, 0.0) if on_hours and k < 12 else (rng.uniform(0, 2 * np.pi), np.arcsin(rng.uniform(-1, 1)))
        pulsars.append(PulsarData(name=f"J{k:04d}-{k % 90:02d}{k % 60:02d}", ra=ra, dec=dec, distance=1.0,
                                  distance_error=0.2, mjd=mjd, residuals=residuals, errors=np.full(mjd.size, scale / 3.0),
                                  design_matrix=design, design_columns=["offset", "f0", "f1"],
                                  injected={"white": white, "red": red}))
    return Dataset(pulsars=pulsars, start_mjd=53000.0, span=3000.0 * 86400.0)


def test_residual_pages_have_few_rows_and_a_scale_bar_each():
    """At most 20 rows a page; every row has one vertical scale bar whose length is 1, 2 or 5 times a power of
    ten, between a fifth and a half of the row's range, and is written beside it; at 100 pulsars the names of
    neighbouring rows do not overlap."""
    from matplotlib.text import Text

    from ptares.figures.dataset import PER_PAGE, residuals_figure

    assert PER_PAGE <= 20
    dataset = _array(100)
    for first in (0, 80):
        fig = residuals_figure(dataset, first, PER_PAGE)
        assert len(fig.axes) == PER_PAGE
        fig.canvas.draw()
        names = []
        for ax, p in zip(fig.axes, dataset.pulsars[first:]):
            (bar,) = [line for line in ax.lines if line.get_gid() == "scale-bar"]
            (label,) = [t for t in ax.texts if t.get_gid() == "scale-bar-label"]
            length = np.ptp(bar.get_ydata())
            low, high = ax.get_ylim()
            assert 0.2 * (high - low) <= length <= 0.5 * (high - low)
            mantissa = length / 10.0 ** np.floor(np.log10(length))
            assert min(abs(mantissa - m) for m in (1.0, 2.0, 5.0)) < 1e-6
            value, unit = label.get_text().split()
            assert float(value) * (1000.0 if unit == "ms" else 1.0) == pytest.approx(length, rel=1e-9)
            assert ax.get_ylabel() == p.name
            names.append(ax.yaxis.label.get_window_extent())
        for upper, lower in zip(names, names[1:]):
            assert upper.y0 >= lower.y1  # readable: no name runs into the next
        assert not [t for t in fig.findobj(Text) if "range" in t.get_text()]


def test_dataset_figures_page_the_residuals(tmp_path, monkeypatch):
    """Two pages and one pulsar more give three residual pages of at most PER_PAGE rows (and as many noise-budget
    pages); PER_PAGE is set to 4 here to keep the test quick (the page size itself is tested above)."""
    from ptares.figures import dataset as module

    monkeypatch.setattr(module, "PER_PAGE", 4)
    names = [p.name for p in module.dataset_figures(_array(9), tmp_path)]
    assert names == ["residuals.png", "residuals-2.png", "residuals-3.png", "sky.png", "correlation.png",
                     "noise_budget.png", "noise_budget-2.png", "noise_budget-3.png"]


def test_sky_names_stay_clear_of_the_hour_labels():
    """Twelve pulsars on the equator at the labelled hours: no name covers an hour label, names are
    outlined in white; without names (more than 40 pulsars) the hour labels are still there."""
    from ptares.figures.dataset import sky_figure

    fig = sky_figure(_array(30, on_hours=True))
    fig.canvas.draw()
    ax = fig.axes[0]
    hours = [t for t in ax.texts if t.get_gid() == "hour-label"]
    names = [t for t in ax.texts if t.get_gid() == "pulsar-name"]
    assert len(hours) == 11 and len(names) == 30
    assert not any(t.get_text() for t in ax.get_xticklabels())
    hour_boxes = [t.get_window_extent() for t in hours]
    for name in names:
        box = name.get_window_extent()
        assert not any(box.overlaps(h) for h in hour_boxes), name.get_text()
        assert any(isinstance(e, patheffects.withStroke) for e in name.get_path_effects())
    crowded = sky_figure(_array(41))
    assert not [t for t in crowded.axes[0].texts if t.get_gid() == "pulsar-name"]
    assert len([t for t in crowded.axes[0].texts if t.get_gid() == "hour-label"]) == 11


# ---------------------------------------------------------------- comparison and correlations

def _comparison(uncorrelated_converged=True, direct_converged=None):
    """A Comparison of two patterns with synthetic draws; ``direct_converged`` (not None): dipole fitted
    directly, with that convergence."""
    from ptares.campaign.comparison import Comparison

    rng = np.random.default_rng(3)
    draws = rng.normal(size=(400, 2)) * [0.2, 0.5] + [-14.6, 4.3]
    entry = {"method": "reweighting", "ln_bayes_factor": 1.2, "ln_bayes_factor_error": 0.1, "effective_samples": 300.0,
             "reliable": True, "warning": None}
    content = {"draws": 400, "reliable": True, "patterns": {"hellings-downs": dict(entry), "dipole": dict(entry)},
               "uncorrelated_fit": {"converged": uncorrelated_converged}}
    comparison = Comparison(content, draws, {"hellings-downs": rng.normal(0, 0.1, 400), "dipole": rng.normal(0, 0.1, 400)})
    if direct_converged is not None:
        content["patterns"]["dipole"].update(method="bridge", direct_fit={"converged": direct_converged})
        comparison.direct["dipole"] = draws[:200] + 0.05
    return comparison


@pytest.mark.parametrize("uncorrelated, direct, stamped", [
    (True, None, None), (False, None, "uncorrelated"), (True, True, None), (True, False, "dipole"),
])
def test_comparison_marks_fits_that_did_not_converge(uncorrelated, direct, stamped):
    """Each posterior panel says "not converged" (in red), naming the fit, when the uncorrelated fit or a
    direct fit did not converge, and nowhere otherwise (common practice)."""
    from ptares.figures.comparison import comparison_figure

    names = [parameters.COMMON_AMPLITUDE, parameters.COMMON_INDEX]
    fig = comparison_figure(_comparison(uncorrelated, direct), names, {parameters.COMMON_AMPLITUDE: -14.6})
    fig.canvas.draw()
    stamps = [t for ax in fig.axes for t in (ax.title, ax._left_title, ax._right_title)
              if "not converged" in t.get_text().lower()]
    if stamped is None:
        assert not any("not converged" in t.lower() for t in _texts(fig))
    else:
        assert len(stamps) == 2  # both posterior panels
        assert all(stamped in t.get_text() and t.get_color() == "#c1121f" for t in stamps)
    assert [ax.get_xlabel() for ax in fig.axes[:2]] == [parameters.label(n) for n in names]


def test_correlations_figure_writes_one_scale_once():
    """Binned correlations, their curve and the injected curve share one power of ten, written once in the
    vertical label (no offset text); the injected curve is orange and called injected."""
    from types import SimpleNamespace

    from ptares.figures.correlation import correlations_figure

    centres = np.radians(np.linspace(10, 170, 8))
    rho = 2e-30 * (0.5 - 0.3 * np.cos(centres))
    binned = SimpleNamespace(centres=centres, rho=rho, error=np.full(8, 4e-31))
    result = SimpleNamespace(
        estimates={"hellings-downs": {"amplitude2": 2.1e-30, "snr": 3.0}}, binned=binned, band=np.full(8, 5e-31),
        band_method="analytic", settings={}, injected_amplitude2=2e-30, names=["a", "b", "c"],
        pairs=SimpleNamespace(rho=np.zeros(3)), fit={"chi2": 5.0, "dof": 7})
    fig = correlations_figure(result)
    ax = fig.axes[0]
    fig.canvas.draw()
    assert ax.get_ylabel() == r"correlation ρ ($\times 10^{-30}$)"
    assert ax.yaxis.get_offset_text().get_text() == ""
    (points,) = ax.containers
    np.testing.assert_allclose(points.lines[0].get_ydata(), rho / 1e-30)
    (injected,) = [line for line in ax.lines if line.get_gid() == "injected"]
    assert matplotlib.colors.to_hex(injected.get_color()) == "#e36414"
    assert np.max(injected.get_ydata()) == pytest.approx(2.0 * 0.5, rel=1e-3)  # HD is 1/2 at zero separation
    assert any(t.get_text().startswith("injected") for t in ax.get_legend().get_texts())

"""Fit and campaign figures: labels, the "not converged" stamp, shaded intervals and coverage."""

from __future__ import annotations

import matplotlib

matplotlib.use("Agg")

import matplotlib.pyplot as plt
import numpy as np
import pytest
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

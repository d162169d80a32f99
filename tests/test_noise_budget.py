"""Residual pages coloured by observing system or radio frequency, and the noise-budget figure."""

from __future__ import annotations

import matplotlib

matplotlib.use("Agg")

import matplotlib.pyplot as plt
import numpy as np
import pytest
from matplotlib import colors as mcolors

from ptares.dataset import Dataset, PulsarData
from ptares.figures import dataset as figures
from ptares.figures.common import COMPONENT_COLOURS, RESIDUAL_COLOUR
from ptares.figures.dataset import (
    FREQUENCY_COLOURS,
    dataset_figures,
    noise_budget_figure,
    one_sided_psd,
    residuals_figure,
)

PNG = b"\x89PNG\r\n\x1a\n"
START = 53000.0
SPAN_DAYS = 3000.0
SYSTEMS = ("L-wide.PUPPI", "S-band_2")


@pytest.fixture(autouse=True)
def _close_figures():
    yield
    plt.close("all")


def _pulsar(name, seed, bands=None, systems=None, epochs=60, injected=("white", "red", "gwb")):
    """A pulsar observed at ``epochs`` jittered epochs, once per band (``bands`` MHz, None: not recorded);
    each band has the observing system of the same position in ``systems`` (None: not recorded)."""
    rng = np.random.default_rng(seed)
    per_epoch = len(bands) if bands else 1
    epoch_mjd = START + np.linspace(0.0, SPAN_DAYS, epochs) + rng.uniform(-4.0, 4.0, epochs)
    mjd = np.repeat(epoch_mjd, per_epoch)
    n = mjd.size
    t = (mjd - START) / SPAN_DAYS
    errors = np.full(n, 1e-6)
    series = {
        "white": rng.normal(0.0, 1e-6, n),
        "red": 3e-6 * np.repeat(np.cumsum(rng.normal(size=epochs)), per_epoch) / np.sqrt(epochs),
        "gwb": 2e-6 * np.sin(2 * np.pi * 1.3 * t),
        "binary": np.zeros(n),  # a component that is all zero is drawn nowhere
    }
    frequency = np.tile(np.asarray(bands, dtype=float), epochs) if bands else None
    if frequency is not None:
        series["dispersion"] = 2e-6 * np.repeat(np.cumsum(rng.normal(size=epochs)), per_epoch) / np.sqrt(epochs) \
            * (1400.0 / frequency) ** 2
    chosen = {k: v for k, v in series.items() if k in injected}
    design = np.column_stack([np.ones(n), t, t * t])
    total = sum(chosen.values()) if chosen else rng.normal(0.0, 1e-6, n)
    residuals = total - design @ np.linalg.lstsq(design, total, rcond=None)[0]
    system = np.tile(np.asarray(systems), epochs) if systems else None
    return PulsarData(name=name, ra=0.3 * seed, dec=0.1 * seed - 0.5, distance=1.0, distance_error=0.2, mjd=mjd,
                      residuals=residuals, errors=errors, design_matrix=design, design_columns=["offset", "f0", "f1"],
                      injected=chosen, frequency_mhz=frequency, system=system)


def _dataset(count=3, **kwargs) -> Dataset:
    pulsars = [_pulsar(f"J{k:04d}+{k:02d}", seed=k + 1, **kwargs) for k in range(count)]
    return Dataset(pulsars=pulsars, start_mjd=START, span=SPAN_DAYS * 86400.0)


def _collection(ax, gid):
    (found,) = [c for c in ax.collections if c.get_gid() == gid]
    return found


def _point_and_bar_colours(ax):
    points = _collection(ax, "points").get_facecolors()
    bars = _collection(ax, "errorbars").get_colors()
    return points, bars


# ---------------------------------------------------------------- files

@pytest.mark.parametrize("fields", ["two systems, two bands", "no frequency or system"])
def test_dataset_figures_write_the_new_pages(tmp_path, fields):
    """residuals.png and noise_budget.png are written as PNG files, with and without frequency/system fields."""
    if fields == "no frequency or system":
        dataset = _dataset()
        assert all(p.frequency_mhz is None and p.system is None for p in dataset.pulsars)
    else:
        dataset = _dataset(bands=(1400.0, 820.0), systems=SYSTEMS, injected=("white", "red", "gwb", "dispersion"))
        assert np.unique(dataset.pulsars[0].mjd).size == dataset.pulsars[0].toa_count // 2  # two TOAs an epoch
    paths = dataset_figures(dataset, tmp_path)
    names = [p.name for p in paths]
    assert names == ["residuals.png", "sky.png", "correlation.png", "noise_budget.png"]
    for name in names:
        assert (tmp_path / name).read_bytes()[:8] == PNG


def test_noise_budget_pages_follow_the_residual_pages(tmp_path, monkeypatch):
    """Paged like the residuals (PER_PAGE pulsars a page); no noise budget when nothing was injected."""
    monkeypatch.setattr(figures, "PER_PAGE", 2)
    names = [p.name for p in dataset_figures(_dataset(count=3), tmp_path / "paged")]
    assert names == ["residuals.png", "residuals-2.png", "sky.png", "correlation.png",
                     "noise_budget.png", "noise_budget-2.png"]
    assert (tmp_path / "paged" / "noise_budget-2.png").read_bytes()[:8] == PNG

    nothing = _dataset(count=2, injected=("binary",))  # injected, but all zero
    names = [p.name for p in dataset_figures(nothing, tmp_path / "none")]
    assert names == ["residuals.png", "sky.png", "correlation.png"]
    assert not (tmp_path / "none" / "noise_budget.png").exists()


# ---------------------------------------------------------------- residual colours

def test_residuals_coloured_by_observing_system():
    """Two systems: each point and its error bar take its system's colour; one legend a page names the systems."""
    dataset = _dataset(bands=(1400.0, 820.0), systems=SYSTEMS, injected=("white", "red", "dispersion"))
    fig = residuals_figure(dataset)
    legends = [legend for legend in fig.legends if legend.get_gid() == "systems"]
    assert len(legends) == 1
    (legend,) = legends
    assert [t.get_text() for t in legend.get_texts()] == list(SYSTEMS)
    legend_colours = {t.get_text(): mcolors.to_rgba(h.get_color())
                      for t, h in zip(legend.get_texts(), legend.legend_handles)}
    assert legend_colours[SYSTEMS[0]] != legend_colours[SYSTEMS[1]]
    for ax, p in zip(fig.axes, dataset.pulsars):
        points, bars = _point_and_bar_colours(ax)
        expected = np.array([legend_colours[s] for s in p.system])
        np.testing.assert_allclose(points[:, :3], expected[:, :3])
        np.testing.assert_allclose(bars[:, :3], points[:, :3])  # error bars in the colour of their points
    assert not any(ax.get_gid() == "frequency colour bar" for ax in fig.axes)
    # the chromatic component differs between the two bands of an epoch: ticks, not a zig-zag line
    (dispersion,) = [line for line in fig.axes[0].lines if line.get_gid() == "injected:dispersion"]
    (red,) = [line for line in fig.axes[0].lines if line.get_gid() == "injected:red"]
    assert dispersion.get_linestyle() == "None" and dispersion.get_marker() == "_"
    assert red.get_linestyle() == "-"


@pytest.mark.parametrize("bands, scale", [((400.0, 820.0, 1400.0), "log"), ((1300.0, 1400.0, 1500.0), "linear")])
def test_residuals_coloured_by_frequency(bands, scale):
    """No systems, several frequencies: a colour bar in MHz, logarithmic when they span more than a factor 3;
    each point (and its error bar) has the colour of its frequency on that scale."""
    dataset = _dataset(bands=bands)
    fig = residuals_figure(dataset)
    (bar,) = [ax for ax in fig.axes if ax.get_gid() == "frequency colour bar"]
    assert bar.get_xscale() == scale
    assert "MHz" in bar.get_xlabel()
    low, mid, high = bands
    position = np.log(mid / low) / np.log(high / low) if scale == "log" else (mid - low) / (high - low)
    expected = {low: FREQUENCY_COLOURS(0.0), mid: FREQUENCY_COLOURS(position), high: FREQUENCY_COLOURS(1.0)}
    assert not any(legend.get_gid() == "systems" for legend in fig.legends)
    for ax, p in zip([ax for ax in fig.axes if ax.get_gid() is None], dataset.pulsars):
        points, bars = _point_and_bar_colours(ax)
        want = np.array([expected[f] for f in p.frequency_mhz])
        np.testing.assert_allclose(points[:, :3], want[:, :3], atol=1e-6)
        np.testing.assert_allclose(bars[:, :3], points[:, :3])


@pytest.mark.parametrize("fields", ["none", "one system and one frequency"])
def test_residuals_plain_without_several_systems_or_frequencies(fields):
    """Without several systems or frequencies the residuals are drawn as before: one colour, no system legend,
    no colour bar."""
    if fields == "none":
        dataset = _dataset(count=2)
    else:
        dataset = _dataset(count=2, bands=(1400.0,), systems=("L-wide",))
    fig = residuals_figure(dataset)
    assert not any(c.get_gid() in ("points", "errorbars") for ax in fig.axes for c in ax.collections)
    assert not any(legend.get_gid() == "systems" for legend in fig.legends)
    assert not any(ax.get_gid() == "frequency colour bar" for ax in fig.axes)
    assert len(fig.axes) == 2
    for ax in fig.axes:
        (points,) = [line for line in ax.lines if line.get_marker() == "."]
        assert mcolors.to_rgba(points.get_color()) == mcolors.to_rgba(RESIDUAL_COLOUR)


# ---------------------------------------------------------------- noise budget

@pytest.mark.parametrize("per_epoch", [1, 2])
def test_psd_of_white_noise_has_the_expected_level(per_epoch):
    """White noise of variance sigma^2 at N unevenly spaced TOAs over T: the one-sided PSD averages
    2 sigma^2 T / N (E[P] = sigma^2 for the Lomb-Scargle psd normalisation, times 2 T / N).  Each estimate is
    exponentially distributed (two degrees of freedom), so the mean of K of them scatters by 1/sqrt(K)
    relative; allow 4 of those (a factor-2 error in the normalisation is 40 of them)."""
    rng = np.random.default_rng(20240611)
    epochs = 4000 // per_epoch
    span = 12.0 * 365.25 * 86400.0
    mjd = np.repeat(np.sort(START + rng.uniform(0.0, span / 86400.0, epochs)), per_epoch)
    sigma = 3e-7
    series = rng.normal(0.0, sigma, mjd.size)
    frequency, psd = one_sided_psd(mjd, series, span, START)
    count = epochs // 2
    np.testing.assert_allclose(frequency, np.arange(1, count + 1) / span)
    expected = 2.0 * sigma**2 * span / mjd.size
    assert abs(psd.mean() / expected - 1.0) < 4.0 / np.sqrt(count)
    # and exponentially distributed: the median is ln 2 of the mean
    assert abs(np.median(psd) / expected - np.log(2.0)) < 0.1


def test_psd_of_a_sinusoid_is_its_power_in_one_bin():
    """A sinusoid of amplitude A at k/T, evenly sampled, has one-sided PSD A^2 T / 2 at k/T (its power A^2/2
    over one bin of 1/T) and none at the other frequencies k'/T."""
    n, span, k, amplitude = 512, 10.0 * 365.25 * 86400.0, 7, 2e-6
    seconds = np.arange(n) * span / n
    series = amplitude * np.cos(2 * np.pi * k * seconds / span + 0.4)
    _, psd = one_sided_psd(START + seconds / 86400.0, series, span, START)
    assert psd[k - 1] == pytest.approx(amplitude**2 * span / 2.0, rel=1e-3)
    assert np.max(np.delete(psd, k - 1)) < 1e-3 * psd[k - 1]


def test_noise_budget_draws_each_injected_component():
    """One log-log line per non-zero component per pulsar, in the component colours, at k/T in nHz with the
    values of one_sided_psd; all-zero components are left out; the legend names the components."""
    dataset = _dataset(count=3, bands=(1400.0, 820.0), systems=SYSTEMS,
                       injected=("white", "red", "gwb", "binary", "dispersion"))
    fig = noise_budget_figure(dataset)
    panels = [ax for ax in fig.axes if ax.get_visible() and ax.axison]
    assert len(panels) == 3
    for ax, p in zip(panels, dataset.pulsars):
        assert ax.get_xscale() == "log" and ax.get_yscale() == "log"
        lines = {line.get_gid(): line for line in ax.lines}
        assert set(lines) == {"psd:white", "psd:red", "psd:gwb", "psd:dispersion"}
        for name in ("white", "red", "gwb", "dispersion"):
            line = lines[f"psd:{name}"]
            assert mcolors.to_rgba(line.get_color()) == mcolors.to_rgba(COMPONENT_COLOURS[name])
            frequency, psd = one_sided_psd(p.mjd, p.injected[name], dataset.span, dataset.start_mjd)
            np.testing.assert_allclose(line.get_xdata(), frequency * 1e9)
            np.testing.assert_allclose(line.get_ydata(), psd)
        assert any(t.get_text() == p.name for t in ax.texts)
    (legend,) = fig.legends
    assert [t.get_text() for t in legend.get_texts()] == ["white", "red", "gwb", "dispersion"]
    assert len({COMPONENT_COLOURS[n] for n in ("white", "red", "gwb", "binary", "dispersion", "scattering")}) == 6


def test_noise_budget_pages():
    """``first`` and ``count`` choose the pulsars of a page; the red component's spectrum falls with frequency."""
    dataset = _dataset(count=7)
    fig = noise_budget_figure(dataset, first=5, count=5)
    panels = [ax for ax in fig.axes if ax.axison]
    assert len(panels) == 2
    assert [t.get_text() for ax in panels for t in ax.texts] == ["J0005+05", "J0006+06"]
    (red,) = [line for line in panels[0].lines if line.get_gid() == "psd:red"]
    y = red.get_ydata()
    assert np.mean(y[:3]) > 100 * np.mean(y[-10:])  # a random walk: steep red spectrum


def test_injected_spectrum_is_what_the_estimate_averages_to():
    """200 realisations of one pulsar's red noise (evenly sampled, white noise negligible): at the frequencies
    k/T the mean of the Lomb-Scargle estimate equals the injected power law A^2 / (12 pi^2) f_yr^-3
    (f / f_yr)^-gamma written out here (PHYSICS.md), within 4 standard errors (each estimate is an
    exponential variable, so its standard deviation equals its mean: 1/sqrt(200) relative)."""
    from conftest import small_config

    from ptares.figures.dataset import injected_spectrum, one_sided_psd
    from ptares.simulation.simulate import simulate

    config = small_config(array={"random": {"count": 1}},
                          observing={"start": 53000.0, "span": 8.0, "cadence": 20.0, "toa_error": 0.001},
                          noise={"red": {"amplitude": 3e-14, "spectral_index": 3.0, "harmonics": 10}}, gwb=None)
    year = 365.25 * 86400.0
    ratios = []
    for seed in range(200):
        data = simulate(config, seed=seed)
        p = data.pulsars[0]
        frequency, psd = one_sided_psd(p.mjd, p.injected["red"], data.span, data.start_mjd)
        model_frequency, model = injected_spectrum(data, p, "red")
        written = 3e-14**2 / (12 * np.pi**2) * year**3 * (model_frequency * year) ** -3.0
        np.testing.assert_allclose(model, written, rtol=1e-12)
        np.testing.assert_allclose(frequency[:10], model_frequency, rtol=1e-12)
        ratios.append(psd[1:6] / model[1:6])  # k = 2..6
    mean = np.mean(ratios, axis=0)
    assert np.all(np.abs(mean - 1) < 4 / np.sqrt(200)), mean

"""Plane waves of any profile: closed forms against numerical integration, a circular binary given as a table
against the built-in continuous wave, the 45-degree polarisation rotation, the memory ramp, the interpolation
error as stated, bad tables, the memory-step fit and campaign axes over waves."""

import math

import numpy as np
import pytest
from conftest import small_config
from scipy.integrate import cumulative_trapezoid, quad

from ptares.cli import main
from ptares.errors import InputError
from ptares.inference.model import FitModel
from ptares.inference.samplers import run_sampler
from ptares.inference.samplers.chains import posterior_draws, summarise
from ptares.inputs.config import FitSection, parse_config
from ptares.physics.constants import C, KPC, YEAR
from ptares.physics.sky import antenna_patterns, unit_vector
from ptares.physics.waveforms import (
    MemoryStep,
    SineGaussian,
    TabulatedProfile,
    plane_wave_residuals,
    sample_profile,
)
from ptares.simulation.signals.continuous import Binary, PulsarLayout
from ptares.simulation.simulate import simulate

RNG = np.random.default_rng(2024)
POSITIONS = unit_vector(RNG.uniform(0, 2 * np.pi, 5), np.arcsin(RNG.uniform(-1, 1, 5)))
SPAN = 10 * YEAR
TIMES = [np.sort(RNG.uniform(0.0, SPAN, 120)) for _ in POSITIONS]


def _spline_bound(step: float, fourth_derivative: float, length: float) -> float:
    """The stated error of a tabulated profile's residual over an interval ``length``: the cubic spline's
    interpolation error (5/384) dt^4 max|h''''| (de Boor 2001, from memory), integrated over the interval,
    for each of the Earth and pulsar terms."""
    return 2.0 * (5.0 / 384.0) * step**4 * fourth_derivative * length


# ---------------------------------------------------------------- closed forms against numerical integration

@pytest.mark.parametrize("cross_fraction, phase", [(0.0, 0.0), (0.6, 1.1), (-1.0, -2.0)])
def test_sine_gaussian_antiderivative_matches_numerical_integration(cross_fraction, phase):
    """The Faddeeva closed form of the sine-Gaussian's integral equals scipy's adaptive quadrature of its strain
    from well before the burst, on both sides of the centre and for several cycles per width."""
    burst = SineGaussian(amplitude=1e-14, epoch=2e8, width=4e6, frequency=4e-7, phase=phase, cross_fraction=cross_fraction)
    start = burst.epoch - 12 * burst.width  # the envelope is e^-72 there
    for t in burst.epoch + burst.width * np.array([-3.0, -1.0, -0.2, 0.0, 0.7, 2.5, 12.0]):
        plus, cross = burst.integral(np.array([t, start]))
        for k, closed in enumerate((plus[0] - plus[1], cross[0] - cross[1])):
            numeric, error = quad(lambda x: burst.strain(x)[k], start, t, limit=400, epsabs=1e-9 * burst.amplitude * burst.width)
            assert closed == pytest.approx(numeric, abs=max(1e-6 * burst.amplitude * burst.width, 10 * error))


def test_memory_with_rise_time_matches_integration_and_tends_to_the_ramp():
    """The tanh step's closed-form integral equals the trapezoid integral of its strain; as the rise time goes
    to zero it tends to the ramp A (t - t0) Theta(t - t0) (Favata 2009; van Haasteren & Levin 2010), no
    further from it than A tau ln 2 / 2 (the largest gap, at t = t0)."""
    t = np.linspace(0.0, 3e8, 300_001)
    for rise in (3e6, 3e5):
        step = MemoryStep(2e-14, 1e8, rise)
        plus, cross = step.integral(t)
        numeric = cumulative_trapezoid(step.strain(t)[0], t, initial=0.0)
        np.testing.assert_allclose(plus - plus[0], numeric, atol=1e-6 * step.amplitude * 1e8)
        assert not cross.any()
        ramp = step.amplitude * np.maximum(t - step.epoch, 0.0)
        gap = np.abs(plus - ramp)
        assert gap.max() <= step.amplitude * rise * math.log(2) / 2 * (1 + 1e-9)
        assert gap.max() >= 0.99 * step.amplitude * rise * math.log(2) / 2


def test_memory_ramp_has_the_published_sky_pattern():
    """Earth term of a sharp memory step: r(t) = B h (t - t0) Theta(t - t0) with B = (1/2)(1 + cos theta) cos 2 phi,
    theta the angle from the source to the pulsar and phi the pulsar's azimuth about the source measured from
    the polarisation axis m (van Haasteren & Levin 2010, written in our sign convention; form from memory),
    built here from explicit angles for a source at the north celestial pole."""
    theta, azimuth = np.radians([20.0, 70.0, 110.0, 160.0]), np.radians([10.0, 200.0, 95.0, 300.0])
    pulsars = np.column_stack([np.sin(theta) * np.cos(azimuth), np.sin(theta) * np.sin(azimuth), np.cos(theta)])
    times = [np.linspace(0.0, 2e8, 50)] * len(pulsars)
    step = MemoryStep(1e-14, 7e7)
    residuals = plane_wave_residuals(step, times, pulsars, np.full(4, KPC), ra=0.0, dec=np.pi / 2, polarization=0.3,
                                     pulsar_term=False)
    phi = azimuth - (-np.pi / 2 - 0.3)  # m of a source at the pole, ra = 0: azimuth -90 degrees, turned by psi towards n (180)
    pattern = 0.5 * (1 + np.cos(theta)) * np.cos(2 * phi)
    for r, b, t in zip(residuals, pattern, times):
        np.testing.assert_allclose(r, b * step.amplitude * np.maximum(t - step.epoch, 0.0), rtol=1e-12, atol=1e-25)


def test_pulsar_term_matches_direct_integration_of_the_redshift():
    """The residuals with the pulsar term equal scipy's quadrature of the redshift
    z = F+ [h+(t) - h+(t - D)] + Fx [hx(t) - hx(t - D)] of PHYSICS.md, for pulsars close enough (D of a few
    years) that the burst passes them within the span."""
    burst = SineGaussian(amplitude=3e-14, epoch=1.2e8, width=1e7, frequency=6e-8, phase=0.4, cross_fraction=0.5)
    ra, dec, psi = 1.0, 0.3, 0.7
    distances = np.array([2.0, 3.0, 5.0]) * YEAR * C  # D = L (1 - s.p) / c: a few years
    pulsars = POSITIONS[:3]
    times = [np.linspace(0.0, SPAN, 9)] * 3
    residuals = plane_wave_residuals(burst, times, pulsars, distances, ra, dec, psi, pulsar_term=True)
    fplus, fcross = antenna_patterns(pulsars, ra, dec, psi)
    delays = distances / C * (1 - pulsars @ unit_vector(ra, dec))
    for a in range(3):
        def redshift(t):
            now, then = burst.strain(t), burst.strain(t - delays[a])
            return fplus[a] * (now[0] - then[0]) + fcross[a] * (now[1] - then[1])

        edges = np.concatenate([[0.0], times[a][1:]])
        direct = np.cumsum([0.0] + [quad(redshift, lo, hi, limit=400, epsabs=1e-25)[0] for lo, hi in zip(edges, edges[1:])])
        np.testing.assert_allclose(residuals[a], direct, rtol=0, atol=1e-7 * np.abs(direct).max())


# ---------------------------------------------------------------- tabulated profiles

@pytest.mark.parametrize("pulsar_term", [False, True])
def test_a_circular_binary_given_as_a_table_reproduces_the_continuous_wave(pulsar_term):
    """h+ = h0 (1 + cos^2 i)/2 cos 2 Phi, hx = h0 cos i sin 2 Phi sampled 40 times a cycle and integrated through
    the table give the built-in continuous-wave residuals (fixed frequency) up to a constant per pulsar, within
    the stated interpolation error."""
    h0, f, inclination, psi, phase, ra, dec = 4e-15, 2e-8, 0.7, 0.4, 1.3, 2.0, -0.5
    binary = Binary("tabled", ra, dec, f, h0, inclination, psi, phase, pulsar_term=pulsar_term)
    distances = np.full(len(POSITIONS), 0.1)  # kpc: pulsar terms some 300 years back
    builtin = PulsarLayout.of(POSITIONS, distances, TIMES).residuals([binary])
    step = 1.0 / (40 * f)
    back = 2 * distances.max() * KPC / C + 10 * step if pulsar_term else 10 * step
    grid = np.arange(-back, SPAN + 10 * step, step)
    angle = 2 * phase + 2 * np.pi * f * grid
    table = TabulatedProfile(grid, h0 * (1 + np.cos(inclination) ** 2) / 2 * np.cos(angle),
                             h0 * np.cos(inclination) * np.sin(angle))
    ours = plane_wave_residuals(table, TIMES, POSITIONS, distances * KPC, ra, dec, psi, pulsar_term)
    bound = _spline_bound(step, h0 * (2 * np.pi * f) ** 4 * 2, SPAN)  # |F| <= 1 for each polarisation's term
    for a, b in zip(ours, builtin):
        difference = a - b
        assert np.ptp(difference) / 2 <= bound
        assert np.ptp(difference) / 2 < 1e-4 * np.abs(b).max()


def test_rotating_the_polarisation_by_45_degrees_turns_plus_into_cross():
    """A plus-only wave at psi + pi/4 leaves the residuals of the same profile as a cross-only wave at psi
    (e+ rotated by 45 degrees is ex: PHYSICS.md, fact of the trade)."""
    grid = np.linspace(-1e7, SPAN + 1e7, 4000)
    shape = 1e-14 * np.exp(-(((grid - 1.5e8) / 2e7) ** 2)) * np.sin(grid / 3e6)
    plus_only, cross_only = TabulatedProfile(grid, shape, 0 * shape), TabulatedProfile(grid, 0 * shape, shape)
    for psi in (0.0, 0.9):
        rotated = plane_wave_residuals(plus_only, TIMES, POSITIONS, np.full(5, KPC), 1.0, 0.2, psi + np.pi / 4, False)
        crossed = plane_wave_residuals(cross_only, TIMES, POSITIONS, np.full(5, KPC), 1.0, 0.2, psi, False)
        for a, b in zip(rotated, crossed):
            np.testing.assert_allclose(a, b, rtol=1e-10, atol=1e-12 * np.abs(b).max())
        assert max(np.abs(r).max() for r in rotated) > 0


@pytest.mark.parametrize("per_cycle", [12, 24, 48])
def test_interpolation_error_is_within_the_stated_bound_and_estimated(per_cycle):
    """A sinusoid sampled ``per_cycle`` times a cycle: the residual's error against the closed form
    (h0 / 2 pi f)(1 - cos 2 pi f t) lies within the stated bound (5/384) dt^4 max|h''''| t, and the table's own
    estimate (a fifteenth of the change when every other sample is dropped) is within a factor three of it."""
    h0, f = 1e-14, 3e-8
    step = 1.0 / (per_cycle * f)
    grid = np.arange(-4 * step, SPAN + 4 * step, step)
    table = TabulatedProfile(grid, h0 * np.sin(2 * np.pi * f * grid), 0 * grid)
    pulsar, times = POSITIONS[:1], [np.linspace(0.0, SPAN, 2000)]
    fplus = antenna_patterns(pulsar, 0.5, 0.5, 0.0)[0][0]

    def residuals(profile):
        return plane_wave_residuals(profile, times, pulsar, [KPC], 0.5, 0.5, 0.0, pulsar_term=False)

    exact = fplus * h0 / (2 * np.pi * f) * (1 - np.cos(2 * np.pi * f * times[0]))
    actual = np.abs(residuals(table)[0] - exact).max()
    assert actual <= _spline_bound(step, h0 * (2 * np.pi * f) ** 4, SPAN) * abs(fplus) / 2
    estimate = table.error_estimate(residuals)
    assert actual / 3 <= estimate <= 3 * actual


def test_numerical_route_reproduces_the_closed_forms():
    """Sampling a burst and a memory step and integrating the table (the route a user's waveform takes) gives
    the closed-form residuals to within 1e-4 of their range."""
    distances = np.full(5, 0.5 * KPC)
    for profile in (SineGaussian(2e-14, 1.4e8, 1.5e7, 5e-8, 0.3, 0.4), MemoryStep(3e-14, 1.9e8, 2e6)):
        table = sample_profile(profile, -1e8, SPAN + 1e8, 2e5, hold=True)
        for pulsar_term in (False, True):
            closed = plane_wave_residuals(profile, TIMES, POSITIONS, distances, 2.5, 0.1, 0.6, pulsar_term)
            tabled = plane_wave_residuals(table, TIMES, POSITIONS, distances, 2.5, 0.1, 0.6, pulsar_term)
            for a, b in zip(tabled, closed):
                np.testing.assert_allclose(a, b, rtol=0, atol=1e-4 * np.ptp(b))


# ---------------------------------------------------------------- configs, tables and faults

WAVE_TOML = """\
[run]
name = "waves"
seed = 3
[array]
random = {{ count = 4, distance = "1 kpc" }}
[observing]
start = 53000
span = "6 yr"
cadence = "30 d"
toa_error = "100 ns"
[[wave]]
name = "Table"
shape = "table"
file = "profile.csv"
ra = 40
dec = 10
pulsar_term = false
{extra}
"""


def _profile_rows(start=52900.0, stop=55300.0, count=400):
    mjd = np.linspace(start, stop, count)
    plus = 1e-14 * np.exp(-(((mjd - 54000) / 60) ** 2))
    return ["mjd,plus,cross"] + [f"{float(m)!r},{float(p)!r},0.0" for m, p in zip(mjd, plus)]


def test_a_table_wave_is_simulated_and_recorded(tmp_path):
    """A tabulated burst lands in the dataset under injected/wave with its table row, its interpolation
    error estimate (small against the residuals) and the file it came from."""
    (tmp_path / "profile.csv").write_text("\n".join(_profile_rows()) + "\n")
    config = tmp_path / "wave.toml"
    config.write_text(WAVE_TOML.format(extra=""))
    out = tmp_path / "out"
    assert main(["simulate", str(config), "--out", str(out), "--no-figures"]) == 0
    from ptares.dataset import load_dataset

    data = load_dataset(out / "dataset.h5")
    (row,) = data.signals["wave"]["sources"]
    assert row["shape"] == b"table" and row["file"] == b"profile.csv"
    largest = max(np.abs(p.injected["wave"]).max() for p in data.pulsars)
    assert 0 < row["interpolation_error"] < 1e-3 * largest


@pytest.mark.parametrize("rows, words", [
    (lambda r: [r[0]] + r[1:][::-1], "row 3, column mjd"),  # unsorted
    (lambda r: r[:5] + ["53010.5,nan,0.0"] + r[6:], "row 6, column plus: 'nan' is not finite"),
    (lambda r: ["mjd,plus_s,cross"] + r[1:], "column plus_s: strain is dimensionless"),
    (lambda r: ["time_m,plus,cross"] + r[1:], "column time_m: unit 'm' is not a time unit"),
    (lambda r: r[:5], "a wave profile needs at least 8"),
    (lambda r: _profile_rows(53500.0, 55300.0), "profile.csv covers MJD 53500 to 55300, but the TOAs need MJD 53000"),
])
def test_bad_wave_tables_are_one_line(tmp_path, capsys, rows, words):
    (tmp_path / "profile.csv").write_text("\n".join(rows(_profile_rows())) + "\n")
    config = tmp_path / "wave.toml"
    config.write_text(WAVE_TOML.format(extra=""))
    out = tmp_path / "out"
    assert main(["simulate", str(config), "--out", str(out), "--no-figures"]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and words in err and "profile.csv" in err and "Traceback" not in err
    assert not out.exists() or not list(out.iterdir())


@pytest.mark.parametrize("extra, words", [
    ("width = 3", "wave[0] (Table): 'width' is not used by a table wave"),
    ('rise_time = "3 d"', "wave[0] (Table): 'rise_time' is not used by a table wave"),
    ('epoch = 53100\nstrain_scale = -1', "wave[0] (Table).strain_scale: must be positive"),
])
def test_bad_wave_keys_are_one_line(tmp_path, capsys, extra, words):
    (tmp_path / "profile.csv").write_text("\n".join(_profile_rows()) + "\n")
    config = tmp_path / "wave.toml"
    config.write_text(WAVE_TOML.format(extra=extra))
    assert main(["check", str(config)]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "Traceback" not in err
    assert words in err


def test_memory_needs_its_keys():
    with pytest.raises(InputError, match=r"wave\[0\]: a memory wave needs 'amplitude'"):
        parse_config('[array]\nrandom = {count = 3}\n[[wave]]\nshape = "memory"\nepoch = 54000\nra = 1.0\ndec = 2.0')


# ---------------------------------------------------------------- the memory-step fit and campaigns

def _memory_data(seed=5):
    config = small_config(
        array={"random": {"count": 6}},
        observing={"start": 53000.0, "span": 6.0, "cadence": 20.0, "toa_error": 0.1},
        gwb=None,
        wave=[{"name": "Step", "shape": "memory", "epoch": 54200.0, "amplitude": 4e-14, "ra": 150.0, "dec": -20.0,
               "polarization": 0.5, "pulsar_term": False}],
    )
    return simulate(config, seed=seed)


def test_memory_model_reproduces_the_injection():
    """At its injected values the fit's memory signal is the injected wave (Earth term, sharp step)."""
    data = _memory_data()
    model = FitModel(data, FitSection(common="none", red="none", memory=True))
    for p, s in zip(data.pulsars, model._signal(model.values)):
        np.testing.assert_allclose(s, p.injected["wave"], rtol=0, atol=1e-9 * np.abs(p.injected["wave"]).max())
    assert model.names == ["memory_lg_strain", "memory_epoch"]  # the default; direction and polarisation held
    every = FitModel(data, FitSection(common="none", red="none", memory=True,
                                      memory_free=("lg_strain", "epoch", "polarization_angle", "right_ascension",
                                                   "declination_sine")))
    assert every.names[2:] == ["memory_polarization_angle", "memory_right_ascension", "memory_declination_sine"]


def test_memory_fit_recovers_strain_and_epoch(tmp_path):
    """A loud memory step: the fit with strain and epoch free (walkers started near the most probable point; 800
    steps, some 25 autocorrelation times) has over 200 effective draws of each, puts both injected values inside
    their central 99% intervals, and pins the epoch to a small part of the 6-year window (posterior standard
    deviation under 60 days).  (Run to the convergence rule it converges after about 1500 steps.)"""
    data = _memory_data()
    section = FitSection(common="none", red="none", memory=True, memory_free=("lg_strain", "epoch"), max_steps=800,
                         seed=3, start="map")
    model = FitModel(data, section)
    run = run_sampler(model, tmp_path / "c.h5")
    summary = summarise(model, run)
    assert all(summary["parameters"][name]["effective_samples"] > 200 for name in model.names)
    draws = posterior_draws(run.chain, summary["burn"], summary["thin"])
    for i, name in enumerate(model.names):
        low, high = np.percentile(draws[:, i], [0.5, 99.5])
        assert low <= model.injected[name] <= high, (name, low, high, model.injected[name])
    assert np.std(draws[:, model.names.index("memory_epoch")]) < 60.0
    with pytest.raises(InputError, match="Gibbs sampler has no step for a continuous wave or a memory step"):
        run_sampler(FitModel(data, section.model_copy(update={"sampler": "gibbs"})), tmp_path / "g.h5")


def test_campaign_axes_reach_into_waves():
    """``wave.0.amplitude`` sets the first [[wave]]'s amplitude in each task; a number past the end is refused."""
    from ptares.campaign.tasks import expand
    from ptares.inputs.config import SweepSection

    base = {"array": {"random": {"count": 3}}, "observing": {"span": 5.0},
            "wave": [{"shape": "memory", "epoch": 54000.0, "amplitude": 1e-14, "ra": 1.0, "dec": 2.0}]}
    tasks = expand(base, SweepSection(axes={"wave.0.amplitude": [1e-14, 5e-14], "wave.0.epoch": [53500.0]}, realisations=1))
    assert [t.raw["wave"][0]["amplitude"] for t in tasks] == [1e-14, 5e-14]
    assert all(t.raw["wave"][0]["epoch"] == 53500.0 for t in tasks)
    assert base["wave"][0]["amplitude"] == 1e-14  # the base is not changed
    with pytest.raises(InputError, match=r"sweep.axes.wave.1.amplitude: '1' is not an entry of the 1 tables"):
        expand(base, SweepSection(axes={"wave.1.amplitude": [1e-14]}))
    with pytest.raises(InputError, match="sweep.axes.wave.0.amplitude: value -1.0"):
        expand(base, SweepSection(axes={"wave.0.amplitude": [-1.0]}))


def test_relative_times_equal_mjds_and_a_coarse_table_is_warned_of(tmp_path):
    """The same profile given as durations from ``epoch`` (time_d) or as MJDs gives the same residuals; a table
    sampled about four times a cycle gets a warning naming its interpolation error."""
    from ptares.errors import PhysicsWarning
    from ptares.inputs.config import load_config

    rows = _profile_rows()
    (tmp_path / "profile.csv").write_text("\n".join(rows) + "\n")
    relative = ["time_d,plus,cross"] + [f"{float(r.split(',')[0]) - 52900.0!r},{r.split(',', 1)[1]}" for r in rows[1:]]
    (tmp_path / "days.csv").write_text("\n".join(relative) + "\n")
    (tmp_path / "a.toml").write_text(WAVE_TOML.format(extra=""))
    (tmp_path / "b.toml").write_text(WAVE_TOML.format(extra="epoch = 52900").replace("profile.csv", "days.csv"))
    first, second = (simulate(load_config(tmp_path / name)) for name in ("a.toml", "b.toml"))
    for p, q in zip(first.pulsars, second.pulsars):
        np.testing.assert_allclose(p.injected["wave"], q.injected["wave"], rtol=1e-12, atol=1e-20)

    mjd = np.arange(52900.0, 55300.0, 25.0)  # a 100-day period sampled every 25 days
    coarse = ["mjd,plus,cross"] + [f"{float(m)!r},{float(1e-14 * np.sin(2 * np.pi * m / 100.0))!r},0.0" for m in mjd]
    (tmp_path / "profile.csv").write_text("\n".join(coarse) + "\n")
    with pytest.warns(PhysicsWarning, match=r"wave\[0\] \(Table\).file: interpolating the table leaves errors up to"):
        simulate(load_config(tmp_path / "a.toml"))


def test_the_error_estimate_is_conservative_for_kinked_profiles():
    """A sharp memory step (a kink in the residual, where the spline converges only as dt or dt^2) and a smooth
    burst, each sampled at several spacings: the estimate is never below the error against the closed form, and
    at most five times it."""
    pulsar, times = POSITIONS[:1], [np.linspace(0.0, 3e8, 3000)]

    def residuals(profile):
        return plane_wave_residuals(profile, times, pulsar, [KPC], 0.5, 0.5, 0.0, pulsar_term=False)

    for profile in (MemoryStep(1e-14, 1.234e8), MemoryStep(1e-14, 1.234e8, 3e6), SineGaussian(1e-14, 1.5e8, 2e7, 3e-8)):
        for step in (4e6, 1e6):
            table = sample_profile(profile, -1e7, 3.1e8, step, hold=True)
            actual = np.abs(residuals(table)[0] - residuals(profile)[0]).max()
            assert actual <= table.error_estimate(residuals) <= 5 * actual


def test_a_source_on_a_pulsar_gives_no_warning_and_no_residual():
    """A wave from exactly a pulsar's direction: that pulsar's Earth and pulsar terms cancel, it gets zero (no
    0/0 warning), the others are untouched."""
    import warnings

    ra, dec = np.arctan2(POSITIONS[0, 1], POSITIONS[0, 0]), np.arcsin(POSITIONS[0, 2])
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        residuals = plane_wave_residuals(MemoryStep(1e-14, 1e8), TIMES, POSITIONS, np.full(5, KPC), ra, dec, 0.3)
    assert not residuals[0].any() and all(r.any() for r in residuals[1:])


def test_a_step_after_the_last_toa_is_warned_of():
    from ptares.errors import PhysicsWarning

    config = small_config(gwb=None, wave=[{"shape": "memory", "epoch": 60000.0, "amplitude": 1e-14, "ra": 1.0,
                                           "dec": 2.0, "pulsar_term": False}])
    with pytest.warns(PhysicsWarning, match=r"wave\[0\] \(wave1\).epoch: the memory at MJD 60000 lies after the last TOA"):
        data = simulate(config)
    assert not any(p.injected["wave"].any() for p in data.pulsars)


@pytest.mark.parametrize("extra, rows, words", [
    ("strain_scale = 1e6", None, "wave[0] (Table).strain_scale: scales the table's largest strain to 1e-08"),
    ("epoch = 53000", None, "wave[0] (Table).epoch: the table's times are MJDs (column mjd): drop 'epoch'"),
    ("", lambda r: ["time_d,plus,cross"] + r[1:], "wave[0] (Table).epoch: the table's times are durations"),
])
def test_table_keys_that_do_not_fit_the_table_are_one_line(tmp_path, capsys, extra, rows, words):
    table = _profile_rows()
    (tmp_path / "profile.csv").write_text("\n".join(rows(table) if rows else table) + "\n")
    config = tmp_path / "wave.toml"
    config.write_text(WAVE_TOML.format(extra=extra))
    assert main(["simulate", str(config), "--out", str(tmp_path / "out"), "--no-figures"]) == 2
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and words in err, err


def test_a_campaign_finds_its_wave_table_from_any_folder(tmp_path, monkeypatch):
    """Task configs read their files relative to the sweep file, wherever the campaign is started; an axis
    into an array of tables that the base config lacks is refused."""
    from ptares.campaign.sweep import run_sweep
    from ptares.campaign.tasks import expand
    from ptares.inputs.config import SweepSection

    folder = tmp_path / "campaign"
    folder.mkdir()
    (folder / "profile.csv").write_text("\n".join(_profile_rows()) + "\n")
    sweep = WAVE_TOML.format(extra="") + """
[correlate]
scrambles = 0
phase_shifts = 0
fit_trials = 0
[sweep]
realisations = 1
[sweep.axes]
"wave.0.strain_scale" = [1.0, 2.0]
"""
    (folder / "sweep.toml").write_text(sweep)
    elsewhere = tmp_path / "elsewhere"
    elsewhere.mkdir()
    monkeypatch.chdir(elsewhere)
    rows = run_sweep(folder / "sweep.toml", tmp_path / "out", workers=1, progress=False)
    assert [r["status"] for r in rows] == ["ok", "ok"], [r.get("error") for r in rows]
    with pytest.raises(InputError, match="sweep.axes.wave.0.amplitude: '0' picks an entry of an array of tables"):
        expand({"array": {"random": {"count": 3}}}, SweepSection(axes={"wave.0.amplitude": [1e-14]}))


def test_memory_evidence_and_limit_are_reported(tmp_path):
    """posterior.json of a memory fit carries the strain's 95% upper limit and the Savage–Dickey ln B, and a
    campaign row their columns: for a loud step, the evidence is overwhelming (only a bound) and the limit lies
    above the injected strain; a step of negligible strain gives a finite ln B."""
    from ptares.campaign.tasks import _summary_of_fit

    data = _memory_data()
    section = FitSection(common="none", red="none", memory=True, memory_free=("lg_strain",), max_steps=400,
                         seed=3, start="map")
    model = FitModel(data, section)
    run = run_sampler(model, tmp_path / "c.h5")
    summary = summarise(model, run)
    step = summary["memory_step"]
    assert step["upper_limit"]["value"] > model.injected["memory_lg_strain"]
    assert step["savage_dickey"]["ln_bayes_factor"] is None and step["savage_dickey"]["ln_bayes_factor_lower_bound"] > 0
    row = _summary_of_fit(model, run, summary)
    assert row["memory_lg_strain.upper95"] == step["upper_limit"]["value"] and row["memory_ln_savage_dickey"] is None
    config = small_config(
        array={"random": {"count": 6}},
        observing={"start": 53000.0, "span": 6.0, "cadence": 20.0, "toa_error": 0.1},
        gwb=None,
        wave=[{"name": "Step", "shape": "memory", "epoch": 54200.0, "amplitude": 1e-18, "ra": 150.0, "dec": -20.0,
               "pulsar_term": False}],
    )
    quiet = FitModel(simulate(config, seed=5), section)
    evidence = summarise(quiet, run_sampler(quiet, tmp_path / "q.h5"))["memory_step"]["savage_dickey"]
    assert evidence["ln_bayes_factor"] is not None and evidence["ln_bayes_factor"] < 2.0

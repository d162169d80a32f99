"""Continuous-wave residuals: against numerical integration of the redshift, the kernel's numpy twin,
and the config's checks."""

import warnings

import numpy as np
import pytest
from conftest import small_config
from scipy.integrate import solve_ivp

from ptares.errors import InputError, PhysicsWarning
from ptares.inputs.config import parse_config
from ptares.physics.binaries import chirp_time
from ptares.physics.constants import KPC, M_SUN, YEAR, C
from ptares.physics.sky import polarisation_tensors, unit_vector
from ptares.simulation.kernels import wave_residuals, wave_residuals_reference
from ptares.simulation.simulate import simulate


def cw_config(pulsar, source, span=10.0, cadence=10.0):
    return small_config(
        array={"pulsars": [pulsar]},
        observing={"start": 53000, "span": span, "cadence": cadence, "toa_error": 0.001},
        gwb=None,
        binary=[source],
    )


def integrated_residuals(source, pulsar, times):
    """r(t) = integral_0^t z dt' with z = (1/2) p^i p^j [h_ij(t) - h_ij(t_p)] / (1 + Omega . p)
    (Detweiler 1979; PHYSICS.md), h_ij = e+ h+ + ex hx, h+ = h0 (1 + cos^2 i)/2 cos 2 Phi,
    hx = h0 cos i sin 2 Phi, h0 proportional to f^(2/3).  Frequency and phase come from
    integrating the Peters equations with scipy (solve_ivp), the residual from a second solve_ivp."""
    mass = source.get("chirp_mass", 0.0) * M_SUN
    f0 = source["frequency"] * 1e-9
    ra, dec = np.radians(source["ra"]), np.radians(source["dec"])
    iota, psi, phi0 = source["inclination"], source["polarization"], source["phase"]
    p = unit_vector(np.radians(pulsar["ra"]), np.radians(pulsar["dec"]))
    s = unit_vector(ra, dec)
    delay = pulsar["distance"] * KPC / C * (1 - s @ p)
    m = chirp_time(mass)

    def rhs(t, y):
        rate = 96 / 5 * np.pi ** (8 / 3) * m ** (5 / 3) * y[0] ** (11 / 3) if source.get("frequency_evolution", True) else 0.0
        return [rate, np.pi * y[0]]

    span = times[-1]
    back = solve_ivp(rhs, (0, -delay - 1.0), [f0, phi0], method="DOP853", rtol=1e-13, atol=[1e-30, 1e-10], dense_output=True)
    ahead = solve_ivp(rhs, (0, span + 1.0), [f0, phi0], method="DOP853", rtol=1e-13, atol=[1e-30, 1e-10], dense_output=True)

    def state(t):
        return ahead.sol(t) if t >= 0 else back.sol(t)

    h0 = source["strain"]
    plus, cross = polarisation_tensors(ra, dec, psi)
    f_plus = 0.5 * p @ plus @ p / (1 - s @ p)
    f_cross = 0.5 * p @ cross @ p / (1 - s @ p)

    def strain(t):
        f, phi = state(t)
        amplitude = h0 * (f / f0) ** (2 / 3)
        return amplitude * (1 + np.cos(iota) ** 2) / 2 * np.cos(2 * phi), amplitude * np.cos(iota) * np.sin(2 * phi)

    def z(t, _):
        hp_e, hx_e = strain(t)
        hp_p, hx_p = strain(t - delay) if source.get("pulsar_term", True) else (0.0, 0.0)
        return [f_plus * (hp_e - hp_p) + f_cross * (hx_e - hx_p)]

    solution = solve_ivp(z, (0, span), [0.0], t_eval=times, method="DOP853", rtol=1e-11, atol=1e-22, max_step=5e5)
    return solution.y[0]


GEOMETRIES = [
    ({"name": "A", "ra": 40.0, "dec": 20.0, "distance": 0.5}, {"ra": 150.0, "dec": -30.0, "inclination": 0.7, "polarization": 0.4, "phase": 1.1}),
    ({"name": "B", "ra": 300.0, "dec": -60.0, "distance": 0.8}, {"ra": 290.0, "dec": -50.0, "inclination": 2.5, "polarization": 2.0, "phase": 4.0}),
    ({"name": "C", "ra": 100.0, "dec": 70.0, "distance": 0.3}, {"ra": 10.0, "dec": 5.0, "inclination": 1.6, "polarization": 0.1, "phase": 0.0}),
]


@pytest.mark.parametrize("pulsar, geometry", GEOMETRIES)
@pytest.mark.parametrize("pulsar_term", [False, True])
@pytest.mark.parametrize("evolve", [False, True])
def test_residuals_match_integrated_redshift(pulsar, geometry, pulsar_term, evolve):
    """Tolerance: for a fixed frequency the antiderivative is exact (1e-6 covers the integrator); with
    evolution it neglects terms of relative size (4/3) (df/dt) / (2 pi f^2) ~ 2e-5 here, hence 1e-4."""
    source = {"name": "b", "chirp_mass": 1.5e9, "frequency": 20.0, "strain": 1e-14, "frequency_evolution": evolve, "pulsar_term": pulsar_term, **geometry}
    data = simulate(cw_config(pulsar, source))
    ours = data.pulsars[0].injected["binary"]
    times = (data.pulsars[0].mjd - data.start_mjd) * 86400.0
    reference = integrated_residuals(source, pulsar, times)
    scale = np.max(np.abs(reference))
    tolerance = 1e-4 if evolve else 1e-6
    np.testing.assert_allclose(ours - ours[0], reference, atol=tolerance * scale)


def test_gw_frequency_is_twice_the_orbital_frequency():
    """Fact of the trade: the wave completes a cycle in half an orbit."""
    pulsar, geometry = GEOMETRIES[0]
    common = {"chirp_mass": 1e9, "distance": 100.0, **geometry}
    by_gw = simulate(cw_config(pulsar, {**common, "frequency": 12.0})).pulsars[0].injected["binary"]
    by_orbit = simulate(cw_config(pulsar, {**common, "orbital_frequency": 6.0})).pulsars[0].injected["binary"]
    np.testing.assert_allclose(by_orbit, by_gw, rtol=1e-14, atol=0)


def test_evolving_equals_fixed_when_evolution_is_negligible():
    """A light binary (Mc = 1e6 M_sun, 5 nHz, merger ~1e13 yr away) barely evolves even over the pulsar delay:
    the phase difference at the pulsar term is about omega tau^2 / tau_c < 1e-7 rad."""
    pulsar, geometry = GEOMETRIES[1]
    common = {"chirp_mass": 1e6, "frequency": 5.0, "strain": 1e-14, **geometry}
    fixed = simulate(cw_config(pulsar, {**common, "frequency_evolution": False})).pulsars[0].injected["binary"]
    moving = simulate(cw_config(pulsar, {**common, "frequency_evolution": True})).pulsars[0].injected["binary"]
    np.testing.assert_allclose(moving, fixed, atol=1e-6 * np.max(np.abs(fixed)))


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_kernel_equals_numpy_twin(seed):
    """Relative agreement 1e-12 of the largest value, for fixed and evolving sources on both
    evaluation branches (series for slow evolution, closed form for fast)."""
    rng = np.random.default_rng(seed)
    sources, pulsars, per = 40, 4, 300
    span = 15 * YEAR
    times = np.concatenate([np.sort(rng.uniform(0, span, per)) for _ in range(pulsars)])
    times[:: per] = 0.0  # a TOA at the reference time in every pulsar (x = 0 on the closed-form branch)
    bounds = np.arange(pulsars + 1) * per
    frequency = rng.uniform(2e-9, 3e-7, sources)
    # rates: none, slow (series branch), fast (rate * span up to 0.9)
    rate = np.choose(rng.integers(0, 3, sources), [np.zeros(sources), rng.uniform(0, 0.04, sources) / span, rng.uniform(0.06, 0.9, sources) / span])
    earth = np.column_stack([rng.uniform(0, 2 * np.pi, sources), 2 * np.pi * frequency, rate, rng.uniform(1e-9, 1e-7, sources)])
    pulsar = np.stack(
        [np.column_stack([rng.uniform(0, 2 * np.pi, sources), earth[:, 1] * 0.97, rate * 0.9, earth[:, 3] * 1.01]) for _ in range(pulsars)],
        axis=1,
    )
    pulsar[::5, :, 3] = 0.0  # some sources without pulsar terms
    fplus, fcross = rng.normal(size=(2, sources, pulsars))
    weights = rng.normal(size=(sources, 2))
    fast = wave_residuals(times, bounds, earth, pulsar, fplus, fcross, weights)
    slow = wave_residuals_reference(times, bounds, earth, pulsar, fplus, fcross, weights)
    assert np.max(np.abs(fast - slow)) < 1e-12 * np.max(np.abs(slow))


def test_pulsar_behind_the_source_sees_nothing():
    """A pulsar exactly behind the source: Earth and pulsar terms cancel (1 + Omega . p = 0)."""
    pulsar = {"name": "A", "ra": 150.0, "dec": -30.0, "distance": 1.0}
    source = {"chirp_mass": 1e9, "distance": 50.0, "frequency": 10.0, "ra": 150.0, "dec": -30.0, "frequency_evolution": False}
    assert np.all(simulate(cw_config(pulsar, source)).pulsars[0].injected["binary"] == 0.0)


def test_sources_recorded_in_dataset():
    pulsar, geometry = GEOMETRIES[0]
    data = simulate(cw_config(pulsar, {"name": "Heron", "chirp_mass": 1e9, "distance": 100.0, "frequency": 10.0, **geometry}))
    table = data.signals["binary"]["sources"]
    assert table["name"][0] == b"Heron"
    assert table["strain"][0] == pytest.approx(2.76e-15, rel=0.01, abs=0)  # PHYSICS.md check value
    assert table["frequency"][0] == pytest.approx(1e-8, rel=1e-6, abs=0)


BASE = """
[array]
pulsars = [{name = "A", ra = 10, dec = 10}]
[observing]
span = "10 yr"
cadence = "14 d"
[[binary]]
name = "src"
chirp_mass = "1e9 Msun"
distance = "100 Mpc"
frequency = "10 nHz"
ra = 20
dec = 30
"""


@pytest.mark.parametrize(
    "old, new, where, words",
    [
        ('chirp_mass = "1e9 Msun"', 'chirp_mass = "-1e9 Msun"', "binary[0] (src).chirp_mass", "positive"),
        ('chirp_mass = "1e9 Msun"', "chirp_mass = 0", "binary[0] (src).chirp_mass", "positive"),
        ('distance = "100 Mpc"', 'distance = "0 Mpc"', "binary[0] (src).distance", "positive"),
        ('dec = 30', 'dec = 30\ninclination = 3.5', "binary[0] (src).inclination", "outside [0, pi]"),
        ('dec = 30', 'dec = 30\ninclination = "-10 deg"', "binary[0] (src).inclination", "outside [0, pi]"),
        ('frequency = "10 nHz"', 'frequency = "2 nHz"', "binary[0] (src).frequency", "no full cycle"),
        ('frequency = "10 nHz"', 'orbital_frequency = "1 nHz"', "binary[0] (src).orbital_frequency", "no full cycle"),
        ('frequency = "10 nHz"', 'frequency = "1 uHz"', "binary[0] (src).frequency", "Nyquist"),
        ('chirp_mass = "1e9 Msun"\ndistance = "100 Mpc"\nfrequency = "10 nHz"', 'chirp_mass = "1e10 Msun"\ndistance = "100 Mpc"\nfrequency = "100 nHz"', "binary[0] (src).chirp_mass", "merges"),
        ('distance = "100 Mpc"', "", "binary[0] (src)", "either 'distance' or 'strain'"),
        ('frequency = "10 nHz"', 'frequency = "10 nHz"\norbital_frequency = "5 nHz"', "binary[0] (src)", "either 'frequency'"),
        ('chirp_mass = "1e9 Msun"\ndistance = "100 Mpc"', "strain = 1e-14", "binary[0] (src)", "'chirp_mass' is needed"),
        ('name = "src"', 'name = "src"\nspin = 3', "binary[0] (src).spin", "unknown key"),
    ],
)
def test_bad_sources_name_the_field(old, new, where, words):
    assert old in BASE
    with pytest.raises(InputError) as caught:
        parse_config(BASE.replace(old, new, 1), where="c.toml")
    line = caught.value.line()
    assert line.startswith(f"c.toml: {where}"), line
    assert words in line


def test_strain_without_mass_is_fine_when_not_evolving():
    config = parse_config(BASE.replace('chirp_mass = "1e9 Msun"\ndistance = "100 Mpc"', "strain = 1e-14\nfrequency_evolution = false"))
    assert config.binary[0].strain == 1e-14


def test_close_to_merger_warns():
    """Valid but unusual: merging within ten spans of the first epoch."""
    with pytest.warns(PhysicsWarning, match="merges"):
        parse_config(BASE.replace('"1e9 Msun"', '"1e10 Msun"').replace('"10 nHz"', '"30 nHz"'))
    with warnings.catch_warnings():
        warnings.simplefilter("error")
        parse_config(BASE)


def test_vary_distances_draws_recorded_pulsar_distances():
    """With [array] vary_distances the pulsar term uses a distance drawn from N(distance, distance_error),
    recorded in the dataset; without it, the catalogue distance."""
    pulsar = {"name": "A", "ra": 40.0, "dec": 20.0, "distance": 1.0, "distance_error": 0.2}
    source = {"chirp_mass": 1e9, "distance": 50.0, "frequency": 10.0, "ra": 150.0, "dec": -30.0}
    fixed = simulate(cw_config(pulsar, source))
    raw = cw_config(pulsar, source).model_dump(exclude_none=True)
    raw["array"]["vary_distances"] = True
    from ptares.inputs.config import Config

    drawn = simulate(Config.model_validate(raw))
    again = simulate(Config.model_validate(raw))
    assert fixed.pulsars[0].noise["distance"] == 1.0
    assert drawn.pulsars[0].noise["distance"] != 1.0
    assert drawn.pulsars[0].noise["distance"] == again.pulsars[0].noise["distance"]
    assert not np.allclose(drawn.pulsars[0].injected["binary"], fixed.pulsars[0].injected["binary"])


def test_fast_evolving_binary_with_a_toa_at_the_reference_time():
    """A binary 150 yr from merger (closed-form branch of the kernel, rate * t up to 0.07) with the first
    TOA exactly at t = 0: finite, non-zero residuals matching the integrated redshift.  Tolerance from
    the neglected term of the slowly-evolving antiderivative, (4/3) (df/dt) / (2 pi f^2) = 1.7e-3 here."""
    pulsar = {"name": "A", "ra": 40.0, "dec": 20.0, "distance": 0.5}
    source = {"name": "b", "chirp_mass": 3e10, "frequency": 10.0, "strain": 1e-14, "ra": 150.0, "dec": -30.0,
              "inclination": 0.7, "polarization": 0.4, "phase": 1.1, "frequency_evolution": True, "pulsar_term": False}
    data = simulate(cw_config(pulsar, source))
    ours = data.pulsars[0].injected["binary"]
    assert np.all(np.isfinite(ours)) and np.any(ours != 0)
    times = (data.pulsars[0].mjd - data.start_mjd) * 86400.0
    assert times[0] == 0.0
    reference = integrated_residuals(source, pulsar, times)
    np.testing.assert_allclose(ours - ours[0], reference, atol=3 * 1.7e-3 * np.max(np.abs(reference)))


def test_implausible_strain_is_rejected():
    with pytest.raises(InputError, match="surely a typo"):
        parse_config(BASE.replace('distance = "100 Mpc"', 'distance = "1e-30 Mpc"'))

"""Binary physics against the published formulas (PHYSICS.md), astropy constants and scipy ODE integration."""

import numpy as np
import pytest
from astropy import constants as const
from astropy import units as u
from scipy.integrate import solve_ivp

from ptares.physics.binaries import (
    chirp_mass,
    chirp_time,
    distance_for_strain,
    frequency_at,
    frequency_derivative,
    orbital_phase,
    strain_amplitude,
    time_to_coalescence,
)
from ptares.physics.constants import M_SUN, YEAR

MC = 1e9 * M_SUN
MPC = (1 * u.Mpc).to_value(u.m)


def test_chirp_time_against_astropy():
    """PHYSICS.md: G M_sun / c^3 = 4.925e-6 s, with astropy.constants as the reference."""
    assert chirp_time(M_SUN) == pytest.approx((const.G * const.M_sun / const.c**3).to_value(u.s), rel=1e-12, abs=0)
    assert chirp_time(M_SUN) == pytest.approx(4.925e-6, rel=1e-3, abs=0)


def test_chirp_mass_of_equal_masses():
    """Mc = (m1 m2)^(3/5) / (m1 + m2)^(1/5): equal masses m give m / 2^(1/5)."""
    assert chirp_mass(3.0, 3.0) == pytest.approx(3.0 / 2 ** 0.2, rel=1e-6, abs=0)


def test_strain_amplitude_check_value():
    """PHYSICS.md check value: Mc = 1e9 M_sun, f = 10 nHz, d_L = 100 Mpc gives h0 = 2.76e-15;
    the formula evaluated with astropy quantities is the reference."""
    h0 = strain_amplitude(MC, 1e-8, 100 * MPC)
    reference = (2 * (const.G * 1e9 * const.M_sun) ** (5 / 3) * (np.pi * 1e-8 * u.Hz) ** (2 / 3) / (const.c**4 * 100 * u.Mpc))
    assert h0 == pytest.approx(reference.to_value(u.dimensionless_unscaled), rel=1e-10, abs=0)
    assert h0 == pytest.approx(2.76e-15, abs=0.005e-15)
    assert h0 / (2 * np.pi * 1e-8) == pytest.approx(4.4e-8, abs=0.05e-8)  # residual scale, PHYSICS.md
    assert distance_for_strain(MC, 1e-8, h0) == pytest.approx(100 * MPC, rel=1e-6, abs=0)


def test_time_to_coalescence_check_value():
    """PHYSICS.md: tau = (5/256) (G Mc/c^3)^(-5/3) (pi f)^(-8/3) = 4.4e4 yr for the check case."""
    tau = time_to_coalescence(MC, 1e-8)
    reference = 5 / 256 * ((const.G * 1e9 * const.M_sun / const.c**3).to(u.s)) ** (-5 / 3) * (np.pi * 1e-8 * u.Hz) ** (-8 / 3)
    assert tau == pytest.approx(reference.to_value(u.s), rel=1e-10, abs=0)
    assert tau / YEAR == pytest.approx(4.4e4, rel=0.01, abs=0)


def test_peters_evolution_against_ode_integration():
    """Peters 1964: integrate df/dt = (96/5) pi^(8/3) M^(5/3) f^(11/3) and dPhi/dt = pi f with
    scipy's solve_ivp, forwards and backwards, and compare with the closed forms."""
    mass, f0 = 2e9 * M_SUN, 2e-8
    m = chirp_time(mass)

    def rhs(t, y):
        f = y[0]
        return [96 / 5 * np.pi ** (8 / 3) * m ** (5 / 3) * f ** (11 / 3), np.pi * f]

    times = np.array([-2000.0, -300.0, -20.0, 5.0, 15.0]) * YEAR
    for t_end in times:
        solution = solve_ivp(rhs, (0.0, t_end), [f0, 0.3], method="DOP853", rtol=1e-12, atol=[1e-30, 1e-9])
        f_end, phase_end = solution.y[:, -1]
        assert frequency_at(mass, f0, t_end) == pytest.approx(f_end, rel=1e-9, abs=0)
        assert orbital_phase(mass, f0, t_end, 0.3) == pytest.approx(phase_end, abs=1e-6 * max(1.0, abs(phase_end)))
    assert frequency_derivative(mass, f0) == pytest.approx(rhs(0, [f0, 0])[0], rel=1e-6, abs=0)

"""Circular supermassive black-hole binaries: strain amplitude and orbital evolution.

Conventions (PHYSICS.md, "Continuous waves from a circular binary"):

* chirp mass ``Mc = (m1 m2)^(3/5) / (m1 + m2)^(1/5)``; GW frequency ``f = 2 f_orb``;
* strain amplitude ``h0 = 2 (G Mc)^(5/3) (pi f)^(2/3) / (c^4 d_L)``;
* radiation-reaction evolution (Peters 1964):
  ``df/dt = (96/5) pi^(8/3) (G Mc / c^3)^(5/3) f^(11/3)``,
  ``f(t) = f0 [1 - t / tau]^(-3/8)`` with the time to coalescence
  ``tau = (5/256) (G Mc / c^3)^(-5/3) (pi f0)^(-8/3)``;
* orbital phase ``Phi(t) = Phi0 + (1 / (32 M^(5/3))) (omega0^(-5/3) - omega(t)^(-5/3))``,
  ``omega = pi f`` the orbital angular frequency, ``M = G Mc / c^3`` in seconds
  (integral of ``omega`` over the evolution above).

Inputs are SI: masses in kg, distances in m, frequencies in Hz, times in s.
"""

from __future__ import annotations

import numpy as np

from ptares.physics.constants import C, G

__all__ = [
    "chirp_mass",
    "chirp_time",
    "strain_amplitude",
    "distance_for_strain",
    "time_to_coalescence",
    "frequency_at",
    "frequency_derivative",
    "orbital_phase",
]


def chirp_mass(m1, m2):
    """Chirp mass of component masses ``m1``, ``m2`` (any one unit)."""
    m1, m2 = np.asarray(m1, dtype=float), np.asarray(m2, dtype=float)
    return (m1 * m2) ** 0.6 / (m1 + m2) ** 0.2


def chirp_time(mass):
    """``G Mc / c^3`` in seconds for a chirp mass in kg."""
    return G * np.asarray(mass, dtype=float) / C**3


def strain_amplitude(mass, frequency, distance):
    """``h0`` for chirp mass (kg), GW frequency (Hz) and luminosity distance (m)."""
    return 2.0 * (G * np.asarray(mass, dtype=float)) ** (5.0 / 3.0) * (np.pi * np.asarray(frequency, dtype=float)) ** (
        2.0 / 3.0
    ) / (C**4 * np.asarray(distance, dtype=float))


def distance_for_strain(mass, frequency, h0):
    """Luminosity distance (m) at which a binary has strain amplitude ``h0``."""
    return strain_amplitude(mass, frequency, 1.0) / np.asarray(h0, dtype=float)


def time_to_coalescence(mass, frequency):
    """Time (s) until a binary of chirp mass ``mass`` (kg) at GW frequency ``frequency`` (Hz) merges."""
    m = chirp_time(mass)
    return (5.0 / 256.0) * m ** (-5.0 / 3.0) * (np.pi * np.asarray(frequency, dtype=float)) ** (-8.0 / 3.0)


def frequency_derivative(mass, frequency):
    """``df/dt`` (Hz/s) from radiation reaction."""
    m = chirp_time(mass)
    return (96.0 / 5.0) * np.pi ** (8.0 / 3.0) * m ** (5.0 / 3.0) * np.asarray(frequency, dtype=float) ** (11.0 / 3.0)


def frequency_at(mass, frequency, t):
    """GW frequency (Hz) at time ``t`` (s) after the moment it was ``frequency``; ``t`` may be negative."""
    tau = time_to_coalescence(mass, frequency)
    return np.asarray(frequency, dtype=float) * (1.0 - np.asarray(t, dtype=float) / tau) ** (-3.0 / 8.0)


def orbital_phase(mass, frequency, t, phase0=0.0):
    """Orbital phase (rad) at time ``t`` (s), given ``phase0`` when the GW frequency was ``frequency``."""
    m = chirp_time(mass)
    omega0 = np.pi * np.asarray(frequency, dtype=float)
    omega = np.pi * frequency_at(mass, frequency, t)
    return phase0 + (omega0 ** (-5.0 / 3.0) - omega ** (-5.0 / 3.0)) / (32.0 * m ** (5.0 / 3.0))

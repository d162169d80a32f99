"""Correlation patterns against numerical integration over the sphere and the values in PHYSICS.md."""

import numpy as np
import pytest
from scipy.optimize import brentq, minimize_scalar
from scipy.special import roots_legendre

import ptares
from ptares.physics.patterns import PATTERNS, correlation_matrix
from ptares.physics.sky import antenna_patterns, unit_vector


def sky_average_of_antenna_product(angle, nodes=300):
    """(3/2) <F+_a F+_b + Fx_a Fx_b> over isotropic source directions.

    Gauss–Legendre quadrature in cos(theta) (scipy.special.roots_legendre) and
    the trapezoid rule in phi, with pulsar a at the pole and pulsar b at
    ``angle`` from it.  This is the definition of the Hellings–Downs curve
    (Hellings & Downs 1983; PHYSICS.md), computed independently of the closed form.
    """
    cos_theta, weights = roots_legendre(nodes)
    phi = np.linspace(0.0, 2 * np.pi, 2 * nodes, endpoint=False)
    dec = np.arcsin(cos_theta)[:, None] * np.ones_like(phi)[None, :]
    ra = np.ones_like(cos_theta)[:, None] * phi[None, :]
    pa = np.array([0.0, 0.0, 1.0])
    pb = np.array([np.sin(angle), 0.0, np.cos(angle)])
    fpa, fxa = antenna_patterns(pa, ra, dec, 0.0)
    fpb, fxb = antenna_patterns(pb, ra, dec, 0.0)
    integrand = fpa * fpb + fxa * fxb
    average = np.sum(weights[:, None] * integrand) * (2 * np.pi / phi.size) / (4 * np.pi)
    return 1.5 * average


@pytest.mark.parametrize("degrees", [0.0, 20.0, 49.32, 82.48, 110.0, 150.0, 180.0])
def test_hellings_downs_equals_sky_average_of_antenna_patterns(degrees):
    """Reference: numerical integration of the antenna-pattern product (Hellings & Downs 1983).

    The quadrature itself converges to ~1e-5 at 300 nodes (it improves 4x at 600), hence 5e-5.
    """
    angle = np.radians(degrees)
    assert ptares.hellings_downs(angle) == pytest.approx(sky_average_of_antenna_product(angle), abs=5e-5)


def test_hellings_downs_values_in_physics_notes():
    """Values computed from the formula and listed in PHYSICS.md: 1/2 at 0, 1/4 at 180 degrees,
    zeros at 49.32 and 121.79 degrees, minimum -0.1519 at 82.48 degrees (located here with scipy)."""
    hd = ptares.hellings_downs
    assert hd(0.0) == 0.5
    assert hd(np.pi) == pytest.approx(0.25, abs=1e-15)
    first = np.degrees(brentq(hd, np.radians(30), np.radians(70)))
    second = np.degrees(brentq(hd, np.radians(100), np.radians(150)))
    assert first == pytest.approx(49.32, abs=0.005)
    assert second == pytest.approx(121.79, abs=0.005)
    low = minimize_scalar(hd, bounds=(np.radians(60), np.radians(100)), method="bounded", options={"xatol": 1e-10})
    assert np.degrees(low.x) == pytest.approx(82.48, abs=0.005)
    assert low.fun == pytest.approx(-0.1519, abs=5e-5)


def test_hellings_downs_is_vectorised_and_continuous_at_zero():
    angles = np.array([[0.0, 1e-12], [1e-6, 0.5]])
    values = ptares.hellings_downs(angles)
    assert values.shape == (2, 2)
    assert np.all(np.isfinite(values))
    assert values[0, 1] == pytest.approx(0.5, abs=1e-10)


def test_monopole_and_dipole_patterns():
    """Common practice: monopole 1, dipole cos(angle)."""
    angles = np.linspace(0, np.pi, 7)
    np.testing.assert_array_equal(ptares.monopole(angles), 1.0)
    np.testing.assert_allclose(ptares.dipole(angles), np.cos(angles))


@pytest.mark.parametrize("pattern", sorted(PATTERNS))
def test_correlation_matrix_unit_diagonal_symmetric_semidefinite(pattern):
    """A correlation matrix is symmetric, has unit diagonal (autocorrelation with the pulsar term, PHYSICS.md)
    and is positive semi-definite (numpy eigvalsh): HD, monopole and dipole are all sky averages of products."""
    rng = np.random.default_rng(3)
    positions = unit_vector(rng.uniform(0, 2 * np.pi, 30), np.arcsin(rng.uniform(-1, 1, 30)))
    gamma = correlation_matrix(positions, pattern)
    np.testing.assert_array_equal(np.diag(gamma), 1.0)
    np.testing.assert_allclose(gamma, gamma.T)
    assert np.linalg.eigvalsh(gamma).min() > -1e-10


def test_correlation_matrix_off_diagonal_is_pattern_of_separation():
    """Off the diagonal, the pattern at the pair's angle; the dipole matrix is p_a . p_b (common practice)."""
    positions = unit_vector(np.array([0.0, 1.0]), np.array([0.0, 0.0]))
    gamma = correlation_matrix(positions, "hellings-downs")
    assert gamma[0, 1] == pytest.approx(float(ptares.hellings_downs(1.0)), rel=1e-6, abs=0)
    dipole = correlation_matrix(positions, "dipole")
    np.testing.assert_allclose(dipole, positions @ positions.T)


def test_unknown_pattern_is_rejected():
    with pytest.raises(ValueError, match="unknown correlation pattern"):
        correlation_matrix(np.eye(3), "quadrupole")

"""Sky geometry against astropy and the definitions in PHYSICS.md."""

import numpy as np
import pytest
from astropy import units as u
from astropy.coordinates import SkyCoord
from hypothesis import given, settings
from hypothesis import strategies as st

from ptares.physics.sky import (
    angular_separation,
    antenna_patterns,
    polarisation_tensors,
    separation_matrix,
    unit_vector,
)

ra_s = st.floats(0.0, 2 * np.pi, exclude_max=True)
dec_s = st.floats(-np.pi / 2, np.pi / 2)


@given(ra_s, dec_s)
def test_unit_vector_matches_astropy_cartesian(ra, dec):
    """Reference: astropy SkyCoord cartesian representation (ICRS)."""
    c = SkyCoord(ra * u.rad, dec * u.rad, frame="icrs").cartesian
    expected = np.array([c.x.value, c.y.value, c.z.value])
    np.testing.assert_allclose(unit_vector(ra, dec), expected, atol=1e-14)


@settings(max_examples=60)
@given(ra_s, dec_s, ra_s, dec_s)
def test_separation_matches_astropy(ra1, dec1, ra2, dec2):
    """Reference: astropy SkyCoord.separation."""
    expected = SkyCoord(ra1 * u.rad, dec1 * u.rad).separation(SkyCoord(ra2 * u.rad, dec2 * u.rad)).rad
    assert angular_separation(ra1, dec1, ra2, dec2) == pytest.approx(expected, abs=1e-12)


def test_separation_matrix_matches_astropy_pairwise():
    """Reference: astropy SkyCoord.separation for every pair of a random set."""
    rng = np.random.default_rng(1)
    ra = rng.uniform(0, 2 * np.pi, 12)
    dec = np.arcsin(rng.uniform(-1, 1, 12))
    coords = SkyCoord(ra * u.rad, dec * u.rad)
    expected = np.array([[a.separation(b).rad for b in coords] for a in coords])
    np.testing.assert_allclose(separation_matrix(unit_vector(ra, dec)), expected, atol=1e-12)


def test_separation_keeps_precision_at_tiny_angles():
    """One milliarcsecond apart on the equator: arccos of the dot product would lose this."""
    mas = np.radians(1 / 3.6e6)
    assert angular_separation(0.0, 0.0, mas, 0.0) == pytest.approx(mas, rel=1e-9, abs=0)


@pytest.mark.parametrize("ra, dec, psi", [(0.3, 0.4, 0.0), (2.0, -1.1, 0.7), (5.5, 1.5, 2.9)])
def test_polarisation_tensors_transverse_traceless(ra, dec, psi):
    """Definition (PHYSICS.md): e+ and ex are symmetric, trace-free and transverse to Omega = -s;
    normalised so that e^A_ij e^B_ij = 2 delta_AB (common practice)."""
    plus, cross = polarisation_tensors(ra, dec, psi)
    omega = -unit_vector(ra, dec)
    for e in (plus, cross):
        np.testing.assert_allclose(e, e.T, atol=1e-15)
        assert np.trace(e) == pytest.approx(0.0, abs=1e-14)
        np.testing.assert_allclose(e @ omega, 0.0, atol=1e-14)
    assert np.sum(plus * plus) == pytest.approx(2.0, rel=1e-6, abs=0)
    assert np.sum(cross * cross) == pytest.approx(2.0, rel=1e-6, abs=0)
    assert np.sum(plus * cross) == pytest.approx(0.0, abs=1e-14)


@pytest.mark.parametrize("psi", [0.0, 0.4, 1.3])
def test_45_degree_rotation_exchanges_polarisations(psi):
    """Fact of the trade (PHYSICS.md): psi -> psi + pi/4 turns e+ into ex and ex into -e+."""
    plus, cross = polarisation_tensors(1.0, 0.2, psi)
    plus_r, cross_r = polarisation_tensors(1.0, 0.2, psi + np.pi / 4)
    np.testing.assert_allclose(plus_r, cross, atol=1e-14)
    np.testing.assert_allclose(cross_r, -plus, atol=1e-14)


def test_antenna_patterns_equal_tensor_contraction():
    """Definition (PHYSICS.md): F^A = (1/2) p^i p^j e^A_ij / (1 + Omega . p), evaluated with the tensors."""
    rng = np.random.default_rng(2)
    for _ in range(20):
        p = unit_vector(rng.uniform(0, 2 * np.pi), np.arcsin(rng.uniform(-1, 1)))
        ra, dec, psi = rng.uniform(0, 2 * np.pi), np.arcsin(rng.uniform(-1, 1)), rng.uniform(0, np.pi)
        plus, cross = polarisation_tensors(ra, dec, psi)
        omega = -unit_vector(ra, dec)
        expected = [0.5 * p @ e @ p / (1 + omega @ p) for e in (plus, cross)]
        np.testing.assert_allclose(antenna_patterns(p, ra, dec, psi), expected, rtol=1e-12, atol=1e-14)


def test_antenna_patterns_broadcast_over_sources():
    p = unit_vector(0.1, 0.2)
    ra = np.linspace(0.5, 5.0, 7)
    dec = np.linspace(-1.0, 1.0, 7)
    fp, fx = antenna_patterns(p, ra, dec, 0.3)
    assert fp.shape == fx.shape == (7,)
    for i in range(7):
        assert (fp[i], fx[i]) == pytest.approx(antenna_patterns(p, ra[i], dec[i], 0.3), rel=1e-6, abs=0)

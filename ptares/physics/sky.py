"""Sky geometry: pulsar directions, separations, wave polarisation and antenna patterns.

Conventions (PHYSICS.md, "Sky geometry"): a direction at right ascension ``ra``
and declination ``dec`` (ICRS, radians) is the unit vector
``(cos dec cos ra, cos dec sin ra, sin dec)``.  A gravitational-wave source in
direction ``s`` sends waves propagating along ``Omega = -s``.  The polarisation
basis ``m, n`` is orthogonal to ``Omega``; with ``theta = pi/2 - dec`` and
``phi = ra`` of the source,
``m = (sin phi, -cos phi, 0)`` and ``n = (-cos theta cos phi, -cos theta sin phi, sin theta)``,
both rotated by the polarisation angle ``psi``.  Then ``e+ = m m - n n`` and
``ex = m n + n m``, and the antenna pattern of a pulsar at ``p`` is
``F^A = (1/2) p^i p^j e^A_ij / (1 + Omega . p)``.
"""

from __future__ import annotations

import numpy as np

from ptares.physics.constants import C

#: A pulsar closer than this in ``1 - s.p`` to the source direction counts as exactly behind it.
BEHIND = 1e-12

__all__ = [
    "unit_vector",
    "angular_separation",
    "separation_matrix",
    "polarisation_basis",
    "polarisation_tensors",
    "antenna_patterns",
    "wave_patterns",
    "pulsar_term_delays",
]


def unit_vector(ra, dec) -> np.ndarray:
    """Unit vectors for equatorial coordinates (radians); shape ``(..., 3)``."""
    ra = np.asarray(ra, dtype=float)
    dec = np.asarray(dec, dtype=float)
    return np.stack([np.cos(dec) * np.cos(ra), np.cos(dec) * np.sin(ra), np.sin(dec)], axis=-1)


def angular_separation(ra1, dec1, ra2, dec2) -> np.ndarray:
    """Angle between two sky positions (all radians), accurate at small and large angles.

    Uses the Vincenty form ``atan2(|p1 x p2|, p1 . p2)``, which, unlike the
    arccosine of the dot product, keeps full precision near 0 and pi.
    """
    p1 = unit_vector(ra1, dec1)
    p2 = unit_vector(ra2, dec2)
    return np.arctan2(np.linalg.norm(np.cross(p1, p2), axis=-1), np.sum(p1 * p2, axis=-1))


def separation_matrix(positions: np.ndarray) -> np.ndarray:
    """Pairwise angles (radians) between unit vectors ``positions`` of shape ``(N, 3)``."""
    positions = np.asarray(positions, dtype=float)
    cross = np.linalg.norm(np.cross(positions[:, None, :], positions[None, :, :]), axis=-1)
    return np.arctan2(cross, positions @ positions.T)


def polarisation_basis(ra, dec, psi):
    """Basis vectors ``m, n`` (each shape ``(..., 3)``) for a source at ``(ra, dec)``.

    ``psi`` rotates the basis about the propagation direction:
    ``m' = m cos psi + n sin psi``, ``n' = -m sin psi + n cos psi``.
    """
    ra, dec, psi = np.broadcast_arrays(*(np.asarray(v, dtype=float) for v in (ra, dec, psi)))
    theta = np.pi / 2 - dec
    m0 = np.stack([np.sin(ra), -np.cos(ra), np.zeros_like(ra)], axis=-1)
    n0 = np.stack([-np.cos(theta) * np.cos(ra), -np.cos(theta) * np.sin(ra), np.sin(theta)], axis=-1)
    c, s = np.cos(psi)[..., None], np.sin(psi)[..., None]
    return m0 * c + n0 * s, -m0 * s + n0 * c


def polarisation_tensors(ra, dec, psi=0.0):
    """Plus and cross polarisation tensors (each shape ``(..., 3, 3)``) for a source at ``(ra, dec)``."""
    m, n = polarisation_basis(ra, dec, psi)
    plus = m[..., :, None] * m[..., None, :] - n[..., :, None] * n[..., None, :]
    cross = m[..., :, None] * n[..., None, :] + n[..., :, None] * m[..., None, :]
    return plus, cross


def antenna_patterns(pulsar, ra, dec, psi=0.0):
    """Antenna patterns ``(F+, Fx)`` of pulsar direction(s) ``pulsar`` for a source at ``(ra, dec)``.

    ``pulsar`` has shape ``(..., 3)`` and broadcasts against the source
    angles.  ``F^A = (1/2) (p.m' ... ) / (1 + Omega . p)`` written with the basis
    vectors: ``F+ = ((p.m)^2 - (p.n)^2) / (2 (1 - s.p))``,
    ``Fx = (p.m)(p.n) / (1 - s.p)``.  Undefined (0/0) for a pulsar exactly at
    the source position.
    """
    pulsar = np.asarray(pulsar, dtype=float)
    m, n = polarisation_basis(ra, dec, psi)
    source = unit_vector(ra, dec)
    pm = np.sum(pulsar * m, axis=-1)
    pn = np.sum(pulsar * n, axis=-1)
    denominator = 1.0 - np.sum(pulsar * source, axis=-1)  # 1 + Omega . p with Omega = -s
    return 0.5 * (pm**2 - pn**2) / denominator, pm * pn / denominator


def _cosines(positions, ra, dec) -> np.ndarray:
    """``s.p`` of pulsars ``positions`` (P, 3) and sources at ``(ra, dec)``: shape (P,) for one source, (S, P) for S."""
    return unit_vector(ra, dec) @ np.atleast_2d(np.asarray(positions, dtype=float)).T


def wave_patterns(positions, ra, dec, psi=0.0):
    """``(F+, Fx)`` of pulsars at unit vectors ``positions`` (P, 3) for waves from ``(ra, dec)`` with polarisation
    angle ``psi``: shape (P,) for scalar angles, (S, P) for S sources.  A pulsar exactly behind a source (within
    :data:`BEHIND` in ``1 - s.p``) gets zero, as its Earth and pulsar terms cancel there (the antenna pattern
    itself is 0/0; without the pulsar term the Earth term has no limit, ``F+ -> cos 2 phi`` depending on the
    direction of approach)."""
    positions = np.atleast_2d(np.asarray(positions, dtype=float))
    ra, dec, psi = (np.asarray(v, dtype=float)[..., None] for v in (ra, dec, psi))  # sources along a new axis
    with np.errstate(divide="ignore", invalid="ignore"):  # 0/0 behind a source, masked below
        fplus, fcross = antenna_patterns(positions, ra, dec, psi)
    behind = 1.0 - _cosines(positions, ra[..., 0], dec[..., 0]) < BEHIND
    return np.where(behind, 0.0, fplus), np.where(behind, 0.0, fcross)


def pulsar_term_delays(positions, distances, ra, dec) -> np.ndarray:
    """``D = (L / c)(1 - s.p)`` (s), how much earlier the pulsar term sees a wave, for pulsars at ``positions``
    (P, 3) and ``distances`` (m) and sources at ``(ra, dec)``: shape (P,) for one source, (S, P) for S."""
    return np.asarray(distances, dtype=float) / C * (1.0 - _cosines(positions, ra, dec))

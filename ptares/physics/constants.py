"""Physical constants and unit factors used inside ptares (SI throughout).

Values come from astropy so that there is one source for them; the year is the
Julian year (365.25 d), common practice for pulsar-timing spectra.
"""

from __future__ import annotations

import astropy.constants as const
import astropy.units as u

__all__ = ["DAY", "YEAR", "F_YR", "KPC", "C", "G", "M_SUN", "REFERENCE_FREQUENCY_MHZ", "DISPERSION_CONSTANT"]

DAY = 86400.0  #: seconds in a day
YEAR = float((1 * u.yr).to_value(u.s))  #: Julian year in seconds
F_YR = 1.0 / YEAR  #: one cycle per year, in Hz
KPC = float(const.kpc.to_value(u.m))  #: kiloparsec in metres
C = float(const.c.value)  #: speed of light, m/s
G = float(const.G.value)  #: Newton's constant, SI
M_SUN = float(const.M_sun.value)  #: nominal solar mass, kg
#: Radio frequency (MHz) at which chromatic noise is stated, and of every TOA when no other is given (common practice).
REFERENCE_FREQUENCY_MHZ = 1400.0
#: Dispersion constant K = e^2 / (8 pi^2 eps0 m_e c) in s MHz^2 pc^-1 cm^3: t_DM = K DM / nu^2 (PHYSICS.md).
DISPERSION_CONSTANT = float(
    (const.e.si**2 / (8 * 3.141592653589793**2 * const.eps0 * const.m_e * const.c) * u.pc / u.cm**3).to_value(u.s * u.MHz**2)
)

"""Physical constants and unit factors used inside ptares (SI throughout).

Values come from astropy so that there is one source for them; the year is the
Julian year (365.25 d), common practice for pulsar-timing spectra.
"""

from __future__ import annotations

import astropy.constants as const
import astropy.units as u

__all__ = ["DAY", "YEAR", "F_YR", "KPC", "C", "G", "M_SUN"]

DAY = 86400.0  #: seconds in a day
YEAR = float((1 * u.yr).to_value(u.s))  #: Julian year in seconds
F_YR = 1.0 / YEAR  #: one cycle per year, in Hz
KPC = float(const.kpc.to_value(u.m))  #: kiloparsec in metres
C = float(const.c.value)  #: speed of light, m/s
G = float(const.G.value)  #: Newton's constant, SI
M_SUN = float(const.M_sun.value)  #: nominal solar mass, kg

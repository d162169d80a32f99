"""Reading physical quantities from configuration values.

A config value may be a plain number, taken in the field's documented default
unit, or a string with a unit that astropy.units understands (``"15 yr"``,
``"200 ns"``, ``"1.2 kpc"``, ``"8 nHz"``), or, from Python, an
:class:`astropy.units.Quantity` (``15 * u.yr``).  Everything is converted to one
float in the default unit at the boundary; inside ptares, code works in SI
(see :mod:`ptares.physics.constants`).  Angles have their own reader because right
ascension is commonly written in sexagesimal hours.
"""

from __future__ import annotations

import math
import warnings
from fractions import Fraction

import astropy.units as u
import numpy as np
from astropy.coordinates import Angle

__all__ = ["to_unit", "parse_ra", "parse_dec", "parse_number"]


def _finite(value: float, text: object) -> float:
    if not math.isfinite(value):
        raise ValueError(f"{text!r} is not a finite number")
    return value


def _is_number(value: object) -> bool:
    """A plain real number (Python or numpy), not a bool."""
    return isinstance(value, (int, float, np.integer, np.floating)) and not isinstance(value, (bool, np.bool_))


def _scalar(value: u.Quantity) -> u.Quantity:
    """``value`` if it holds one number; a ValueError otherwise."""
    if not value.isscalar:
        raise ValueError(f"expected a single quantity, got an array of shape {value.shape}")
    return value


def _article(kind) -> str:
    """``a time``, ``an angle``."""
    kind = str(kind)
    return f"{'an' if kind[:1] in 'aeiou' else 'a'} {kind}"


def _quantity_in(value: u.Quantity, unit) -> float:
    """A scalar astropy Quantity as a float in ``unit`` (``None``: dimensionless)."""
    value = _scalar(value)
    target = u.dimensionless_unscaled if unit is None else u.Unit(unit)
    try:
        number = float(value.to_value(target))
    except u.UnitConversionError:
        if unit is None:
            raise ValueError(f"expected a dimensionless number, got {value}") from None
        raise ValueError(f"{value} ({_article(value.unit.physical_type)}) does not convert to {unit} "
                         f"({_article(target.physical_type)})") from None
    return _finite(number, value)


def parse_number(value: object) -> float:
    """A dimensionless number: int, float, a string such as ``"13/3"``, or a dimensionless Quantity."""
    if isinstance(value, u.Quantity):
        return _quantity_in(value, None)
    if isinstance(value, (bool, np.bool_)):
        raise ValueError(f"expected a number, got {value!r}")
    if _is_number(value):
        return _finite(float(value), value)
    if isinstance(value, str):
        try:
            return _finite(float(Fraction(value.strip())), value)
        except (ValueError, ZeroDivisionError):
            pass
        try:
            return _finite(float(value), value)
        except ValueError:
            raise ValueError(f"{value!r} is not a number") from None
    raise ValueError(f"expected a number, got {type(value).__name__}")


def to_unit(value: object, unit: str) -> float:
    """Value in ``unit``: a plain number is taken to be in ``unit`` already.

    An astropy Quantity is converted to ``unit`` (a dimensionless one is refused:
    give it a unit).  Raises ``ValueError`` with a readable message when the
    string does not parse or the unit does not convert.
    """
    if isinstance(value, u.Quantity):
        if value.unit.physical_type == "dimensionless" and u.Unit(unit).physical_type != "dimensionless":
            raise ValueError(f"{value} has no unit; give a quantity in {unit} (e.g. 2 * u.{unit}) or a plain number")
        return _quantity_in(value, unit)
    if isinstance(value, (bool, np.bool_)):
        raise ValueError(f"expected a number or a quantity in {unit}, got {value!r}")
    if _is_number(value):
        return _finite(float(value), value)
    if not isinstance(value, str):
        raise ValueError(f"expected a number or a quantity in {unit}, got {type(value).__name__}")
    try:
        quantity = u.Quantity(value)
    except (TypeError, ValueError):
        raise ValueError(f"cannot read {value!r} as a quantity (e.g. '15 yr', '200 ns')") from None
    if quantity.unit == u.dimensionless_unscaled:
        return _finite(float(quantity.value), value)
    try:
        return _finite(float(quantity.to_value(unit)), value)
    except u.UnitConversionError:
        raise ValueError(f"{value!r} does not convert to {unit}") from None


def _angle(value: object, string_unit: u.UnitBase, what: str) -> float:
    """An angle in degrees from degrees (number), a string in ``string_unit``, or an angle Quantity."""
    if isinstance(value, u.Quantity):  # also astropy Angle, Longitude, Latitude
        _scalar(value)
        if value.unit.physical_type != "angle":
            raise ValueError(f"expected {what} as an angle (deg, rad, hourangle), got {value}")
        if value.unit == u.hourangle:  # exactly 15 degrees an hour (astropy's conversion goes through radians)
            return _finite(float(value.value) * 15.0, value)
        return _finite(float(value.to_value(u.deg)), value)
    if isinstance(value, (bool, np.bool_)):
        raise ValueError(f"expected {what} in degrees or sexagesimal, got {value!r}")
    if _is_number(value):
        return _finite(float(value), value)
    if not isinstance(value, str):
        raise ValueError(f"expected {what} in degrees or sexagesimal, got {type(value).__name__}")
    text = value.strip()
    has_unit = any(c.isalpha() for c in text)
    sexagesimal = ":" in text or len(text.split()) > 1
    try:
        with warnings.catch_warnings():
            warnings.simplefilter("error")  # astropy warns (rather than fails) on e.g. 60 minutes
            if has_unit:
                angle = Angle(text)
            elif sexagesimal:
                angle = Angle(text, unit=string_unit)
            else:
                angle = Angle(float(text), unit=u.deg)  # a bare number in quotes is degrees, as unquoted
    except (ValueError, u.UnitsError, Warning):
        raise ValueError(f"cannot read {value!r} as {what}") from None
    return _finite(float(angle.to_value(u.deg)), value)


def parse_ra(value: object) -> float:
    """Right ascension in degrees, in [0, 360).

    Numbers (also quoted ones) are degrees; sexagesimal strings without a unit
    are hours (``"04:37:15.9"`` or ``"4 37 15.9"``); strings with units are
    read by astropy (``"4h37m15.9s"``, ``"69.3 deg"``), and so are angle
    Quantities (``69.3 * u.deg``, ``4.62 * u.hourangle``, ``1.2 * u.rad``).
    """
    degrees = _angle(value, u.hourangle, "right ascension")
    if not 0.0 <= degrees < 360.0 - 1e-9:
        raise ValueError(f"right ascension {value!r} is outside [0, 360) degrees")
    return degrees


def parse_dec(value: object) -> float:
    """Declination in degrees, in [-90, 90]; sexagesimal strings without a unit are degrees."""
    degrees = _angle(value, u.deg, "declination")
    if not -90.0 <= degrees <= 90.0:
        raise ValueError(f"declination {value!r} is outside [-90, 90] degrees")
    return degrees

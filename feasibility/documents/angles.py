"""Parsing of right ascension and declination as proposers write them.

astropy's :class:`~astropy.coordinates.Angle` does the sexagesimal parsing; this
module only decides the unit (hours for a right ascension string, degrees for
everything else) and the range.
"""

from __future__ import annotations

import math
import re
from typing import Annotated, Any

from pydantic import BeforeValidator, WithJsonSchema

__all__ = [
    "DECLINATION_PATTERN",
    "DECLINATION_SCHEMA",
    "RIGHT_ASCENSION_PATTERN",
    "RIGHT_ASCENSION_SCHEMA",
    "Declination",
    "RightAscension",
    "parse_declination",
    "parse_right_ascension",
]

_FRACTION = r"(?:\.[0-9]+)?"
_SEP = r"(?::| +)"
_SIXTY = r"[0-5]?[0-9]"  # minutes and seconds
#: Right ascension text the published schema states: degrees as a plain number or with 'd'/'deg'; sexagesimal
#: hours ('13:25:27.6', '13 25 27.6', '13h25m27.6s'); sexagesimal degrees with letters ('201d21m54s').
RIGHT_ASCENSION_PATTERN = (
    rf"^\+?(?:[0-9]{{1,3}}{_FRACTION}(?:d|deg)?"
    rf"|(?:[01]?[0-9]|2[0-3]){_SEP}{_SIXTY}(?:{_SEP}{_SIXTY}{_FRACTION})?"
    rf"|(?:[01]?[0-9]|2[0-3])h *{_SIXTY}m(?: *{_SIXTY}{_FRACTION}s)?"
    rf"|[0-9]{{1,3}}d *{_SIXTY}m(?: *{_SIXTY}{_FRACTION}s)?)$"
)
#: Declination text: degrees as a plain number or with 'd'/'deg'; sexagesimal degrees ('-43:01:09', '-43 01 09', '-43d01m09s').
DECLINATION_PATTERN = (
    rf"^[+-]?(?:[0-9]{{1,2}}{_FRACTION}(?:d|deg)?"
    rf"|[0-9]{{1,2}}{_SEP}{_SIXTY}(?:{_SEP}{_SIXTY}{_FRACTION})?"
    rf"|[0-9]{{1,2}}d *{_SIXTY}m(?: *{_SIXTY}{_FRACTION}s)?)$"
)

#: The published JSON Schema of each angle: a number of degrees, or text in the forms above.
RIGHT_ASCENSION_SCHEMA: dict[str, Any] = {
    "anyOf": [
        {"type": "number", "minimum": 0, "exclusiveMaximum": 360, "description": "Degrees."},
        {
            "type": "string",
            "pattern": RIGHT_ASCENSION_PATTERN,
            "description": "Sexagesimal HOURS ('13:25:27.6', '13 25 27.6', '13h25m27.6s'), or degrees: a plain number in text, "
            "or ending in 'd' or 'deg' ('201.365d', '201d21m54s').",
        },
    ],
    "examples": ["13:25:27.6", "13h25m27.6s", 201.365],
}
DECLINATION_SCHEMA: dict[str, Any] = {
    "anyOf": [
        {"type": "number", "minimum": -90, "maximum": 90, "description": "Degrees."},
        {
            "type": "string",
            "pattern": DECLINATION_PATTERN,
            "description": "Sexagesimal degrees ('-43:01:09', '-43 01 09', '-43d01m09s'), or a number of degrees in text, optionally ending in 'd' or 'deg'.",
        },
    ],
    "examples": ["-43:01:09", "-43d01m09s", -43.019],
}


def parse_right_ascension(value: object) -> float:
    """Return a right ascension in degrees, in [0, 360).

    A number is degrees; a string is sexagesimal hours ('05:35:17.3', '5h35m17.3s')
    unless it ends in 'd' or 'deg'.
    """
    degrees = _parse(value, default_unit="hourangle")
    if not 0.0 <= degrees < 360.0:
        raise ValueError(f"right ascension must lie in [0, 360) degrees or [0, 24) hours, got {degrees:g} degrees")
    return degrees


def parse_declination(value: object) -> float:
    """Return a declination in degrees, in [-90, +90]."""
    degrees = _parse(value, default_unit="deg")
    if not -90.0 <= degrees <= 90.0:
        raise ValueError(f"declination must lie between -90 and +90 degrees, got {degrees:g}")
    return degrees


def _parse(value: object, default_unit: str) -> float:
    if isinstance(value, bool):
        raise ValueError("expected an angle, got a boolean")
    if isinstance(value, (int, float)):
        try:
            number = float(value)
        except OverflowError:  # an integer beyond any float
            raise ValueError("angle is out of range") from None
    elif isinstance(value, str):
        number = _parse_string(value.strip(), default_unit)
    else:
        raise ValueError(f"expected an angle as a number of degrees or a sexagesimal string, got {type(value).__name__}")
    if not math.isfinite(number):
        raise ValueError("angle must be finite")
    return number


def _parse_string(text: str, default_unit: str) -> float:
    from astropy import units as u
    from astropy.coordinates import Angle

    if not text:
        raise ValueError("angle is empty")
    try:
        float(text)
    except ValueError:
        pass
    else:
        return float(text)  # a plain number in a string is degrees
    _check_fields(text, default_unit)
    lowered = text.lower()
    unit = u.deg if lowered.endswith(("d", "deg")) or "°" in text else getattr(u, default_unit)
    try:
        return float(Angle(text, unit=unit).to_value(u.deg))
    except (ValueError, TypeError) as exc:
        from astropy.coordinates import RangeError

        if isinstance(exc, RangeError):
            raise ValueError(f"{text!r} is out of range: {exc}") from None
        raise ValueError(f"cannot read {text!r} as an angle") from None


def _check_fields(text: str, default_unit: str) -> None:
    """Refuse minutes or seconds of 60 or more, and exactly 24 hours, which astropy only warns about (and carries over)."""
    fields = [part for part in re.split(r"[^0-9.]+", text) if part]
    try:
        numbers = [float(part) for part in fields]
    except ValueError:
        return  # astropy says what is wrong
    if len(numbers) > 1 and any(number >= 60 for number in numbers[1:3]):
        raise ValueError(f"{text!r}: minutes and seconds must be below 60")
    hours = default_unit == "hourangle" and "d" not in text.lower() and "°" not in text
    if hours and len(numbers) > 1 and numbers[0] == 24:
        raise ValueError(f"{text!r}: hours must be below 24")


#: A right ascension field of a document: degrees in [0, 360), read as :func:`parse_right_ascension` reads it.
RightAscension = Annotated[float, BeforeValidator(parse_right_ascension), WithJsonSchema(RIGHT_ASCENSION_SCHEMA, mode="validation")]
#: A declination field of a document: degrees in [-90, +90], read as :func:`parse_declination` reads it.
Declination = Annotated[float, BeforeValidator(parse_declination), WithJsonSchema(DECLINATION_SCHEMA, mode="validation")]

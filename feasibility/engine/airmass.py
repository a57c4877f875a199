"""Airmass from altitude, valid down to the horizon, and the formulae airmass limits are stated in.

Two different uses, two rules:

- *Physical airmass* (extinction, seeing, the moonlit sky): the Kasten & Young
  (1989) formula. It agrees with sec z near the zenith, stays finite at the
  horizon (about 38) and follows their tabulated airmasses at low altitude,
  where plain sec z runs away.
- *Airmass limits* (a request's ``max_airmass``): a limit is a convention, and
  most are stated as plain sec z. The observatory description says which formula
  its limits use (``airmass_limit_formula``, :data:`LIMIT_FORMULAS`); the limit
  is turned into the altitude at which that formula reaches it
  (:func:`limit_altitude`). At airmass 2 the choice moves the altitude by 0.1°,
  enough to change the hours of a target that culminates just above its limit.

References
----------
Kasten, F. & Young, A. T. 1989, Applied Optics 28, 4735.
Hardie, R. H. 1962, in *Astronomical Techniques*, ed. W. A. Hiltner, p. 184.
Young, A. T. 1994, Applied Optics 33, 1108.
(see docs/references.md)
"""

from __future__ import annotations

import functools
import math

import numpy as np
from numpy.typing import ArrayLike, NDArray

__all__ = [
    "LIMIT_FORMULAS",
    "airmass",
    "airmass_at",
    "airmass_by",
    "airmass_hardie",
    "airmass_secant",
    "airmass_young",
    "altitude_for_airmass",
    "formula_label",
    "limit_airmass",
    "limit_altitude",
]

Array = NDArray[np.float64]


def airmass(altitude_deg: ArrayLike) -> Array:
    """Relative airmass at ``altitude_deg`` (Kasten & Young 1989); NaN below the horizon.

    X = 1 / (cos z + 0.50572 (96.07995° − z)^−1.6364), z the zenith angle in degrees.
    The fit dips to 0.9997 at the zenith; the result is clipped to 1 there, an
    airmass below 1 having no meaning.

    References
    ----------
    Kasten, F. & Young, A. T. 1989, Applied Optics 28, 4735.
    """
    return np.maximum(_kasten_young(altitude_deg), 1.0)


def airmass_at(altitude_deg: float) -> float:
    """:func:`airmass` for one altitude, in plain floats (the hot path calls it a few times per request)."""
    if altitude_deg < 0.0:
        return math.nan
    zenith = 90.0 - altitude_deg
    return max(1.0, 1.0 / (math.cos(math.radians(zenith)) + 0.50572 * (96.07995 - zenith) ** -1.6364))


def _kasten_young(altitude_deg: ArrayLike) -> Array:
    altitude = np.asarray(altitude_deg, dtype=float)
    zenith = 90.0 - altitude
    with np.errstate(invalid="ignore"):
        value = 1.0 / (np.cos(np.radians(zenith)) + 0.50572 * (96.07995 - zenith) ** -1.6364)
    return np.where(altitude >= 0.0, value, np.nan)


def airmass_hardie(altitude_deg: ArrayLike) -> Array:
    """Airmass by Hardie's (1962) polynomial in sec z; NaN below 0°.

    X = sec z − 0.0018167 (sec z − 1) − 0.002875 (sec z − 1)² − 0.0008083 (sec z − 1)³.
    """
    altitude = np.asarray(altitude_deg, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        secz = 1.0 / np.sin(np.radians(altitude))
        s1 = secz - 1.0
        value = secz - 0.0018167 * s1 - 0.002875 * s1**2 - 0.0008083 * s1**3
    return np.where(altitude > 0.0, value, np.nan)


@functools.lru_cache(maxsize=256)
def altitude_for_airmass(limit: float) -> float:
    """The altitude (degrees) at which :func:`airmass` equals ``limit`` (≥ 1); 90 for 1.

    The formula decreases monotonically with altitude, so the inverse is read off
    a fine table (0.001° steps) by interpolation.
    """
    if limit <= 1.0:
        return 90.0
    return float(np.interp(-limit, _TABLE_MINUS_AIRMASS, _TABLE_ALTITUDE))


_TABLE_ALTITUDE = np.linspace(0.0, 90.0, 90001)
_TABLE_AIRMASS = _kasten_young(_TABLE_ALTITUDE)
#: Negated once, so that a look-up (interpolation wants increasing abscissae) allocates nothing.
_TABLE_MINUS_AIRMASS = -_TABLE_AIRMASS


def airmass_secant(altitude_deg: ArrayLike) -> Array:
    """Plain sec z (plane-parallel atmosphere); NaN at and below the horizon."""
    altitude = np.asarray(altitude_deg, dtype=float)
    with np.errstate(divide="ignore", invalid="ignore"):
        value = 1.0 / np.sin(np.radians(altitude))
    return np.where(altitude > 0.0, value, np.nan)


def airmass_young(altitude_deg: ArrayLike) -> Array:
    """Young's (1994) rational formula in the cosine of the true zenith angle; NaN below the horizon.

    X = (1.002432 cos²z + 0.148386 cos z + 0.0096467) / (cos³z + 0.149864 cos²z + 0.0102963 cos z + 0.000303978).
    """
    altitude = np.asarray(altitude_deg, dtype=float)
    c = np.sin(np.radians(altitude))  # cos z
    value = (1.002432 * c**2 + 0.148386 * c + 0.0096467) / (c**3 + 0.149864 * c**2 + 0.0102963 * c + 0.000303978)
    return np.where(altitude >= 0.0, value, np.nan)


#: The formulae an observatory may state its airmass limits in, with the words findings use for them.
LIMIT_FORMULAS: dict[str, str] = {
    "secant": "plain sec z",
    "hardie-1962": "Hardie 1962",
    "kasten-young-1989": "Kasten & Young 1989",
    "young-1994": "Young 1994",
}

_BY_FORMULA = {
    "secant": airmass_secant,
    "hardie-1962": airmass_hardie,
    "kasten-young-1989": airmass,
    "young-1994": airmass_young,
}


def formula_label(formula: str) -> str:
    """How findings name a limit formula, e.g. "plain sec z"."""
    return LIMIT_FORMULAS[formula]


def airmass_by(formula: str, altitude_deg: ArrayLike) -> Array:
    """Airmass at ``altitude_deg`` by one of :data:`LIMIT_FORMULAS`."""
    return _BY_FORMULA[formula](altitude_deg)


@functools.lru_cache(maxsize=512)
def limit_altitude(limit: float, formula: str = "secant") -> float:
    """The altitude (degrees) at which ``formula``'s airmass equals ``limit``: 90 for a limit of 1 or less.

    sec z inverts exactly (altitude = asin(1/X)); the other formulae decrease
    monotonically with altitude over the range limits use (Hardie's polynomial up
    to X ≈ 6.8, beyond the largest limit a request may give), so the altitude is
    found by bisection to 1e-9°. A limit beyond the formula's horizon value gives 0.
    """
    if limit <= 1.0:
        return 90.0
    if formula == "secant":
        return math.degrees(math.asin(1.0 / limit))
    function = _BY_FORMULA[formula]
    low, high = (3.0 if formula == "hardie-1962" else 0.0), 90.0
    if float(function(low)) <= limit:
        return low
    while high - low > 1e-9:
        middle = 0.5 * (low + high)
        if float(function(middle)) > limit:
            low = middle
        else:
            high = middle
    return 0.5 * (low + high)


def limit_airmass(altitude_deg: float, formula: str = "secant") -> float:
    """The airmass at ``altitude_deg`` in the limit's formula (to compare a target's lowest airmass with its limit)."""
    if altitude_deg <= 0.0:
        return math.inf
    if formula == "secant":  # the scalar form of airmass_secant (a NumPy call on one value costs ten times more)
        return max(1.0, 1.0 / math.sin(math.radians(altitude_deg)))
    return max(1.0, float(_BY_FORMULA[formula](altitude_deg)))

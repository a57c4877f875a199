"""Airmass from altitude, valid down to the horizon.

The engine uses the Kasten & Young (1989) formula: it agrees with sec z near the
zenith, stays finite at the horizon (about 38) and follows their tabulated
airmasses at low altitude, where plain sec z runs away. Hardie (1962) is given
for comparison; it is good to 0.1 % up to X ≈ 6.8 but not below.

References
----------
Kasten, F. & Young, A. T. 1989, Applied Optics 28, 4735.
Hardie, R. H. 1962, in *Astronomical Techniques*, ed. W. A. Hiltner, p. 184.
"""

from __future__ import annotations

import functools
import math

import numpy as np
from numpy.typing import ArrayLike, NDArray

__all__ = ["airmass", "airmass_at", "airmass_hardie", "altitude_for_airmass"]

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

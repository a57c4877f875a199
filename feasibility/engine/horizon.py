"""The site's horizon profile: the lowest usable altitude towards each azimuth.

The profile is linear in azimuth between its points and wraps round the sky:
after the last point it runs back to the first one, 360° further on. The
observatory description guarantees one altitude per direction (0° and 360°
agree, see :class:`feasibility.documents.observatory.Site`), so the profile
folded onto [0°, 360°) is well defined and ``np.interp`` with ``period=360``
interpolates it; without the fold, points at 0° and 360° would collide at the
same abscissa and the wrap would be lost.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike, NDArray

from feasibility.documents import Site

__all__ = ["horizon_altitude"]


def horizon_altitude(site: Site, azimuth_deg: ArrayLike) -> NDArray[np.float64]:
    """The profile's altitude (degrees) towards ``azimuth_deg`` (from north through east); 0 without a profile."""
    azimuth = np.asarray(azimuth_deg, dtype=float) % 360.0
    if not site.horizon:
        return np.zeros_like(azimuth)
    key = tuple((point.azimuth_deg, point.altitude_deg) for point in site.horizon)
    table = _WRAPPED.get(key)
    if table is None:
        table = _wrapped(*site.horizon_profile())
        if len(_WRAPPED) >= 32:
            _WRAPPED.clear()
        _WRAPPED[key] = table
    return np.interp(azimuth, *table)


#: The interpolation table of each horizon profile seen, by its points (a few sites).
_WRAPPED: dict[tuple[tuple[float, float], ...], tuple[NDArray[np.float64], NDArray[np.float64]]] = {}


def _wrapped(azimuths: list[float], altitudes: list[float]) -> tuple[NDArray[np.float64], NDArray[np.float64]]:
    """The folded profile with its last point repeated 360° before the first and its first 360° after the last:
    the table ``np.interp(..., period=360)`` builds (and sorts) on every call, built once per profile (the night
    curve and the what-if's visible mask ask for it on every request)."""
    xp, fp = np.asarray(azimuths, dtype=float), np.asarray(altitudes, dtype=float)
    return np.concatenate((xp[-1:] - 360.0, xp, xp[0:1] + 360.0)), np.concatenate((fp[-1:], fp, fp[0:1]))

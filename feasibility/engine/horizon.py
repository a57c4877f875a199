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
    azimuths, altitudes = site.horizon_profile()
    if not azimuths:
        return np.zeros_like(azimuth)
    return np.interp(azimuth, azimuths, altitudes, period=360.0)

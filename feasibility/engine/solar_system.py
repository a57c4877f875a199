"""The planets and the Moon from astropy's built-in ephemeris (no download): geocentric positions over times.

``astropy.coordinates.get_body`` with the ``builtin`` ephemeris (ERFA's ``epv00`` for the Earth, ``plan94`` for
the planets and ``moon98``, Meeus' lunar theory, for the Moon), light-time corrected, in GCRS: the same axes as the
sky grid's ICRS directions. One call costs a few tenths of a second, so the positions are computed once per body
and set of times and kept (least recently used, per process).
"""

from __future__ import annotations

import functools

import numpy as np
from numpy.typing import NDArray

from feasibility.offline import configure_offline, log_astropy_warnings

__all__ = ["major_body_geocentric"]


def major_body_geocentric(body: str, utc_mjd: NDArray[np.float64]) -> NDArray[np.float64]:
    """Geocentric position (au, GCRS axes) of ``body`` (a name astropy knows: 'jupiter', 'moon'...) at UTC ``utc_mjd``."""
    times = np.ascontiguousarray(utc_mjd, dtype=float)
    return _cached(body, times.tobytes()).copy()


@functools.lru_cache(maxsize=32)
def _cached(body: str, times: bytes) -> NDArray[np.float64]:
    from astropy.coordinates import get_body, solar_system_ephemeris
    from astropy.time import Time

    configure_offline()
    mjd = np.frombuffer(times, dtype=float)
    with log_astropy_warnings(), solar_system_ephemeris.set("builtin"):
        coordinates = get_body(body, Time(mjd, format="mjd", scale="utc"))
        position = coordinates.cartesian.xyz.to_value("au")
    return np.ascontiguousarray(np.asarray(position, dtype=float).T)

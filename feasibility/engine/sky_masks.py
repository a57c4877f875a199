"""Masks over the sky grid's instants for one target: the first stage (visible) and the time windows.

:func:`visible_mask` is the rule for *visible* in one place; the sky checks use it
with the request's own limits, and :class:`feasibility.engine.what_if.SkyProbe`
with relaxed ones, to compute what a change would give.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from datetime import UTC, datetime

import numpy as np
from numpy.typing import NDArray

from feasibility.documents import Site, TimeWindow
from feasibility.engine.horizon import horizon_altitude
from feasibility.engine.positions import along
from feasibility.engine.skygrid import NightSamples

__all__ = ["horizon_top", "in_windows", "to_mjd", "visible_mask", "window_nights"]

_MJD_UNIX_EPOCH = 40587.0


def visible_mask(
    view: NightSamples,
    vector: NDArray[np.float64],
    sin_alt: NDArray[np.float64],
    min_alt: float,
    max_alt: float,
    site: Site,
    windows: NDArray[np.bool_] | None,
) -> NDArray[np.bool_]:
    """The instants of ``view`` (true night) at which the target stands between ``min_alt`` and ``max_alt``,
    above the site's horizon profile and inside the time windows (``windows``, a mask; None for none).

    ``vector`` is the target's unit vector, or for a moving target one per instant of ``view`` (``(n, 3)``)."""
    visible = sin_alt >= math.sin(math.radians(min_alt))
    if max_alt < 90.0:
        visible &= sin_alt <= math.sin(math.radians(max_alt))
    if site.horizon:
        _clear_below_horizon_profile(site, view, vector, visible, sin_alt, min_alt)
    if windows is not None:
        visible &= windows
    return visible


def _clear_below_horizon_profile(
    site: Site,
    view: NightSamples,
    vector: NDArray[np.float64],
    visible: NDArray[np.bool_],
    sin_alt: NDArray[np.float64],
    min_alt: float,
) -> None:
    """Clear in ``visible`` the instants below the site's horizon profile (:mod:`feasibility.engine.horizon`).

    Only instants lower than the profile's highest point need their azimuth, so
    with the usual airmass limits the profile costs nothing.
    """
    top = horizon_top(site)
    if top <= min_alt:
        return
    low = np.flatnonzero(visible & (sin_alt < math.sin(math.radians(top))))
    if not low.size:
        return
    azimuth = np.degrees(np.arctan2(along(np.take(view.east, low, axis=0), vector, low), along(np.take(view.north, low, axis=0), vector, low)))
    floor = horizon_altitude(site, azimuth)
    visible[low[np.degrees(np.arcsin(sin_alt[low])) < floor]] = False


def horizon_top(site: Site) -> float:
    """The horizon profile's highest altitude (degrees; −90 without a profile): instants at or above it, and every
    instant with a lower limit at or above it, need no azimuth."""
    return max((point.altitude_deg for point in site.horizon), default=-90.0)


def in_windows(windows: Sequence[TimeWindow], mjd: NDArray[np.float64]) -> NDArray[np.bool_]:
    """Which of the instants ``mjd`` (in time order) fall inside any of the time ``windows``."""
    inside = np.zeros(mjd.size, dtype=bool)
    for window in windows:
        first = np.searchsorted(mjd, to_mjd(window.start), side="left")  # first instant at or after the start
        stop = np.searchsorted(mjd, to_mjd(window.end), side="right")  # first instant after the end
        inside[first:stop] = True
    return inside


def window_nights(windows: Sequence[TimeWindow], midnight_mjd: NDArray[np.float64]) -> NDArray[np.bool_]:
    """Per night (local noon to noon around ``midnight_mjd``), whether any of the ``windows`` overlaps it."""
    touched = np.zeros(midnight_mjd.size, dtype=bool)
    for window in windows:
        touched |= (to_mjd(window.start) < midnight_mjd + 0.5) & (to_mjd(window.end) > midnight_mjd - 0.5)
    return touched


def to_mjd(moment: datetime) -> float:
    """A time as a UTC modified Julian date."""
    return moment.astimezone(UTC).timestamp() / 86400.0 + _MJD_UNIX_EPOCH

"""What a change to a request would give: the sky checks' hours again, with one limit relaxed.

A :class:`SkyProbe` keeps what :func:`feasibility.engine.sky_checks.measure_sky`
computed for one target (its altitudes over the grid's instants) and reruns the
stage masks with another airmass limit, without the time windows or with other
Moon constraints. The findings call it only when they are not feasible, to put a
figure on their suggestions ("airmass limit 2.3 would give 12.4 h").
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
from numpy.typing import NDArray

from feasibility.documents import Site
from feasibility.engine.airmass import limit_altitude
from feasibility.engine.positions import along
from feasibility.engine.sky_masks import horizon_top, visible_mask
from feasibility.engine.skygrid import NightSamples

__all__ = ["Hours", "SkyProbe"]


@dataclass(frozen=True)
class Hours:
    """Hours over the semester with every night clear, and expected clear (weather-weighted)."""

    total: float
    clear: float
    per_night: NDArray[np.float64]


@dataclass
class SkyProbe:
    """One target's pass over the grid, kept to recompute the stages with other limits."""

    view: NightSamples
    vector: NDArray[np.float64]
    """The target's unit vector, or one per instant of ``view`` for a moving target."""
    sin_alt: NDArray[np.float64]
    site: Site
    floor_alt: float
    """The site's and telescope's lowest altitude (degrees): no airmass limit goes below it."""
    max_alt: float
    windows: NDArray[np.bool_] | None
    formula: str
    airmass_limit: float
    min_moon_separation_deg: float
    max_moon_illumination: float
    available: NDArray[np.bool_]
    weather: NDArray[np.float64]
    step_hours: np.float64
    _floor_cache: dict[bool, tuple[NDArray[np.float64], NDArray[np.int32]]] = field(default_factory=dict, repr=False, compare=False)

    def visible(self, airmass_limit: float | None = None, *, windows: bool = True) -> Hours:
        """Visible hours with ``airmass_limit`` (default: the request's) and with or without the time windows.

        The same instants as :func:`visible_mask` with that limit. A limit at or above the horizon profile's top
        needs no azimuth: its mask is computed directly. Below it, the instants visible at the floor
        (:attr:`floor_alt`, every other limit kept, the profile applied) are found once, and each limit only
        thresholds their altitudes (a search over limits costs a fraction of a full pass each).
        """
        limit = self.airmass_limit if airmass_limit is None else airmass_limit
        min_alt = max(limit_altitude(limit, self.formula), self.floor_alt)
        if min_alt >= horizon_top(self.site):
            return self._hours(self._visible(limit, windows))
        sin_alt, nights = self._above_floor(windows)
        chosen = nights[sin_alt >= math.sin(math.radians(min_alt))]
        return self._hours_from_counts(np.bincount(chosen, minlength=self.view.night_starts.size - 1))

    def observable(
        self,
        min_separation_deg: float | None = None,
        max_illumination: float | None = None,
        *,
        windows: bool = True,
    ) -> Hours:
        """Hours meeting the Moon constraints, with a different separation or illumination limit if given."""
        return self._hours(self._observable(self._visible(None, windows), min_separation_deg, max_illumination))

    def usable(self, *, windows: bool = True) -> Hours:
        """Observable hours on the nights the instrument is scheduled."""
        observable = self._observable(self._visible(None, windows), None, None)
        return self._hours(observable & self.view.on_nights(self.available))

    def airmass_binds(self, limit: float) -> bool:
        """Whether an airmass limit of ``limit`` still lies above the site's and telescope's floor."""
        return limit_altitude(limit, self.formula) > self.floor_alt

    def _visible(self, airmass_limit: float | None, windows: bool) -> NDArray[np.bool_]:
        limit = self.airmass_limit if airmass_limit is None else airmass_limit
        min_alt = max(limit_altitude(limit, self.formula), self.floor_alt)
        return visible_mask(self.view, self.vector, self.sin_alt, min_alt, self.max_alt, self.site, self.windows if windows else None)

    def _observable(self, visible: NDArray[np.bool_], separation: float | None, illumination: float | None) -> NDArray[np.bool_]:
        separation = self.min_moon_separation_deg if separation is None else separation
        illumination = self.max_moon_illumination if illumination is None else illumination
        observable = visible.copy()
        lit = np.flatnonzero(visible & self.view.moon_up)
        if separation > 0.0 and lit.size:
            cos_moon = along(np.take(self.view.moon, lit, axis=0), self.vector, lit)
            observable[lit[cos_moon > math.cos(math.radians(separation))]] = False
        if illumination < 1.0:
            observable &= self.view.moon_down_or_within(illumination)
        return observable

    def _above_floor(self, windows: bool) -> tuple[NDArray[np.float64], NDArray[np.int32]]:
        """The sines of the altitudes and the nights of the instants visible at the floor altitude (cached)."""
        cached = self._floor_cache.get(windows)
        if cached is None:
            mask = visible_mask(self.view, self.vector, self.sin_alt, self.floor_alt, self.max_alt, self.site, self.windows if windows else None)
            chosen = np.flatnonzero(mask)
            cached = self._floor_cache[windows] = (self.sin_alt[chosen], self.view.night_index[chosen])
        return cached

    def _hours(self, mask: NDArray[np.bool_]) -> Hours:
        return self._hours_from_counts(self.view.per_night(mask))

    def _hours_from_counts(self, counts: NDArray[np.integer]) -> Hours:
        per_night = counts * self.step_hours
        return Hours(float(per_night.sum()), float(per_night @ self.weather), per_night)

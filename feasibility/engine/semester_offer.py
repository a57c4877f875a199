"""The hours a semester offers: night and dark hours per night and per hour of right ascension.

This is the supply side of the committee's overview (the dashboard shows it; the
engine computes it). It depends only on the observatory description (site,
climate) and the semester, so it is computed once per (observatory version,
semester), kept in memory and on disk (in the settings' cache folder,
``$FEASIBILITY_CACHE_DIR``, default ``~/.cache/feasibility``), and never per page.

Method: the engine's semester sky grid (:mod:`feasibility.engine.skygrid`,
shared with the checks and cached by them) gives, at instants every few minutes,
the Sun's and the Moon's altitudes, the Moon's illuminated fraction and the
rotation to the local horizon. An instant is *night* when the Sun's centre is
more than 18° below the horizon (U.S. Naval Observatory, astronomical twilight)
and *dark* when, in addition, the Moon is below the horizon or at most 30 %
illuminated (the vocabulary's dark time). Each instant counts towards the hour
of right ascension on the meridian (the zenith's right ascension, i.e. the local
sidereal time), and each night is weighted by the site's usable-night fraction
for its month (weather).
"""

from __future__ import annotations

import hashlib
import json
import os
import threading
from collections.abc import Iterator
from datetime import date
from pathlib import Path
from typing import Any

import numpy as np

from feasibility.documents import InstrumentSchedule, Observatory
from feasibility.settings import cache_dir

__all__ = [
    "DARK_MOON_ILLUMINATION",
    "LUNAR_TIMES",
    "TWILIGHT_ALTITUDE",
    "SemesterOffer",
    "instrument_hours_offered",
    "lunar_offer",
    "semester_offer",
]

#: Most illuminated fraction of a Moon above the horizon that still counts as dark time.
DARK_MOON_ILLUMINATION = 0.3
#: Lunar times, each with the most illuminated fraction of a Moon above the horizon it allows
#: (the proposal's ``sky`` constraint, :data:`feasibility.documents.proposal.SKY_ILLUMINATION`).
LUNAR_TIMES = ("dark", "grey", "bright")
#: Sun's centre altitude (degrees) ending each twilight (U.S. Naval Observatory definitions).
TWILIGHT_ALTITUDE = {"civil": -6.0, "nautical": -12.0, "astronomical": -18.0}
_FORMAT = 3  # bump when the stored layout or the method changes

SemesterOffer = dict[str, Any]
_memory: dict[str, SemesterOffer] = {}
_lock = threading.Lock()


def semester_offer(observatory: Observatory, semester: str, content_hash: str) -> SemesterOffer | None:
    """Night and dark hours of ``semester`` (None when the observatory has no such semester).

    Returns a mapping with ``nights`` (ISO dates), ``night_hours`` {twilight: [hours per
    night]}, ``weather`` [fraction per night], ``ra_night_hours`` and ``ra_dark_hours``
    (24 weather-weighted sums, one per hour of right ascension).
    """
    season = observatory.semester_named(semester)
    if season is None:
        return None
    key = hashlib.sha256(f"{_FORMAT}|{content_hash}|{semester}".encode()).hexdigest()[:24]
    with _lock:
        if key in _memory:
            return _memory[key]
        path = cache_dir() / f"semester-offer-{key}.json"
        offer = _read(path)
        if offer is None:
            offer = _compute(observatory, season.first_night, season.last_night)
            _write(path, offer)
        _memory[key] = offer
        return offer


def instrument_hours_offered(offer: SemesterOffer, observatory: Observatory, schedule: InstrumentSchedule | None) -> dict[str, float]:
    """Weather-weighted night hours on the nights each instrument is scheduled (open), by instrument name.

    Night ends at the twilight the instrument needs (its ``twilight`` setting).
    Without a schedule there is nothing to offer: an empty mapping.
    """
    totals: dict[str, float] = {}
    for name, twilight, position in _open_nights(offer, observatory, schedule):
        hours = offer["night_hours"][twilight][position] * offer["weather"][position]
        totals[name] = totals.get(name, 0.0) + hours
    return totals


def lunar_offer(offer: SemesterOffer, observatory: Observatory, schedule: InstrumentSchedule | None) -> dict[str, dict[str, dict[str, Any]]]:
    """Per instrument and lunar time: the weather-weighted hours offered (``hours``) and their split by hour of
    right ascension on the meridian (``ra``, 24 values), on the nights the schedule mounts the instrument.

    A time of night belongs to the first lunar time whose Moon it fits (dark, then grey, then bright), so the
    three add up to the instrument's night hours. Without a schedule: an empty mapping.
    """
    if "lunar" not in offer:
        return {}
    totals: dict[str, dict[str, dict[str, Any]]] = {}
    for name, twilight, position in _open_nights(offer, observatory, schedule):
        weight = offer["weather"][position]
        mine = totals.setdefault(name, {time: {"hours": 0.0, "ra": [0.0] * 24} for time in LUNAR_TIMES})
        for time in LUNAR_TIMES:
            row = offer["lunar"][twilight][time][position]
            mine[time]["ra"] = [a + b * weight for a, b in zip(mine[time]["ra"], row)]
            mine[time]["hours"] += sum(row) * weight
    return totals


def _open_nights(offer: SemesterOffer, observatory: Observatory, schedule: InstrumentSchedule | None) -> Iterator[tuple[str, str, int]]:
    """The open nights the schedule mounts an instrument on, within the offer: (instrument name, its twilight, night's position)."""
    if schedule is None:
        return
    index = {night: i for i, night in enumerate(offer["nights"])}
    for entry in schedule.nights:
        position = index.get(entry.night.isoformat())
        if entry.status != "open" or entry.instrument is None or position is None:
            continue
        instrument = observatory.instrument_named(entry.instrument)
        twilight = instrument.twilight if instrument is not None else "astronomical"
        yield (instrument.name if instrument is not None else entry.instrument), twilight, position


def _lunar_split(grid: Any, radec_from_vector: Any) -> dict[str, dict[str, list[list[float]]]]:
    """For each twilight and lunar time: per night, the hours (not weather-weighted) in each hour of meridian right ascension."""
    from feasibility.documents.proposal import SKY_ILLUMINATION

    split: dict[str, dict[str, list[list[float]]]] = {}
    n = grid.n_nights
    for twilight, limit in TWILIGHT_ALTITUDE.items():
        view = grid.samples(limit)
        up = view.up
        ra, _ = radec_from_vector(up)
        cell = view.night_index.astype(np.int64) * 24 + (np.floor(ra / 15.0).astype(np.int64) % 24)
        taken = np.zeros(view.night_index.shape, dtype=bool)
        split[twilight] = {}
        for time in LUNAR_TIMES:
            fits = ~view.moon_up | (view.moon_illumination <= SKY_ILLUMINATION[time])
            mine = fits & ~taken
            taken |= mine
            hours = np.bincount(cell[mine], minlength=n * 24).astype(float) * grid.step_hours
            split[twilight][time] = np.round(hours.reshape(n, 24), 3).tolist()
    return split


def _compute(observatory: Observatory, first: date, last: date) -> SemesterOffer:
    """Reduce the engine's sky grid (:func:`feasibility.engine.skygrid.sky_grid`) to per-night and per-RA sums."""
    from feasibility.engine.positions import radec_from_vector
    from feasibility.engine.skygrid import sky_grid

    site = observatory.site
    grid = sky_grid(site.latitude_deg, site.longitude_deg, site.elevation_m, first, last)
    nights = grid.nights
    weather_by_month = observatory.climate.usable_night_fraction
    weather = np.array([float(weather_by_month.get(n.month, 1.0)) for n in nights])
    night_hours = {name: np.round(grid.night_hours(limit), 3).tolist() for name, limit in TWILIGHT_ALTITUDE.items()}

    view = grid.samples(TWILIGHT_ALTITUDE["astronomical"])
    # The zenith's direction (the "up" row of the ICRS-to-horizon rotation): its right ascension is on the meridian.
    up = view.up
    meridian_ra, _ = radec_from_vector(up)
    ra_bin = np.floor(meridian_ra / 15.0).astype(int) % 24
    dark = ~view.moon_up | (view.moon_illumination <= DARK_MOON_ILLUMINATION)
    weights = weather[view.night_index] * grid.step_hours
    ra_night = np.bincount(ra_bin, weights=weights, minlength=24)
    ra_dark = np.bincount(ra_bin[dark], weights=weights[dark], minlength=24)
    return {
        "nights": [n.isoformat() for n in nights],
        "night_hours": night_hours,
        "weather": weather.round(4).tolist(),
        "ra_night_hours": ra_night.round(2).tolist(),
        "ra_dark_hours": ra_dark.round(2).tolist(),
        "lunar": _lunar_split(grid, radec_from_vector),
        "method": "engine sky grid; night: Sun below -18 deg (USNO); "
        f"dark: also Moon down or illuminated <= {DARK_MOON_ILLUMINATION}; weighted by usable-night fraction",
    }


def _read(path: Path) -> SemesterOffer | None:
    try:
        data = json.loads(path.read_text())
    except (OSError, ValueError):
        return None
    return data if isinstance(data, dict) and "ra_dark_hours" in data else None


def _write(path: Path, offer: SemesterOffer) -> None:
    """Store atomically (write then rename), so a reader never sees half a file; a read-only disk is not an error."""
    try:
        path.parent.mkdir(parents=True, exist_ok=True)
        partial = path.with_suffix(f".{os.getpid()}.{threading.get_ident()}.tmp")
        partial.write_text(json.dumps(offer))
        partial.replace(path)
    except OSError:
        pass

"""The semester plan the simulation dispatches: time slots, and which request can use which slot.

The semester's night time (the sky grid's instants with the Sun below the loosest
twilight of the instruments involved) is cut into *slots*: runs of consecutive
instants within one night, ``slot_minutes`` long (the night's last slot may be
shorter). A request can use a slot when, at at least half of the slot's instants,
its target is usable as the sky checks define it (:func:`request_instants`: true
night for its instrument's twilight, within the airmass, altitude, horizon and
time-window limits, meeting the Moon constraints) on a night its instrument is
mounted and the telescope open. Whether the weather and the seeing allow it is
decided per realisation by the dispatcher (:mod:`feasibility.engine.simulate_dispatch`).

Each slot also belongs to a *bucket* for the accounts: the instrument mounted that
night (``"any"`` without a schedule) and the slot's lunar time, as the engine
defines it (:data:`sky_checks.DARK_ILLUMINATION`, :data:`sky_checks.GREY_ILLUMINATION`),
taken at the slot's middle instant. A slot counts as offered to the night's instrument
when at least half of its instants lie in that instrument's true night (the rule for requests).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
from numpy.typing import NDArray

from feasibility.documents import Instrument, InstrumentSchedule, ObservationRequest, Observatory
from feasibility.documents.observatory import TWILIGHT_SUN_ALTITUDE_DEG
from feasibility.documents.proposal import SKY_ILLUMINATION, Target
from feasibility.engine.airmass import limit_altitude
from feasibility.engine.exposure_checks import diffraction_fwhm_arcsec, seeing_fwhm_arcsec
from feasibility.engine.positions import along, target_vector
from feasibility.engine.sky_checks import DARK_ILLUMINATION, GREY_ILLUMINATION, night_availability
from feasibility.engine.sky_masks import in_windows, visible_mask
from feasibility.engine.skygrid import NightSamples, SkyGrid
from feasibility.engine.tracks import track_for

__all__ = [
    "ANY_INSTRUMENT",
    "DEFAULT_SLOT_MINUTES",
    "LUNAR_TIMES",
    "Plan",
    "PlanRequest",
    "build_plan",
    "lunar_time",
    "request_instants",
    "seeing_limit_ln",
]

#: Length of a slot, the unit of time the dispatcher hands out (minutes).
DEFAULT_SLOT_MINUTES = 30.0
#: The lunar times, darkest first.
LUNAR_TIMES = ("dark", "grey", "bright")
#: The instrument of every night when no schedule is given (every instrument is taken as mounted).
ANY_INSTRUMENT = "any"


@dataclass(frozen=True)
class PlanRequest:
    """One observation request as the simulation needs it (its figures come from the engine's check)."""

    proposal_id: str
    label: str
    request: ObservationRequest
    instrument: Instrument
    hours: float
    """Hours to obtain: the engine's hours needed for the goal at the design point, or the hours requested."""
    rank: float = 0.0
    """The proposal's rank: smaller goes first; equal by default."""
    airmass: float = 1.0
    """The airmass the seeing limit is judged at (the median over the usable time)."""
    wavelength_nm: float = 500.0


@dataclass(frozen=True)
class Plan:
    """What the dispatcher needs, as arrays: requests (``k``) and slots (``s``).

    ``candidates[s]`` lists the requests that can use slot ``s`` (weather and seeing
    permitting). ``bucket_of_slot[s]`` indexes ``buckets`` (−1: a closed night's slot).
    """

    hours_needed: NDArray[np.float64]
    rank: NDArray[np.float64]
    ln_seeing_limit: NDArray[np.float64]
    """Per request, the largest ln zenith seeing at 500 nm it accepts (+inf: no limit; −inf: never)."""
    slot_night: NDArray[np.intp]
    slot_hours: NDArray[np.float64]
    candidates: list[NDArray[np.intp]]
    bucket_of_slot: NDArray[np.intp] = field(default_factory=lambda: np.zeros(0, dtype=np.intp))
    buckets: list[tuple[str, str]] = field(default_factory=list)
    """(instrument, lunar time) of each bucket."""

    @property
    def n_requests(self) -> int:
        return int(self.hours_needed.size)

    @property
    def n_slots(self) -> int:
        return int(self.slot_hours.size)


def build_plan(
    requests: list[PlanRequest],
    observatory: Observatory,
    grid: SkyGrid,
    schedule: InstrumentSchedule | None,
    slot_minutes: float = DEFAULT_SLOT_MINUTES,
) -> Plan:
    """Cut ``grid``'s nights into slots and find, for every request, the slots it can use."""
    twilights = {r.instrument.twilight for r in requests} or {"astronomical"}
    if schedule is not None:
        twilights |= {i.twilight for i in observatory.instruments}
    loosest = max(TWILIGHT_SUN_ALTITUDE_DEG[t] for t in twilights)
    view = grid.samples(loosest)
    starts, counts, nights = _slots(view, max(1, round(slot_minutes / grid.step_minutes)))
    middle = starts + counts // 2

    night_instrument = _night_instruments(grid, schedule)
    lunar = lunar_time(view, middle)
    buckets: list[tuple[str, str]] = []
    bucket_index: dict[tuple[str, str], int] = {}
    bucket_of_slot = np.full(starts.size, -1, dtype=np.intp)
    limits = {i.name: TWILIGHT_SUN_ALTITUDE_DEG[i.twilight] for i in observatory.instruments}
    dark_enough = (
        {  # per twilight limit: whether at least half of each slot's instants lie below it (as for requests)
            limit: 2 * np.add.reduceat((view.sun_alt_deg < limit).view(np.uint8), starts, dtype=np.int32) >= counts for limit in {*limits.values(), loosest}
        }
        if starts.size
        else {}
    )
    for s, night in enumerate(nights.tolist()):
        name = night_instrument[night]
        if name is not None and name != ANY_INSTRUMENT:
            known = observatory.instrument_named(name)
            name = known.name if known is not None else name
        if name is None or not dark_enough[limits.get(name, loosest)][s]:
            continue
        key = (name, LUNAR_TIMES[lunar[s]])
        if key not in bucket_index:
            bucket_index[key] = len(buckets)
            buckets.append(key)
        bucket_of_slot[s] = bucket_index[key]

    usable = np.zeros((starts.size, len(requests)), dtype=bool)
    available: dict[str, NDArray[np.bool_]] = {}
    for k, item in enumerate(requests):
        name = item.instrument.name
        if name not in available:
            available[name] = night_availability(grid, name, schedule)
        mask = request_instants(item.request, observatory, item.instrument, view, available[name], grid)
        if starts.size:
            inside = np.add.reduceat(mask.view(np.uint8), starts, dtype=np.int32)
            usable[:, k] = 2 * inside >= counts
    slot_of, request_of = np.nonzero(usable)
    candidates = np.split(request_of.astype(np.intp), np.searchsorted(slot_of, np.arange(1, starts.size)))

    return Plan(
        hours_needed=np.array([r.hours for r in requests], dtype=float),
        rank=np.array([r.rank for r in requests], dtype=float),
        ln_seeing_limit=np.array([seeing_limit_ln(r, observatory.telescope.aperture_m) for r in requests], dtype=float),
        slot_night=nights.astype(np.intp),
        slot_hours=counts * grid.step_hours,
        candidates=list(candidates) if starts.size else [],
        bucket_of_slot=bucket_of_slot,
        buckets=buckets,
    )


def request_instants(
    request: ObservationRequest,
    observatory: Observatory,
    instrument: Instrument,
    view: NightSamples,
    available: NDArray[np.bool_],
    grid: SkyGrid | None = None,
) -> NDArray[np.bool_]:
    """The instants of ``view`` at which ``request`` is usable: the sky checks' third stage, instant by instant.

    A moving target (a solar-system body) follows its track over ``grid``, which it then needs.

    The same rules as :func:`feasibility.engine.sky_checks.measure_sky` (which reduces
    them to hours per night): :func:`sky_masks.visible_mask` with the request's limits,
    the Sun below the instrument's twilight, the Moon separation while the Moon is up,
    the Moon's illumination, and the nights the instrument is mounted.
    """
    site, telescope, constraints = observatory.site, observatory.telescope, request.constraints
    grid_mid = float(view.mjd[view.size // 2]) if view.size else 51544.5
    target = request.target
    if isinstance(target, Target):
        vector = target_vector(
            target.ra_deg,
            target.dec_deg,
            target.pm_ra_cosdec_mas_yr,
            target.pm_dec_mas_yr,
            target.epoch,
            2000.0 + (grid_mid - 51544.5) / 365.25,
        )
    elif grid is None:
        raise ValueError(f"request {request.label!r}: a moving target needs the semester grid for its track")
    else:
        vector = track_for(target, grid).directions(view)
    sin_alt = along(view.up, vector)
    min_alt = max(limit_altitude(constraints.max_airmass, observatory.airmass_limit_formula), site.min_altitude_deg, telescope.min_altitude_deg)
    windows = in_windows(request.windows, view.mjd) if request.windows else None
    usable = visible_mask(view, vector, sin_alt, min_alt, telescope.max_altitude_deg, site, windows)
    usable &= view.sun_alt_deg < TWILIGHT_SUN_ALTITUDE_DEG[instrument.twilight]
    lit = np.flatnonzero(usable & view.moon_up)
    cos_moon = along(np.take(view.moon, lit, axis=0), vector, lit)
    usable[lit[cos_moon > math.cos(math.radians(constraints.min_moon_separation_deg))]] = False
    limit = 1.0 if constraints.max_moon_illumination is None else constraints.max_moon_illumination
    if constraints.sky is not None:
        limit = min(limit, SKY_ILLUMINATION[constraints.sky])
    if limit < 1.0:
        usable &= view.moon_down_or_within(limit)
    if not available.all():
        usable &= view.on_nights(available)
    return usable


def seeing_limit_ln(item: PlanRequest, aperture_m: float) -> float:
    """The largest ln zenith seeing at 500 nm that gives ``item`` its image-quality limit at its airmass and wavelength.

    The delivered image is the seeing (× X^0.6 × (λ/500 nm)^−0.2) and the Airy FWHM added
    in quadrature, as the image-quality check has it (:mod:`feasibility.engine.exposure_checks`).
    """
    limit = item.request.constraints.max_seeing_arcsec
    if limit is None:
        return math.inf
    diffraction = diffraction_fwhm_arcsec(item.wavelength_nm, aperture_m)
    if limit <= diffraction:
        return -math.inf
    return math.log(math.sqrt(limit**2 - diffraction**2) / seeing_fwhm_arcsec(1.0, item.airmass, item.wavelength_nm))


def lunar_time(view: NightSamples, instants: NDArray[np.intp]) -> NDArray[np.intp]:
    """Lunar time at ``instants`` as an index into :data:`LUNAR_TIMES`: dark, grey (Moon up and brighter) or bright."""
    grey = ~view.moon_down_or_within(DARK_ILLUMINATION)[instants]
    bright = ~view.moon_down_or_within(GREY_ILLUMINATION)[instants]
    return grey.astype(np.intp) + bright.astype(np.intp)


def _slots(view: NightSamples, per_slot: int) -> tuple[NDArray[np.intp], NDArray[np.intp], NDArray[np.intp]]:
    """First instant, number of instants and night of each slot (each night's instants cut into runs of ``per_slot``)."""
    starts, counts, nights = [], [], []
    bounds = view.night_starts
    for night in range(bounds.size - 1):
        lo, hi = int(bounds[night]), int(bounds[night + 1])
        first = np.arange(lo, hi, per_slot)
        starts.append(first)
        counts.append(np.minimum(first + per_slot, hi) - first)
        nights.append(np.full(first.size, night))
    if not starts:
        empty = np.zeros(0, dtype=np.intp)
        return empty, empty, empty
    return (np.concatenate(starts).astype(np.intp), np.concatenate(counts).astype(np.intp), np.concatenate(nights).astype(np.intp))


def _night_instruments(grid: SkyGrid, schedule: InstrumentSchedule | None) -> list[str | None]:
    """The instrument mounted each night (None: closed), or :data:`ANY_INSTRUMENT` every night without a schedule."""
    if schedule is None:
        return [ANY_INSTRUMENT] * grid.n_nights
    mounted: list[str | None] = [None] * grid.n_nights
    for entry in schedule.nights:
        index = (entry.night - grid.first_night).days
        if 0 <= index < grid.n_nights and entry.status == "open" and entry.instrument:
            mounted[index] = entry.instrument
    return mounted

"""The sky findings: visibility, moon, schedule and sun-safety, each explaining itself.

A finding that is not ``feasible`` says three things: what limits the request
(the airmass limit, the time windows, the Moon constraints, the schedule...),
the threshold it missed with both numbers ("2.6 h expected clear < 1.5× 2.0 h
requested (3.0 h)"), and a suggestion with a figure the engine computed for it
("airmass limit 2.3 would give 12.4 h"), from a :class:`~feasibility.engine.what_if.SkyProbe`.
Every number goes through :mod:`feasibility.engine.wording`.

Levels (common-practice margins, shared by visibility, moon and schedule; see
docs/references.md): a stage is ``infeasible`` when its hours, even with every
night clear, fall short of the hours needed, or when its expected clear hours
do; ``marginal`` when its expected clear hours are under :data:`MARGIN` times
the hours needed. A request with time windows is time-critical: an
expected-clear shortfall alone makes it ``marginal``.
"""

from __future__ import annotations

import functools
import math
from collections import Counter
from datetime import date
from typing import TYPE_CHECKING

import numpy as np
from numpy.typing import NDArray

from feasibility.documents import InstrumentSchedule
from feasibility.documents.proposal import SKY_ILLUMINATION
from feasibility.engine import wording as w
from feasibility.engine.airmass import formula_label
from feasibility.results import Finding, Level

if TYPE_CHECKING:
    from feasibility.engine.sky_checks import SkyMeasure
    from feasibility.engine.what_if import Hours, SkyProbe

__all__ = [
    "MARGIN",
    "SUN_MARGIN_DEG",
    "level_for_hours",
    "moon_finding",
    "schedule_finding",
    "shortfall",
    "sun_safety_finding",
    "visibility_finding",
]

#: Expected clear hours under this multiple of the hours needed make a stage marginal (common practice).
MARGIN = 1.5
#: A closest approach to the Sun within this many degrees beyond the telescope's limit is flagged.
SUN_MARGIN_DEG = 5.0
#: The largest airmass limit a request may give (Constraints.max_airmass), the end of the search for one that fits.
_LARGEST_AIRMASS_LIMIT = 6.0

_GRID_METHOD = (
    "semester sky grid sampled every {step:g} min: ICRS to horizon rotation from ERFA (IAU 2006/2000A "
    "precession-nutation, Earth rotation angle with UT1 from astropy's IERS table), held to astropy's "
    "AltAz (no refraction) within 0.05 deg; Sun and Moon from ERFA epv00 and moon98 (Meeus)"
)


def level_for_hours(clear: float, every_night_clear: float, needed: float, time_critical: bool) -> Level:
    """The level of a stage from its expected clear hours and its hours with every night clear (module docstring)."""
    if every_night_clear <= 0.0 or every_night_clear < needed:
        return Level.INFEASIBLE
    if clear < needed:
        return Level.MARGINAL if time_critical else Level.INFEASIBLE
    if clear < MARGIN * needed:
        return Level.MARGINAL
    return Level.FEASIBLE


def shortfall(clear: float, every_night: float, needed: float, time_critical: bool, what: str = "requested") -> str | None:
    """The threshold a stage missed, both numbers named; None when it missed none."""
    if every_night <= 0.0:
        return f"no hours at all < {w.hours(needed)} {what}"
    if every_night < needed:
        return f"{w.hours(every_night)} even with every night clear < {w.hours(needed)} {what}"
    if clear < needed:
        text = f"{w.hours(clear)} expected clear < {w.hours(needed)} {what}"
        return text + " (time-critical: a weather risk)" if time_critical else text
    if clear < MARGIN * needed:
        return f"{w.hours(clear)} expected clear < {w.ratio(MARGIN)} the {w.hours(needed)} {what} ({w.hours(MARGIN * needed)})"
    return None


def _fits(hours: Hours, needed: float, time_critical: bool) -> bool:
    return level_for_hours(hours.clear, hours.total, needed, time_critical) is Level.FEASIBLE


def _gives(hours: Hours) -> str:
    return f"{w.hours(hours.total)} ({w.hours(hours.clear)} expected clear)"


def _at_most(clear: float) -> str | None:
    """Suggest the hours the expected clear time can carry with the margin."""
    if clear <= 0.0:
        return None
    return f"request at most {w.hours(clear / MARGIN)} (the {w.hours(clear)} expected clear / {w.ratio(MARGIN)})"


def _join(parts: list[str | None]) -> str | None:
    kept = [p for p in parts if p]
    if not kept:
        return None
    text = "; or ".join(kept)
    return text[0].upper() + text[1:] + "."


# --- visibility ---------------------------------------------------------------------------------


def visibility_finding(sky: SkyMeasure) -> Finding:
    """The visibility check: hours above the limits in true night, within windows."""
    hours, clear = sky.total_visible, sky.clear_visible
    needed = sky.hours_requested
    level = level_for_hours(clear, hours, needed, sky.has_windows)
    nights = int(np.count_nonzero(sky.visible))
    limit = f"airmass {w.airmass(sky.airmass_limit)} ({formula_label(sky.airmass_formula)}; altitude {w.degrees(sky.min_altitude_deg)})"
    where = f"above {limit} in {sky.twilight} night" + (" within the time windows" if sky.has_windows else "")
    never_up = not math.isfinite(sky.lowest_airmass)
    if hours <= 0.0:
        if never_up:
            message = f"Never rises in {sky.twilight} night this semester."
        elif sky.has_windows:
            message = f"Not {where} at any time (lowest airmass in true night this semester {w.airmass(sky.lowest_limit_airmass)})."
        elif sky.lowest_limit_airmass > sky.airmass_limit:
            message = f"Never {where}: its lowest airmass in true night is {w.airmass(sky.lowest_limit_airmass)}."
        else:
            message = f"Never {where} while clear of the site's horizon and the telescope's limits."
    else:
        message = f"{w.hours(hours)} {where} over {w.count(nights, 'night')}; {w.hours(clear)} expected clear; {w.hours(needed)} requested."
    suggestion = None
    cause = None
    if level is not Level.FEASIBLE:
        cause = _visibility_cause(sky)
        missed = shortfall(clear, hours, needed, sky.has_windows)
        message += f" Limited by {cause}: {missed}."
        suggestion = _visibility_suggestion(sky, never_up)
    return Finding(
        check="visibility",
        level=level,
        message=message,
        figures={
            "hours_requested": sky.hours_requested,
            "hours_visible": round(hours, 2),
            "hours_visible_clear": round(clear, 2),
            "nights_visible": nights,
            "hours_true_night": round(float(sky.hours_night.sum()), 1),
            "twilight": sky.twilight,
            "sun_altitude_limit_deg": sky.sun_limit_deg,
            "airmass_limit": sky.airmass_limit,
            "airmass_limit_formula": sky.airmass_formula,
            "min_altitude_deg": round(sky.min_altitude_deg, 2),
            "max_altitude_deg": sky.max_altitude_deg,
            "lowest_airmass": round(sky.lowest_limit_airmass, 3) if math.isfinite(sky.lowest_limit_airmass) else None,
            "highest_altitude_deg": round(sky.highest_altitude_deg, 2),
            "margin": MARGIN,
            "hours_needed_with_margin": round(MARGIN * needed, 2),
            "limited_by": cause,
            "usable_night_fraction_mean": round(float(sky.weather.sum()) / sky.weather.size, 3),  # (the mean, cheaper)
        },
        suggestion=suggestion,
        method=_visibility_method(sky.step_minutes),
    )


def _visibility_cause(sky: SkyMeasure) -> str:
    if not math.isfinite(sky.lowest_airmass):
        return "the target's declination (it never rises in true night)"
    if sky.has_windows:
        return "the time windows"
    probe = sky.probe
    if probe is not None and not probe.airmass_binds(sky.airmass_limit):
        return f"the site's and telescope's lowest altitude ({w.degrees(probe.floor_alt)})"
    return f"the airmass limit {w.airmass(sky.airmass_limit)}"


def _visibility_suggestion(sky: SkyMeasure, never_up: bool) -> str | None:
    if never_up:
        return (
            f"Its highest altitude in {sky.twilight} night this semester is {w.degrees(sky.highest_altitude_deg)}: "
            "no limit brings it up; propose it in a semester when it is up at night, or at a site where it rises."
        )
    probe = sky.probe
    needed = sky.hours_requested
    parts: list[str | None] = []
    if probe is not None and sky.has_windows:
        parts.append(f"without the time windows it would have {_gives(probe.visible(windows=False))}")
    if probe is not None and probe.airmass_binds(sky.airmass_limit):
        parts.append(_airmass_that_fits(sky, probe, needed))
    elif sky.lowest_limit_airmass > _LARGEST_AIRMASS_LIMIT:
        parts.append(
            f"its lowest airmass in true night is {w.airmass(sky.lowest_limit_airmass)}, above any limit a request "
            f"may give ({w.airmass(_LARGEST_AIRMASS_LIMIT)}): propose it in a semester when it is up longer at night"
        )
    parts.append(_at_most(sky.clear_visible))
    return _join(parts)


def _airmass_that_fits(sky: SkyMeasure, probe: SkyProbe, needed: float) -> str | None:
    """The smallest airmass limit (0.1 steps) that makes visibility feasible, with the hours it gives."""
    # In tenths from just above the limit up to the largest (k / 10 is the double round(k * 0.1, 1) gives).
    candidates = [k / 10 for k in range(math.floor(sky.airmass_limit * 10 + 1), round(_LARGEST_AIRMASS_LIMIT * 10) + 1)]
    candidates = [c for c in candidates if probe.airmass_binds(c) or c == candidates[0]]
    if not candidates:
        return None
    # Hours grow with the limit. The first limit that fits is usually among the first few, which need no horizon
    # profile (what_if.SkyProbe.visible): gallop up from the smallest (0, 1, 3, 7...) to the first that fits, then
    # bisect between it and the last that missed; the same limit as a bisection over all, for less work.
    high, missed, at = len(candidates) - 1, -1, 0
    hours = probe.visible(candidates[at])
    while not _fits(hours, needed, sky.has_windows):
        if at == high:
            if hours.total <= sky.total_visible:
                return None
            return f"even airmass limit {w.airmass(candidates[high])} would give only {_gives(hours)}"
        missed, at = at, min(high, 2 * at + 1)
        hours = probe.visible(candidates[at])
    best = (candidates[at], hours)
    low, high = missed + 1, at
    while low < high:
        middle = (low + high) // 2
        hours = probe.visible(candidates[middle])
        if _fits(hours, needed, sky.has_windows):
            best, high = (candidates[middle], hours), middle
        else:
            low = middle + 1
    return f"airmass limit {w.airmass(best[0])} would give {_gives(best[1])}"


# --- moon --------------------------------------------------------------------------------------


def moon_finding(sky: SkyMeasure) -> Finding:
    """The moon check: of the visible hours, those meeting the Moon separation and illumination constraints."""
    visible, hours, clear = sky.total_visible, sky.total_observable, sky.clear_observable
    needed = sky.hours_requested
    level = level_for_hours(clear, hours, needed, sky.has_windows)
    constraint = sky.moon_constraint
    separation = float(constraint["min_moon_separation_deg"])  # type: ignore[arg-type]
    illumination = float(constraint["max_moon_illumination"])  # type: ignore[arg-type]
    rule = f"at least {w.degrees(separation)} away, illumination at most {w.fraction(illumination)} while up"
    lost = visible - hours
    if visible <= 0.0:
        message = "No visible hours (see visibility), so none to test against the Moon constraints."
    else:
        message = (
            f"{w.hours(hours)} of the {w.hours(visible)} visible meet the Moon constraints ({rule}); "
            f"{w.hours(clear)} expected clear; median sky {w.magnitude(sky.sky_mag_median)} mag/arcsec² in "
            f"{sky.sky_band} (dark sky {w.magnitude(sky.dark_sky_mag)})."
        )
    suggestion = None
    if level is not Level.FEASIBLE:
        missed = shortfall(clear, hours, needed, sky.has_windows)
        if visible > 0.0:
            message += f" Limited by the Moon constraints ({w.hours(lost)} lost to them): {missed}."
        else:
            message += f" {missed[0].upper() + missed[1:] if missed else ''}."
        suggestion = _moon_suggestion(sky, separation, illumination)
    return Finding(
        check="moon",
        level=level,
        message=message,
        figures={
            "hours_visible": round(visible, 2),
            "hours_observable": round(hours, 2),
            "hours_observable_clear": round(clear, 2),
            "hours_lost_to_moon": round(lost, 2),
            "min_moon_separation_deg": constraint["min_moon_separation_deg"],  # type: ignore[dict-item]
            "max_moon_illumination": constraint["max_moon_illumination"],  # type: ignore[dict-item]
            "sky": constraint["sky"],  # type: ignore[dict-item]
            "moon_separation_min_deg": None if sky.moon_separation_min_deg is None else round(sky.moon_separation_min_deg, 1),
            "sky_band": sky.sky_band,
            "sky_mag_arcsec2": round(sky.sky_mag_median, 2),
            "dark_sky_mag_arcsec2": round(sky.dark_sky_mag, 2),
            "moon_brightening_mag": round(sky.dark_sky_mag - sky.sky_mag_median, 2),
            "margin": MARGIN,
            "hours_needed_with_margin": round(MARGIN * needed, 2),
        },
        suggestion=suggestion,
        method=(
            "Moon topocentric from ERFA moon98 on the semester grid; constraints apply while the Moon's centre is above "
            "the horizon; dark: illumination <= 0.3 or Moon down, grey: <= 0.7; moonlit sky Krisciunas & Schaefer (1991) "
            "eqs. 1-3, 15-20 added to the site's dark sky, carried from V with the Sun's colours (approximation)"
        ),
    )


def _moon_suggestion(sky: SkyMeasure, separation: float, illumination: float) -> str | None:
    probe = sky.probe
    if sky.total_visible <= 0.0:
        return "See visibility: the target must first be visible."
    if probe is None:
        return None
    needed = sky.hours_requested
    parts: list[str | None] = []
    now = sky.total_observable
    for name, limit in sorted(SKY_ILLUMINATION.items(), key=lambda item: item[1]):
        if limit > illumination:
            hours = probe.observable(max_illumination=limit)
            if hours.total <= now:
                continue
            if _fits(hours, needed, sky.has_windows) or limit >= 1.0:
                parts.append(f"{name} time (illumination at most {w.fraction(limit)}) would give {_gives(hours)}")
                break
    if separation > 0.0:
        for smaller in sorted({max(0.0, separation - step) for step in (10.0, 20.0, separation)}, reverse=True):
            hours = probe.observable(min_separation_deg=smaller)
            if hours.total <= now:
                continue
            if _fits(hours, needed, sky.has_windows) or smaller == 0.0:
                parts.append(f"a Moon separation of {w.degrees(smaller)} would give {_gives(hours)}")
                break
    if parts:
        parts[-1] = f"{parts[-1]}, if the signal-to-noise allows"
    parts.append(_at_most(sky.clear_observable))
    return _join(parts)


# --- schedule ----------------------------------------------------------------------------------


def schedule_finding(sky: SkyMeasure, hours_needed: float | None, schedule: InstrumentSchedule | None = None) -> Finding:
    """The schedule check and the overall time comparison: the usable hours against the larger of the
    requested hours and the hours the goal needs (from the exposure checks)."""
    observable, hours, clear = sky.total_observable, sky.total_usable, sky.clear_usable
    need = sky.hours_requested
    goal_decides = hours_needed is not None and math.isfinite(hours_needed) and hours_needed > sky.hours_requested
    if goal_decides and hours_needed is not None:
        need = max(need, hours_needed)
    level = level_for_hours(clear, hours, need, sky.has_windows)
    nights = int(np.count_nonzero(sky.usable))
    if sky.schedule_given:
        where = f"on the {w.count(sky.nights_scheduled, 'night')} the instrument is scheduled"
    else:
        where = "with no instrument schedule given (every night assumed available)"
    if observable <= 0.0:
        message = f"No observable hours (see visibility and moon) to place {where}"
    else:
        message = f"{w.hours(hours)} of the {w.hours(observable)} observable fall {where}; {w.hours(clear)} expected clear over {w.count(nights, 'night')}"
    if goal_decides:
        message += f"; the goal needs {w.hours(need)} with overheads ({w.hours(sky.hours_requested)} requested)."
    else:
        message += f"; {w.hours(need)} needed."
    suggestion = None
    if level is not Level.FEASIBLE:
        what = "needed by the goal" if goal_decides else "requested"
        missed = shortfall(clear, hours, need, sky.has_windows, what)
        if goal_decides and level_for_hours(clear, hours, sky.hours_requested, sky.has_windows).rank < level.rank:
            message += f" Limited by the hours the goal needs: {missed}."
        elif sky.schedule_given and hours < observable:
            lost = _nights_lost(sky, schedule) if schedule is not None else None
            message += f" Limited by the instrument schedule: {missed}"
            message += f"; {lost}." if lost else "."
        else:
            message += f" {missed[0].upper() + missed[1:] if missed else ''}."
        suggestion = _schedule_suggestion(sky, goal_decides, clear)
    return Finding(
        check="schedule",
        level=level,
        message=message,
        figures={
            "hours_observable": round(observable, 2),
            "hours_usable": round(hours, 2),
            "hours_usable_clear": round(clear, 2),
            "nights_scheduled": sky.nights_scheduled,
            "nights_usable": nights,
            "hours_requested": sky.hours_requested,
            "hours_needed": None if hours_needed is None or not math.isfinite(hours_needed) else round(hours_needed, 2),
            "hours_compared": round(need, 2),
            "time_ratio": round(clear / need, 3) if need > 0 else None,
            "margin": MARGIN,
            "hours_needed_with_margin": round(MARGIN * need, 2),
            "schedule_given": sky.schedule_given,
        },
        suggestion=suggestion,
        method="instrument schedule nights (open, instrument mounted) intersected with the observable instants; "
        "expected clear hours by climate.usable_night_fraction",
    )


def _nights_lost(sky: SkyMeasure, schedule: InstrumentSchedule) -> str | None:
    """What the schedule says about the nights the request could use but the instrument is not on:
    shutdown and engineering nights with their notes, other instruments, nights not listed."""
    if sky.has_windows and sky.window_night_mask is not None:
        wanted = sky.window_night_mask
        lead = "the time windows fall on"
    else:
        wanted = sky.observable > 0.0
        lead = f"the target is observable {w.hours(float(sky.observable[wanted & ~sky.available].sum()))} on"
    lost = np.flatnonzero(wanted & ~sky.available)
    if not lost.size:
        return None
    codes, kinds = _night_kinds(schedule, sky.nights)
    lost_codes = codes[lost]
    counts = Counter(lost_codes.tolist())  # most_common: most nights first, ties in the order first met
    groups = ", ".join(f"{count} {kinds[code]}" for code, count in counts.most_common())
    return f"{lead} {w.count(int(lost.size), 'night')} without {sky.instrument}: {groups}"


#: Per (schedule, nights) object identities: each night's kind as a code and the kinds' words (a few entries).
_NIGHT_KINDS: dict[tuple[int, int], tuple[InstrumentSchedule, list[date], NDArray[np.intp], list[str]]] = {}


def _night_kinds(schedule: InstrumentSchedule, nights: list[date]) -> tuple[NDArray[np.intp], list[str]]:
    """Each night's kind for :func:`_nights_lost` (closed, shutdown with its note, another instrument), worked out
    once per schedule and grid: identity-checked, as the schedule is the same object across a run's proposals."""
    key = (id(schedule), id(nights))
    cached = _NIGHT_KINDS.get(key)
    if cached is not None and cached[0] is schedule and cached[1] is nights:
        return cached[2], cached[3]
    entries = {entry.night: entry for entry in schedule.nights}
    index: dict[str, int] = {}
    codes = np.empty(len(nights), dtype=np.intp)
    for i, night in enumerate(nights):
        entry = entries.get(night)
        if entry is None:
            kind = "closed nights (not in the schedule)"
        elif entry.status != "open":
            kind = f"{entry.status} nights" + (f" ({entry.note})" if entry.note else "")
        else:
            kind = f"nights with {entry.instrument}"
        codes[i] = index.setdefault(kind, len(index))
    if len(_NIGHT_KINDS) >= 32:
        _NIGHT_KINDS.clear()
    _NIGHT_KINDS[key] = (schedule, nights, codes, list(index))
    return codes, list(index)


def _schedule_suggestion(sky: SkyMeasure, goal_decides: bool, clear: float) -> str | None:
    parts: list[str | None] = []
    if goal_decides:
        if clear > 0.0:
            parts.append(f"the usable nights give {w.hours(clear)} expected clear: a goal that needs at most {w.hours(clear / MARGIN)} fits (see sensitivity)")
        else:
            parts.append("see sensitivity: the goal's time is not available")
    probe = sky.probe
    if sky.schedule_given and sky.total_usable < sky.total_observable and probe is not None:
        if sky.has_windows:
            parts.append(f"outside the time windows, the nights {sky.instrument} is scheduled give {_gives(probe.usable(windows=False))}")
        unscheduled = sky.total_observable - sky.total_usable
        unscheduled_clear = sky.clear_observable - sky.clear_usable
        parts.append(
            f"ask the observatory whether {sky.instrument} can be scheduled on nights when the target is observable "
            f"({w.hours(unscheduled)}, {w.hours(unscheduled_clear)} expected clear, fall on other nights)"
        )
    elif not goal_decides:
        parts.append(_at_most(clear))
    return _join(parts)


# --- sun-safety --------------------------------------------------------------------------------


def sun_safety_finding(sky: SkyMeasure) -> Finding:
    """The sun-safety check: the closest approach to the Sun while the target is visible.

    ``infeasible`` when the target is never visible farther from the Sun than the
    telescope's limit, ``marginal`` when it comes closer than the limit plus
    ``SUN_MARGIN_DEG`` at some visible time, or when it is never visible at night
    and stands inside the limit (a warning against trying it in twilight or
    daylight), else ``feasible``. A message that warns never comes with a
    ``feasible`` level. Always defers to the observatory's own safety rules and staff.
    With time windows, "never visible" and the closest approach speak of the windows' nights.
    """
    limit = sky.min_sun_separation_limit_deg
    visible = sky.total_visible
    closest = sky.sun_separation_min_deg if visible > 0.0 else sky.sun_separation_min_all_deg
    defer = "The observatory's own Sun-safety rules and its staff decide; follow them."
    span = "within the time windows" if sky.has_windows else "this semester"
    at_midnight = "at local midnight of the windows' nights" if sky.has_windows else "at local midnight"
    safe_hours = visible - sky.hours_sun_unsafe
    suggestion: str | None
    if closest < limit and visible > 0.0:
        level = Level.INFEASIBLE if sky.hours_sun_unsafe >= visible else Level.MARGINAL
        message = (
            f"WARNING: the target comes within {w.degrees(closest)} of the Sun while visible, closer than the telescope's "
            f"{w.degrees(limit)} limit ({w.hours(sky.hours_sun_unsafe)} of {w.hours(visible)} visible hours): "
            f"{w.degrees(closest)} < {w.degrees(limit)}. {defer}"
        )
        if safe_hours > 0.0:
            suggestion = f"Do not point there: {w.hours(safe_hours)} of the visible hours keep farther than {w.degrees(limit)} from the Sun; observe only then."
        else:
            suggestion = f"Do not point there: no visible hour {span} keeps {w.degrees(limit)} from the Sun; choose another semester."
    elif closest < limit:
        # Never visible at night, yet near the Sun: anyone trying to catch it in twilight or
        # daylight would point inside the limit, so a reviewer must see the warning.
        level = Level.MARGINAL
        message = (
            f"WARNING: the target is never visible at night {span} and stands within {w.degrees(closest)} of the Sun "
            f"({at_midnight}), inside the telescope's {w.degrees(limit)} limit: {w.degrees(closest)} < "
            f"{w.degrees(limit)}; do not try it in twilight or daylight. {defer}"
        )
        suggestion = (
            f"Its farthest from the Sun {span} is {w.degrees(sky.sun_separation_max_deg)} ({at_midnight}); "
            "choose a time when the target is up at night, far from the Sun."
        )
    elif closest < limit + SUN_MARGIN_DEG:
        level = Level.MARGINAL if visible > 0.0 else Level.FEASIBLE
        when = "while visible" if visible > 0.0 else f"{at_midnight} {span} (never visible)"
        message = (
            f"The target comes within {w.degrees(closest)} of the Sun {when}, near the telescope's {w.degrees(limit)} "
            f"limit: {w.degrees(closest)} < {w.degrees(limit + SUN_MARGIN_DEG)} (the limit + {w.degrees(SUN_MARGIN_DEG)} "
            f"margin). {defer}"
        )
        far = visible - sky.hours_sun_near
        suggestion = (
            f"Plan the observation for when the target is farthest from the Sun: {w.hours(far)} of the visible hours "
            f"keep more than {w.degrees(limit + SUN_MARGIN_DEG)} away."
            if visible > 0.0
            else None
        )
    else:
        level = Level.FEASIBLE
        when = "while visible" if visible > 0.0 else f"{at_midnight} {span} (never visible)"
        message = f"Closest approach to the Sun {when}: {w.degrees(closest)} (limit {w.degrees(limit)})."
        suggestion = None
    if sky.sun_note:  # a moving target: followed night by night; a comet near perihelion warns plainly
        message += " " + sky.sun_note
        if sky.sun_note_warns and level is Level.FEASIBLE:
            level = Level.MARGINAL
    return Finding(
        check="sun-safety",
        level=level,
        message=message,
        figures={
            "sun_separation_min_deg": round(closest, 2),
            "sun_separation_min_semester_deg": round(sky.sun_separation_min_all_deg, 2),
            "min_sun_separation_deg": limit,
            "sun_margin_deg": SUN_MARGIN_DEG,
            "hours_closer_than_limit": round(sky.hours_sun_unsafe, 2),
            "hours_within_margin": round(sky.hours_sun_near, 2),
        },
        suggestion=suggestion,
        method="angular distance to the Sun's geocentric direction at each night's local midnight (ERFA epv00), "
        "over the target's visible instants; the Sun moves under 0.6 deg in a night",
    )


@functools.lru_cache(maxsize=16)
def _visibility_method(step_minutes: float) -> str:
    """The visibility finding's method text (formatted once per grid step)."""
    return (
        _GRID_METHOD.format(step=step_minutes) + "; airmass limits in the observatory's stated formula (plain sec z unless it says Hardie 1962, Kasten & Young "
        "1989 or Young 1994); twilight: Sun's centre at -6/-12/-18 deg (U.S. Naval Observatory); "
        "expected clear hours weight each night by climate.usable_night_fraction of its month"
    )

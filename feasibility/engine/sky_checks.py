"""The sky checks of one observation request: visibility, moon, schedule and sun-safety.

:func:`measure_sky` runs the request's target over the semester sky grid in plain
NumPy (one matrix–vector product over every instant gives the sine of the
target's altitude, compared with the sines of the limits; its distance from the
Moon is computed only at the visible instants with the Moon up) and reduces the
instants to hours per night at each stage, as boolean masks over the instants
summed night by night:

1. *visible*: true night for the instrument's twilight, above the airmass limit,
   the site's minimum altitude, the horizon profile and the telescope's lower
   limit, below its upper limit, inside the request's time windows;
2. *observable*: of those, the instants meeting the Moon constraints (they apply
   only while the Moon is up);
3. *usable*: of those, the nights the instrument is mounted and the telescope open.

Each stage's hours are also given as *expected clear* hours: each night weighted
by the site's usable-night fraction for its month.

The findings built from a :class:`SkyMeasure` (their levels, thresholds and
computed suggestions) are in :mod:`feasibility.engine.sky_findings`, re-exported
here; the first-stage mask is :func:`feasibility.engine.sky_masks.visible_mask`.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from datetime import date

import numpy as np
from numpy.typing import NDArray

from feasibility.documents import Instrument, InstrumentSchedule, ObservationRequest, Observatory
from feasibility.documents.observatory import TWILIGHT_SUN_ALTITUDE_DEG, Site
from feasibility.documents.proposal import SKY_ILLUMINATION, Target
from feasibility.engine.airmass import airmass_at, altitude_for_airmass, limit_airmass, limit_altitude
from feasibility.engine.conditions import Conditions, nearest_rank, nearest_rank_index
from feasibility.engine.horizon import horizon_altitude
from feasibility.engine.moonsky import dark_sky_nl, mag_from_nanolamberts, optical_path, sky_components_nl
from feasibility.engine.moving import sun_remark
from feasibility.engine.positions import along, target_vector
from feasibility.engine.sky_findings import (
    MARGIN,
    SUN_MARGIN_DEG,
    level_for_hours,
    moon_finding,
    schedule_finding,
    sun_safety_finding,
    visibility_finding,
)
from feasibility.engine.sky_masks import in_windows, visible_mask, window_nights
from feasibility.engine.skygrid import NightSamples, SkyGrid
from feasibility.engine.spectral_curves import sky_setting
from feasibility.engine.tracks import Track, track_for
from feasibility.engine.what_if import SkyProbe

__all__ = [
    "GREY_ILLUMINATION",
    "DARK_ILLUMINATION",
    "MARGIN",
    "SUN_MARGIN_DEG",
    "SkyMeasure",
    "level_for_hours",
    "measure_sky",
    "moon_finding",
    "night_availability",
    "schedule_finding",
    "sun_safety_finding",
    "visibility_finding",
]

#: Lunar time: dark when the Moon's illuminated fraction is at most this (or the Moon is down).
DARK_ILLUMINATION = SKY_ILLUMINATION["dark"]
#: Grey time: illuminated fraction at most this (or the Moon is down).
GREY_ILLUMINATION = SKY_ILLUMINATION["grey"]
#: Sky brightness is the median over at most this many usable instants, evenly spread in time, to bound the cost
#: (against the median over every instant: within 0.05 mag for 60 random targets, below the K&S model's 8-23 %).
_SKY_SAMPLES = 400


@dataclass
class SkyMeasure:
    """Everything the sky findings and the exposure checks need from one request's pass over the grid."""

    hours_requested: float
    twilight: str
    sun_limit_deg: float
    airmass_limit: float
    airmass_formula: str
    lowest_limit_airmass: float
    """The target's lowest airmass in true night in the limit's formula (comparable with ``airmass_limit``)."""
    min_altitude_deg: float
    max_altitude_deg: float
    step_minutes: float
    has_windows: bool
    window_nights: int
    """Nights the request's time windows touch (0 without windows)."""
    window_night_mask: NDArray[np.bool_] | None
    instrument: str
    available: NDArray[np.bool_]
    """Per night, whether the instrument is mounted and the telescope open."""
    highest_altitude_deg: float
    """The target's highest altitude at any instant of true night this semester (−90 without true night)."""
    schedule_given: bool
    nights: list[date]
    hours_night: NDArray[np.float64]
    visible: NDArray[np.float64]
    observable: NDArray[np.float64]
    usable: NDArray[np.float64]
    instants: tuple[NDArray[np.int32], NDArray[np.int32]]
    """Per night, the instants visible and observable: ``visible``, ``observable`` and ``usable`` are these (the
    latter times ``available``) times the grid's step, so their rounded series come from a table by count."""
    weather: NDArray[np.float64]
    nights_scheduled: int
    lowest_airmass: float
    moon_separation_min_deg: float | None
    sky_band: str
    dark_sky_mag: float
    sky_mag_median: float
    conditions: Conditions
    sun_separation_min_deg: float
    sun_separation_min_all_deg: float
    hours_sun_unsafe: float
    hours_sun_near: float
    """Visible hours closer to the Sun than its limit plus the margin (sky_findings.SUN_MARGIN_DEG)."""
    sun_separation_max_deg: float
    """The farthest the target stands from the Sun at midnight over the considered nights."""
    min_sun_separation_limit_deg: float
    moon_constraint: dict[str, object] = field(default_factory=dict)
    night_curve: dict[str, object] = field(default_factory=dict)
    probe: SkyProbe | None = field(default=None, repr=False, compare=False)
    """What the stages would give with other limits (for the findings' suggestions)."""
    track: Track | None = field(default=None, repr=False, compare=False)
    """A moving target's track (None for a fixed target)."""
    midnight_mjd: NDArray[np.float64] | None = field(default=None, repr=False, compare=False)
    """Each night's local midnight (UTC MJD), for a moving target's per-night figures."""
    sun_note: str | None = None
    """A moving target's remark for the sun-safety finding (a comet near perihelion warns plainly)."""
    sun_note_warns: bool = False

    total_visible: float = field(init=False, default=0.0)
    total_observable: float = field(init=False, default=0.0)
    total_usable: float = field(init=False, default=0.0)
    clear_visible: float = field(init=False, default=0.0)
    clear_observable: float = field(init=False, default=0.0)
    clear_usable: float = field(init=False, default=0.0)

    def __post_init__(self) -> None:
        self.total_visible, self.clear_visible = float(self.visible.sum()), self.clear(self.visible)
        self.total_observable, self.clear_observable = float(self.observable.sum()), self.clear(self.observable)
        self.total_usable, self.clear_usable = float(self.usable.sum()), self.clear(self.usable)

    def clear(self, per_night: NDArray[np.float64]) -> float:
        """Expected clear hours: each night's hours times its month's usable-night fraction."""
        return float(per_night @ self.weather)

    def hours_series(self) -> list[list[float]]:
        """Visible, usable and observable hours per night rounded to 3 decimals (the plot series).

        With the counts of instants kept, each value is looked up in a table of rounded multiples of
        the step (the same float products, rounded the same way), not rounded and converted anew.
        """
        visible, observable = self.instants
        counts = np.stack([visible, observable * self.available, observable])
        return _rounded_steps(self.step_minutes / 60.0, int(counts.max(initial=0)) + 1)[counts].tolist()


def _rounded_steps(step_hours: float, size: int) -> NDArray[np.object_]:
    """``np.round(k * step_hours, 3)`` for k = 0, 1, ... as Python floats (an object array, cached per step)."""
    table = _ROUNDED_STEPS.get(step_hours)
    if table is None or table.size < size:
        counts = np.arange(max(size, 4096 if table is None else 2 * table.size), dtype=np.int32)
        table = _ROUNDED_STEPS[step_hours] = np.array(np.round(counts * step_hours, 3).tolist(), dtype=object)
    return table


#: Per grid step, the rounded hours of every count of instants a night can hold (:meth:`SkyMeasure.hours_series`).
_ROUNDED_STEPS: dict[float, NDArray[np.object_]] = {}


def night_availability(grid: SkyGrid, instrument: str, schedule: InstrumentSchedule | None) -> NDArray[np.bool_]:
    """For each night of ``grid``, whether ``instrument`` is mounted and the telescope open (all True without a schedule)."""
    if schedule is None:
        return np.ones(grid.n_nights, dtype=bool)
    wanted = instrument.lower()
    n_nights = grid.n_nights
    available = np.zeros(n_nights, dtype=bool)
    for entry in schedule.nights:
        index = (entry.night - grid.first_night).days
        if 0 <= index < n_nights and entry.status == "open" and (entry.instrument or "").lower() == wanted:
            available[index] = True
    return available


def measure_sky(
    request: ObservationRequest,
    observatory: Observatory,
    instrument: Instrument,
    grid: SkyGrid,
    available: NDArray[np.bool_],
    weather: NDArray[np.float64],
    schedule_given: bool,
    *,
    night_curve: bool = True,
) -> SkyMeasure:
    """Run ``request``'s target over ``grid`` and reduce it to hours per night at each stage.

    ``available`` (per night) comes from :func:`night_availability`, ``weather``
    (per night) is the usable-night fraction of each night's month. With
    ``night_curve=False`` the representative night's curve (a plot series) is left empty.

    This is the engine's hot path: each stage is a mask over the instants of the
    instrument's true night, per-night hours are one ``reduceat`` per mask, and
    altitudes, airmasses and sky brightness are computed only for the instants
    that qualify (medians commute with those monotonic functions).
    """
    site, telescope, constraints = observatory.site, observatory.telescope, request.constraints
    sun_limit = TWILIGHT_SUN_ALTITUDE_DEG[instrument.twilight]
    view = grid.samples(sun_limit)
    n_nights = grid.n_nights
    step_hours = grid.step_hours

    target = request.target
    track: Track | None = None
    if isinstance(target, Target):
        mid_jyear = 2000.0 + (float(grid.midnight_mjd[n_nights // 2]) - 51544.5) / 365.25
        vector = target_vector(target.ra_deg, target.dec_deg, target.pm_ra_cosdec_mas_yr, target.pm_dec_mas_yr, target.epoch, mid_jyear)
    else:  # a moving target: one topocentric direction per instant (feasibility.engine.tracks)
        track = track_for(target, grid)
        vector = track.directions(view)

    # Stage 1, visible: one product over all instants, then masks over the instants.
    sin_alt = along(view.up, vector)
    formula = observatory.airmass_limit_formula
    min_alt = max(limit_altitude(constraints.max_airmass, formula), site.min_altitude_deg, telescope.min_altitude_deg)
    max_alt = telescope.max_altitude_deg
    windows = in_windows(request.windows, view.mjd) if request.windows else None
    visible = visible_mask(view, vector, sin_alt, min_alt, max_alt, site, windows)

    # Stage 2, observable: the Moon constraints, while the Moon is up (its distance is needed only there).
    moon_limit = _moon_illumination_limit(request)
    lit = np.flatnonzero(visible & view.moon_up)
    cos_moon = along(np.take(view.moon, lit, axis=0), vector, lit)
    observable = visible.copy()
    observable[lit[cos_moon > math.cos(math.radians(constraints.min_moon_separation_deg))]] = False
    if moon_limit < 1.0:
        observable &= view.moon_down_or_within(moon_limit)

    # Stage 3, usable: nights the instrument is mounted and the telescope open.
    everywhere = bool(available.all())
    usable = observable if everywhere else observable & view.on_nights(available)
    visible_per_night = view.per_night(visible)
    hours_visible = visible_per_night * step_hours
    observable_per_night = view.per_night(observable)
    hours_observable = observable_per_night * step_hours
    hours_usable = hours_observable * available
    n_observable = int(observable_per_night.sum())
    n_usable = n_observable if everywhere else int(observable_per_night[available].sum())

    # The filter's climate band, or for a spectrum the smooth curves at its wavelength (spectral_curves).
    sky_model = sky_setting(request, instrument, observatory)
    band, zenith_sky = sky_model.label, sky_model.zenith_mag_arcsec2
    highest = float(sin_alt.max()) if sin_alt.size else -1.0  # no true night at all (polar summer)
    highest_alt = math.degrees(math.asin(min(highest, 1.0))) if highest > 0.0 else -90.0
    lowest_airmass = airmass_at(highest_alt) if highest > 0.0 else math.inf

    k = sky_model.extinction_mag_per_airmass
    if n_observable:
        chosen = np.flatnonzero(usable if n_usable else observable)
        chosen_sin = sin_alt[chosen]
        # The median commutes with monotonic functions of the altitude (airmass, dark sky). One partition gives
        # the (upper) median, the design percentile's rank (conditions.py) and the highest value.
        percent = observatory.climate.design_percentile
        last, middle = chosen_sin.size - 1, chosen_sin.size // 2
        design_rank = nearest_rank_index(chosen_sin.size, 100.0 - percent)
        ranked = np.partition(chosen_sin, sorted({middle, design_rank, last}))
        median_sin = min(float(ranked[middle]), 1.0)
        airmass_median = airmass_at(math.degrees(math.asin(median_sin)))
        airmass_min = airmass_at(math.degrees(math.asin(min(float(ranked[last]), 1.0))))
        step = -(-chosen.size // _SKY_SAMPLES)  # at most _SKY_SAMPLES, evenly spread in time
        sampled = chosen[::step]
        # (With the Moon down its term is zero, whatever the separation.)
        separation = np.degrees(np.arccos(_unit_clip(along(np.take(view.moon, sampled, axis=0), vector, sampled))))
        if sky_model.per_band:
            terms = view.moon_term(k)[sampled]
        else:  # a spectrum's own extinction: eq. 15's I* 10^(-0.4 k X(Z_moon)) from the cached k = 0 term, per sample
            terms = view.moon_term(0.0)[sampled] * np.exp(-0.4 * math.log(10.0) * k * optical_path(90.0 - view.moon_alt_deg[sampled]))
        dark_nl, moon_nl = sky_components_nl(zenith_sky, k, chosen_sin[::step], separation, terms)
        # Magnitudes fall as brightness grows: the median of the nL values gives the median magnitude.
        sky_nl = dark_nl + moon_nl * sky_model.moon_factor
        sky_median = float(mag_from_nanolamberts(_median(sky_nl)))
        # Design conditions (conditions.py): the airmass, and the sky of the moonlit instants the Moon constraints
        # allow (all of them when the Moon is never up then), that the design percentile does not exceed.
        moonlit = sky_nl[moon_nl > 0.0]
        sky_design = float(mag_from_nanolamberts(nearest_rank(moonlit if moonlit.size else sky_nl, percent)))
        airmass_design = airmass_at(math.degrees(math.asin(min(float(ranked[design_rank]), 1.0))))
        median_zenith = 90.0 - math.degrees(math.asin(median_sin))
        dark_sky = float(mag_from_nanolamberts(dark_sky_nl(zenith_sky, k, median_zenith)))
    else:
        airmass_median = airmass_min = lowest_airmass if math.isfinite(lowest_airmass) else constraints.max_airmass
        zenith_deg = 90.0 - altitude_for_airmass(airmass_median)
        sky_median = dark_sky = float(mag_from_nanolamberts(dark_sky_nl(zenith_sky, k, zenith_deg)))
        airmass_design, sky_design = airmass_median, sky_median

    moon_separation_min = math.degrees(math.acos(min(1.0, float(cos_moon.max())))) if cos_moon.size else None

    sun_note: tuple[str | None, bool] = (None, False)
    if track is None:
        cos_sun = grid.sun_vector_midnight @ vector
    else:  # the body's own direction each midnight; nights an ephemeris table leaves out count as the farthest known
        cos_sun = along(grid.sun_vector_midnight, track.geocentric_directions(grid.midnight_mjd))
        known = track.known_at(grid.midnight_mjd)
        if known.any() and not known.all():
            cos_sun[~known] = float(cos_sun[known].min())
        sun_note = sun_remark(track, grid.midnight_mjd, grid.night_names, cos_sun, telescope.min_sun_separation_deg)
    touched = window_nights(request.windows, grid.midnight_mjd) if request.windows else None
    sun_limit_cos = math.cos(math.radians(telescope.min_sun_separation_deg))
    if hours_visible.any():
        seen = hours_visible > 0.0
        sun_min = math.degrees(math.acos(min(1.0, float(cos_sun[seen].max()))))
        sun_unsafe_hours = float(hours_visible[cos_sun > sun_limit_cos].sum())
        sun_near_hours = float(hours_visible[cos_sun > math.cos(math.radians(telescope.min_sun_separation_deg + SUN_MARGIN_DEG))].sum())
    else:
        sun_min, sun_unsafe_hours, sun_near_hours = math.nan, 0.0, 0.0
    # With time windows, "never visible" speaks of the windows' nights, and so does the closest approach.
    considered = cos_sun[touched] if touched is not None and touched.any() else cos_sun
    sun_min_all = math.degrees(math.acos(min(1.0, float(considered.max()))))
    sun_max = math.degrees(math.acos(max(-1.0, float(considered.min()))))

    conditions = Conditions(
        hours_observable=n_observable * step_hours,
        hours_usable=n_usable * step_hours,
        airmass_median=airmass_median,
        airmass_min=airmass_min,
        sky_mag_arcsec2=sky_median,
        sky_band=band,
        airmass_design=airmass_design,
        sky_mag_arcsec2_design=sky_design,
    )
    return SkyMeasure(
        hours_requested=request.hours_requested,
        twilight=instrument.twilight,
        sun_limit_deg=sun_limit,
        airmass_limit=constraints.max_airmass,
        airmass_formula=formula,
        lowest_limit_airmass=limit_airmass(highest_alt, formula),
        min_altitude_deg=min_alt,
        max_altitude_deg=max_alt,
        step_minutes=grid.step_minutes,
        has_windows=bool(request.windows),
        window_nights=int(touched.sum()) if touched is not None else 0,
        window_night_mask=touched,
        instrument=instrument.name,
        available=available,
        highest_altitude_deg=highest_alt if highest > 0.0 else (math.degrees(math.asin(max(highest, -1.0))) if sin_alt.size else -90.0),
        schedule_given=schedule_given,
        nights=grid.nights,
        hours_night=grid.night_hours(sun_limit),
        visible=hours_visible,
        observable=hours_observable,
        usable=hours_usable,
        instants=(visible_per_night, observable_per_night),
        weather=weather,
        nights_scheduled=int(available.sum()),
        lowest_airmass=lowest_airmass,
        moon_separation_min_deg=moon_separation_min,
        sky_band=band,
        dark_sky_mag=dark_sky,
        sky_mag_median=sky_median,
        conditions=conditions,
        sun_separation_min_deg=sun_min,
        sun_separation_min_all_deg=sun_min_all,
        hours_sun_unsafe=sun_unsafe_hours,
        hours_sun_near=sun_near_hours,
        sun_separation_max_deg=sun_max,
        min_sun_separation_limit_deg=telescope.min_sun_separation_deg,
        moon_constraint={
            "min_moon_separation_deg": constraints.min_moon_separation_deg,
            "max_moon_illumination": moon_limit,
            "sky": constraints.sky or "bright",
        },
        night_curve=(
            _night_curve(
                grid,
                vector if track is None else track,
                hours_usable,
                hours_observable,
                hours_visible,
                _NightMarks(
                    view=view,
                    usable=usable,
                    site=site,
                    limit_alt=limit_altitude(constraints.max_airmass, formula),
                    floor_alt=max(site.min_altitude_deg, telescope.min_altitude_deg),
                    airmass_limit=constraints.max_airmass,
                    formula=formula,
                ),
            )
            if night_curve
            else {}
        ),
        probe=SkyProbe(
            view=view,
            vector=vector,
            sin_alt=sin_alt,
            site=site,
            floor_alt=max(site.min_altitude_deg, telescope.min_altitude_deg),
            max_alt=max_alt,
            windows=windows,
            formula=formula,
            airmass_limit=constraints.max_airmass,
            min_moon_separation_deg=constraints.min_moon_separation_deg,
            max_moon_illumination=moon_limit,
            available=available,
            weather=weather,
            step_hours=step_hours,
        ),
        track=track,
        midnight_mjd=grid.midnight_mjd if track is not None else None,
        sun_note=sun_note[0],
        sun_note_warns=sun_note[1],
    )


def _unit_clip(cosines: NDArray[np.float64]) -> NDArray[np.float64]:
    """``np.clip(cosines, -1, 1)`` as two plain ufuncs: the same values, without ``np.clip``'s dispatch (several
    microseconds a call on these short arrays)."""
    return np.minimum(np.maximum(cosines, -1.0), 1.0)


def _median(values: NDArray[np.float64]) -> float:
    """The upper median (no averaging of the two middle values; at grid sampling they differ negligibly)."""
    middle = values.size // 2
    return float(np.partition(values, middle)[middle])


def _moon_illumination_limit(request: ObservationRequest) -> float:
    constraints = request.constraints
    limit = 1.0 if constraints.max_moon_illumination is None else constraints.max_moon_illumination
    if constraints.sky is not None:
        limit = min(limit, SKY_ILLUMINATION[constraints.sky])
    return limit


@dataclass(frozen=True)
class _NightMarks:
    """What the night plot marks beside the altitudes: the limits, and which instants were usable."""

    view: NightSamples
    usable: NDArray[np.bool_]
    site: Site
    limit_alt: float
    floor_alt: float
    airmass_limit: float
    formula: str


def _night_curve(
    grid: SkyGrid,
    target: NDArray[np.float64] | Track,
    usable: NDArray[np.float64],
    observable: NDArray[np.float64],
    visible: NDArray[np.float64],
    marks: _NightMarks | None = None,
) -> dict[str, object]:
    """Altitudes of the target, the Moon and the Sun through one representative night (for plots).

    The night is the one with the most usable hours, else observable, else visible
    hours, else the semester's middle night. The Sun-below-horizon instants are used.
    With ``marks``, the curve also keeps the airmass limit as an altitude (in the
    observatory's limit formula), the lowest altitude the site and mount allow, the
    horizon profile along the target's path, the target's distance from the Moon,
    which instants were usable, and the site's longitude (for local mean solar time).
    ``target`` is a fixed target's unit vector or a moving target's track.
    """
    for hours in (usable, observable, visible):
        if hours.any():
            night = int(np.argmax(hours))
            break
    else:
        night = grid.n_nights // 2
    view = grid.samples(0.0)
    lo, hi = view.night_starts[night], view.night_starts[night + 1]
    if isinstance(target, np.ndarray) and view.size == grid.mjd.size:
        # A fixed target: east, north, up and the Moon in one product over the night's rows of the grid's basis
        # (the Sun-down view holds every instant of the grid, in order), a third of the cost of four.
        east, north, up, moon = (grid.basis[lo:hi].reshape(-1, 3) @ target).reshape(-1, 4).T
    else:
        vector = target if isinstance(target, np.ndarray) else target.directions(view, int(lo), int(hi))
        east, north, up, moon = (along(rows[lo:hi], vector) for rows in (view.east, view.north, view.up, view.moon))
    shared = grid.night_sky_curve(night)
    curve: dict[str, object] = {
        "night": shared["night"],
        **{name: list(shared[name]) for name in ("hours_from_midnight", "moon_alt_deg", "sun_alt_deg")},  # type: ignore[call-overload]
    }
    if marks is None:
        curve["target_alt_deg"] = np.degrees(np.arcsin(_unit_clip(up))).round(2).tolist()
        return curve
    # The target's altitude, its distance from the Moon and the horizon below it: one array, rounded and
    # converted to lists at once (the same values as row by row, in a third of the calls).
    horizon = bool(marks.site.horizon)
    angles = np.empty((3 if horizon else 2, int(hi - lo)))
    for row, cosines, inverse in ((angles[0], up, np.arcsin), (angles[1], moon, np.arccos)):
        np.minimum(np.maximum(cosines, -1.0, out=row), 1.0, out=row)  # np.clip's values without its dispatch
        inverse(row, out=row)
    np.degrees(angles[:2], out=angles[:2])
    if horizon:
        angles[2] = horizon_altitude(marks.site, np.degrees(np.arctan2(east, north)))
    rows = angles.round(2, out=angles).tolist()
    curve["target_alt_deg"] = rows[0]
    start, stop = marks.view.night_starts[night], marks.view.night_starts[night + 1]
    # The usable instants are some of this night's Sun-down instants (the same grid times): their places among
    # them, by one sorted search, mark them (np.isin would sort both arrays for the same answer).
    usable = np.zeros(int(hi - lo), dtype=bool)
    usable[np.searchsorted(view.mjd[lo:hi], marks.view.mjd[start:stop][marks.usable[start:stop]])] = True
    curve.update(
        {
            "longitude_deg": grid.longitude_deg,
            "airmass_limit": marks.airmass_limit,
            "airmass_formula": marks.formula,
            "limit_altitude_deg": round(marks.limit_alt, 4),
            "floor_altitude_deg": marks.floor_alt,
            "moon_separation_deg": rows[1],
            "usable": usable.tolist(),
        }
    )
    if horizon:
        curve["horizon_alt_deg"] = rows[2]
    return curve


def _in_windows(request: ObservationRequest, mjd: NDArray[np.float64]) -> NDArray[np.bool_]:
    """Which of the instants ``mjd`` fall inside the request's time windows (:func:`sky_masks.in_windows`)."""
    return in_windows(request.windows, mjd)

"""The sky checks: visibility, moon, schedule and sun-safety on the demo site's 2027A grid.

Geometry is held to astropy in test_skygrid.py; here each check's bookkeeping is
tested against an independent way of getting the same number (astropy, a simpler
equivalent constraint, or plain arithmetic), and the level rules against their
stated common-practice margins.
"""

from __future__ import annotations

import copy
import math
from datetime import date
from typing import Any

import numpy as np
import pytest

from feasibility.documents import InstrumentSchedule, ObservationRequest, Observatory, parse_document
from feasibility.engine import sky_checks
from feasibility.engine.sky_checks import level_for_hours, measure_sky, night_availability
from feasibility.results import Level

#: The sine of 30°, the altitude where sec z = 2: the demo observatory states its airmass limits in plain sec z.
SIN_30 = math.sin(math.radians(30.0))

REQUEST: dict[str, Any] = {
    "label": "bulge",
    "target": {"name": "bulge field", "ra": "17:45:36", "dec": "-29:00:00"},
    "instrument": "KESTREL",
    "setup": {"filter": "V"},
    "brightness": {"magnitude": 18.0, "band": "V"},
    "goal": {"snr": 50},
    "hours_requested": 5.0,
    "constraints": {"max_airmass": 2.0, "min_moon_separation_deg": 0.0},
}


def _request(**changes: Any) -> ObservationRequest:
    data = copy.deepcopy(REQUEST)
    for key, value in changes.items():
        if isinstance(value, dict) and isinstance(data.get(key), dict):
            data[key].update(value)
        else:
            data[key] = value
    return parse_document(ObservationRequest, data)


def _observatory(base: Observatory, site: dict | None = None, telescope: dict | None = None, climate: dict | None = None) -> Observatory:
    data = base.model_dump(mode="json")
    data["site"].update(site or {})
    data["telescope"].update(telescope or {})
    data["climate"].update(climate or {})
    return parse_document(Observatory, data)


def _measure(grid, observatory: Observatory, request: ObservationRequest, schedule: InstrumentSchedule | None = None):
    instrument = observatory.instrument_named(request.instrument)
    assert instrument is not None
    weather = np.array([observatory.climate.usable_night_fraction.get(int(m), 1.0) for m in grid.night_months])
    available = night_availability(grid, instrument.name, schedule)
    return measure_sky(request, observatory, instrument, grid, available, weather, schedule is not None)


@pytest.fixture(scope="module")
def open_site(demo_observatory: Observatory) -> Observatory:
    """The demo site without horizon profile or mount limits, so only the airmass limit applies."""
    return _observatory(
        demo_observatory,
        site={"horizon": [], "min_altitude_deg": 0.0},
        telescope={"min_altitude_deg": 0.0, "max_altitude_deg": 90.0},
    )


@pytest.mark.parametrize(
    "clear, every_night, needed, windows, level",
    [
        (0.0, 0.0, 1.0, False, Level.INFEASIBLE),
        (8.0, 9.0, 10.0, False, Level.INFEASIBLE),  # short even with every night clear
        (9.0, 12.0, 10.0, False, Level.INFEASIBLE),  # expected clear hours short
        (9.0, 12.0, 10.0, True, Level.MARGINAL),  # ... but time-critical: a weather risk
        (14.0, 20.0, 10.0, False, Level.MARGINAL),  # under the 1.5x margin
        (15.0, 20.0, 10.0, False, Level.FEASIBLE),
    ],
)
def test_level_rules(clear: float, every_night: float, needed: float, windows: bool, level: Level) -> None:
    # Common practice: a TAC wants the expected clear time to cover the request with a ~1.5x margin.
    assert level_for_hours(clear, every_night, needed, windows) is level


def test_target_that_never_rises_is_infeasible(grid_2027a, demo_observatory: Observatory) -> None:
    # From latitude -26.4° a star at +80° culminates at 90 - 106.4 = -16.4°: never above the horizon.
    sky = _measure(grid_2027a, demo_observatory, _request(target={"name": "north", "ra": 30.0, "dec": 80.0}))
    assert sky.visible.sum() == 0.0
    finding = sky_checks.visibility_finding(sky)
    assert finding.level is Level.INFEASIBLE and "Never rises" in finding.message
    assert sky_checks.moon_finding(sky).level is Level.INFEASIBLE
    # The hand-over stays finite: the airmass limit and the dark sky.
    assert sky.conditions.airmass_median == 2.0 and np.isfinite(sky.conditions.sky_mag_arcsec2)


def test_hours_equal_a_direct_count_and_weather_weights(grid_2027a, open_site: Observatory) -> None:
    from feasibility.engine.positions import target_vector

    sky = _measure(grid_2027a, open_site, _request())
    view = grid_2027a.samples(-18.0)
    up = view.up @ target_vector(266.4, -29.0)
    # sec z = 2 at 30° (the demo observatory states its airmass limits in plain sec z): sin(30°) = 0.5.
    direct = np.count_nonzero(up >= SIN_30) * grid_2027a.step_hours
    # Reference: plain count of grid instants (the grid itself is checked against astropy elsewhere).
    assert sky.visible.sum() == pytest.approx(direct)
    fractions = open_site.climate.usable_night_fraction
    expected = sum(h * fractions[n.month] for h, n in zip(sky.visible, grid_2027a.nights))
    # Reference: arithmetic, each night's hours times its month's usable-night fraction.
    assert sky.clear(sky.visible) == pytest.approx(expected)


def test_horizon_profile_wall_equals_a_minimum_altitude(grid_2027a, open_site: Observatory) -> None:
    wall = _observatory(open_site, site={"horizon": [{"azimuth_deg": 0, "altitude_deg": 50}, {"azimuth_deg": 360, "altitude_deg": 50}]})
    floor = _observatory(open_site, site={"min_altitude_deg": 50.0})
    request = _request()
    # Reference: a level 50° horizon all round is the same constraint as a 50° minimum altitude.
    assert _measure(grid_2027a, wall, request).visible.sum() == pytest.approx(_measure(grid_2027a, floor, request).visible.sum())
    east = _observatory(
        open_site,
        site={
            "horizon": [
                {"azimuth_deg": 0, "altitude_deg": 0},
                {"azimuth_deg": 45, "altitude_deg": 0},
                {"azimuth_deg": 46, "altitude_deg": 50},
                {"azimuth_deg": 134, "altitude_deg": 50},
                {"azimuth_deg": 135, "altitude_deg": 0},
                {"azimuth_deg": 360, "altitude_deg": 0},
            ]
        },
    )
    hours = _measure(grid_2027a, east, request).visible.sum()
    assert _measure(grid_2027a, floor, request).visible.sum() < hours < _measure(grid_2027a, open_site, request).visible.sum()


def test_zenith_gap_removes_time_near_the_zenith(grid_2027a, open_site: Observatory) -> None:
    overhead = _request(target={"name": "overhead", "ra": "17:45:36", "dec": -26.4})
    gap = _observatory(open_site, telescope={"max_altitude_deg": 85.0})
    full, gapped = _measure(grid_2027a, open_site, overhead), _measure(grid_2027a, gap, overhead)
    # Reference (geometry): a star at dec = latitude transits through the zenith, so it spends time above 85°.
    assert 0.0 < full.visible.sum() - gapped.visible.sum() < 0.2 * full.visible.sum()


def test_time_windows_restrict_to_their_nights(grid_2027a, open_site: Observatory) -> None:
    window = [{"start": "2027-07-15T22:00:00Z", "end": "2027-07-16T10:00:00Z"}]
    sky = _measure(grid_2027a, open_site, _request(windows=window))
    night = (date(2027, 7, 15) - grid_2027a.first_night).days
    assert np.flatnonzero(sky.visible).tolist() == [night]
    whole = _measure(grid_2027a, open_site, _request())
    assert 0.0 < sky.visible[night] <= whole.visible[night]
    assert sky.has_windows and sky_checks.visibility_finding(sky).figures["nights_visible"] == 1


def test_moon_constraints(grid_2027a, open_site: Observatory) -> None:
    free = _measure(grid_2027a, open_site, _request())
    assert free.observable.sum() == pytest.approx(free.visible.sum())  # no Moon constraint, nothing lost
    dark = _measure(grid_2027a, open_site, _request(constraints={"sky": "dark"}))
    grey = _measure(grid_2027a, open_site, _request(constraints={"sky": "grey"}))
    none = _measure(grid_2027a, open_site, _request(constraints={"max_moon_illumination": 0.0}))
    far = _measure(grid_2027a, open_site, _request(constraints={"min_moon_separation_deg": 90.0}))
    assert none.observable.sum() < dark.observable.sum() < grey.observable.sum() < free.observable.sum()
    assert far.observable.sum() < free.observable.sum()
    # With illumination 0 required, only Moon-down time counts: the visible instants with the Moon below 0°.
    from feasibility.engine.positions import target_vector

    view = grid_2027a.samples(-18.0)
    up = view.up @ target_vector(266.4, -29.0)
    moon_down = (up >= SIN_30) & (view.moon_alt_deg <= 0.0)  # sec z = 2 at 30°
    assert none.observable.sum() == pytest.approx(np.count_nonzero(moon_down) * grid_2027a.step_hours)
    # The moonlit sky is brighter (smaller magnitude) when bright time is allowed.
    assert free.sky_mag_median < dark.sky_mag_median <= dark.dark_sky_mag + 0.3


def test_schedule_keeps_only_the_instruments_open_nights(grid_2027a, open_site: Observatory, demo_schedule: InstrumentSchedule) -> None:
    request = _request()
    sky = _measure(grid_2027a, open_site, request, demo_schedule)
    mounted = {e.night for e in demo_schedule.nights if e.status == "open" and e.instrument == "KESTREL"}
    used = {grid_2027a.nights[i] for i in np.flatnonzero(sky.usable)}
    assert used and used <= mounted
    assert sky.nights_scheduled == len(mounted)
    assert sky.usable.sum() <= sky.observable.sum()
    unscheduled = _measure(grid_2027a, open_site, request)
    assert unscheduled.usable.sum() == pytest.approx(unscheduled.observable.sum())
    finding = sky_checks.schedule_finding(unscheduled, hours_needed=None)
    assert "no instrument schedule" in finding.message


def test_schedule_compares_with_the_hours_the_goal_needs(grid_2027a, open_site: Observatory) -> None:
    sky = _measure(grid_2027a, open_site, _request())
    available = sky.clear(sky.usable)
    assert sky_checks.schedule_finding(sky, hours_needed=1.0).level is Level.FEASIBLE
    finding = sky_checks.schedule_finding(sky, hours_needed=available * 2)
    assert finding.level is Level.INFEASIBLE and "the goal needs" in finding.message


def test_nautical_twilight_instrument_gets_more_night(grid_2027a, open_site: Observatory) -> None:
    optical = _measure(grid_2027a, open_site, _request())
    infrared = _measure(grid_2027a, open_site, _request(instrument="OWL", setup={"filter": "J"}, brightness={"band": "J"}))
    # Reference: U.S. Naval Observatory definitions, nautical night (Sun below -12°) contains astronomical night.
    assert infrared.sun_limit_deg == -12.0 and optical.sun_limit_deg == -18.0
    assert infrared.visible.sum() > optical.visible.sum()


def test_sun_separation_matches_astropy(grid_2027a, open_site: Observatory) -> None:
    import astropy.units as u
    from astropy.coordinates import SkyCoord, get_body
    from astropy.time import Time

    from feasibility.offline import log_astropy_warnings

    sky = _measure(grid_2027a, open_site, _request())
    midnights = Time(grid_2027a.midnight_mjd, format="mjd", scale="utc")
    with log_astropy_warnings():
        sun = get_body("sun", midnights)
        separation = SkyCoord(266.4 * u.deg, -29.0 * u.deg).separation(SkyCoord(sun.ra, sun.dec)).deg
    # Reference: astropy's geocentric Sun at each local midnight, nearest approach over the semester.
    assert sky.sun_separation_min_all_deg == pytest.approx(separation.min(), abs=0.05)


def test_sun_safety_warns_and_defers_to_the_observatory(grid_2027a, open_site: Observatory) -> None:
    strict = _observatory(open_site, telescope={"min_sun_separation_deg": 180.0})
    finding = sky_checks.sun_safety_finding(_measure(grid_2027a, strict, _request()))
    assert finding.level is Level.INFEASIBLE
    assert "WARNING" in finding.message and "staff" in finding.message
    near = _measure(grid_2027a, open_site, _request())
    near_limit = _observatory(open_site, telescope={"min_sun_separation_deg": near.sun_separation_min_deg - 2.0})
    assert sky_checks.sun_safety_finding(_measure(grid_2027a, near_limit, _request())).level is Level.MARGINAL
    relaxed = _observatory(open_site, telescope={"min_sun_separation_deg": 10.0})
    assert sky_checks.sun_safety_finding(_measure(grid_2027a, relaxed, _request())).level is Level.FEASIBLE


def test_sun_safety_warning_never_comes_with_a_feasible_level(grid_2027a, open_site: Observatory) -> None:
    # A star at δ = +70° culminates at 90° − |φ − δ| = −6.4° from latitude −26.4° (spherical astronomy):
    # never visible. The Sun's declination stays within ±23.44° (obliquity of the ecliptic, from memory),
    # so the star is always 46.6° or more from the Sun: inside a 60° limit, outside a 40° one.
    never_up = _request(target={"name": "far north", "ra": "06:00:00", "dec": "+70:00:00"})
    inside = sky_checks.sun_safety_finding(_measure(grid_2027a, _observatory(open_site, telescope={"min_sun_separation_deg": 60.0}), never_up))
    assert inside.figures["sun_separation_min_deg"] >= 46.5
    assert inside.level is Level.MARGINAL
    assert "WARNING" in inside.message and "never visible" in inside.message and "staff" in inside.message
    outside = sky_checks.sun_safety_finding(_measure(grid_2027a, _observatory(open_site, telescope={"min_sun_separation_deg": 40.0}), never_up))
    assert outside.level is Level.FEASIBLE and "WARNING" not in outside.message


def test_night_curve_is_one_night_of_altitudes(grid_2027a, open_site: Observatory) -> None:
    curve = _measure(grid_2027a, open_site, _request()).night_curve
    n = len(curve["hours_from_midnight"])
    assert n > 100 and all(len(curve[k]) == n for k in ("target_alt_deg", "moon_alt_deg", "sun_alt_deg"))
    assert max(curve["sun_alt_deg"]) < 0.0
    assert date.fromisoformat(curve["night"]) in grid_2027a.nights


def test_site_without_true_night_gives_zero_hours_not_an_error(demo_observatory: Observatory) -> None:
    from feasibility.engine.skygrid import sky_grid

    # Reference (geometry): at latitude 78°N around the June solstice the Sun never sets.
    arctic = _observatory(demo_observatory, site={"latitude_deg": 78.2, "longitude_deg": 15.6, "horizon": []})
    grid = sky_grid(78.2, 15.6, arctic.site.elevation_m, date(2027, 6, 19), date(2027, 6, 22), step_minutes=30.0)
    sky = _measure(grid, arctic, _request(target={"name": "north", "ra": 0.0, "dec": 60.0}))
    assert sky.visible.sum() == 0.0 and sky.hours_night.sum() == 0.0
    assert sky_checks.visibility_finding(sky).level is Level.INFEASIBLE


def test_median_sky_matches_a_direct_evaluation_over_every_instant(grid_2027a, open_site: Observatory) -> None:
    from feasibility.engine.moonsky import sky_brightness_mag
    from feasibility.engine.positions import target_vector

    request = _request(setup={"filter": "B"}, brightness={"band": "B"})
    sky = _measure(grid_2027a, open_site, request)
    view = grid_2027a.samples(-18.0)
    vector = target_vector(266.4, -29.0, at_jyear=2027.5)
    up = view.up @ vector
    chosen = up >= SIN_30  # sec z = 2 at 30° (limits in plain sec z)
    separation = np.degrees(np.arccos(np.clip(view.moon[chosen] @ vector, -1, 1)))
    band = open_site.climate.bands["B"]
    direct = sky_brightness_mag(
        "B",
        band.sky_mag_arcsec2,
        band.extinction_mag_per_airmass,
        90 - np.degrees(np.arcsin(up[chosen])),
        90 - view.moon_alt_deg[chosen],
        view.moon_phase_angle_deg[chosen],
        separation,
    )
    # Reference: K&S eqs. 2 and 15 evaluated directly at every usable instant; the engine samples ~120 of them.
    assert sky.sky_mag_median == pytest.approx(float(np.median(direct)), abs=0.1)
    assert sky.sky_band == "B"

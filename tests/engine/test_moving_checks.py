"""The checks of a moving target: a planet, a body given by elements, a comet near perihelion, a table target.

The demo observatory and the bodies' elements are invented inputs; expected values come from the rules the
checks state, from astropy as a reference library and from the fixed-star path the same checks already pass.
"""

from __future__ import annotations

import copy
import math
from datetime import UTC, datetime
from typing import Any

import numpy as np
import pytest

from feasibility.documents import Observatory, Proposal, parse_document
from feasibility.engine import check_proposal
from feasibility.engine.moving import TRAIL_FRACTION
from feasibility.engine.skygrid import SkyGrid
from feasibility.results import Level, RequestResult

BASE: dict[str, Any] = {
    "label": "r",
    "instrument": "KESTREL",
    "setup": {"filter": "V"},
    "brightness": {"magnitude": 18.0, "band": "V"},
    "goal": {"snr": 30},
    "hours_requested": 2.0,
}
ASTEROID = {
    "kind": "orbital_elements",
    "name": "(90001) Invented",
    "epoch": "2027-06-01",
    "semi_major_axis": 2.6,
    "eccentricity": 0.15,
    "inclination": 8.0,
    "ascending_node_longitude": 120.0,
    "perihelion_argument": 60.0,
    "mean_anomaly": 200.0,
    "absolute_magnitude": 13.2,
    "slope_parameter": 0.2,
}
COMET = {
    "kind": "orbital_elements",
    "name": "C/2027 Q1 (invented)",
    "epoch": "2027-06-20",
    "perihelion_distance": 0.45,
    "eccentricity": 0.995,
    "inclination": 70.0,
    "ascending_node_longitude": 30.0,
    "perihelion_argument": 100.0,
    "perihelion_time": "2027-06-20T00:00:00Z",
    "total_absolute_magnitude": 9.0,
    "total_magnitude_slope": 10.0,
}


def _check(observatory: Observatory, *targets: dict[str, Any], **changes: Any) -> list[RequestResult]:
    requests = [copy.deepcopy(BASE) | {"label": f"r{i}", "target": target} | changes for i, target in enumerate(targets)]
    proposal = parse_document(
        Proposal, {"id": "MOVE-1", "semester": "2027A", "title": "moving", "pi": {"name": "A. Tester", "email": "a@example.org"}, "requests": requests}
    )
    return check_proposal(proposal, observatory).requests


def _finding(result: RequestResult, check: str):
    return next(f for f in result.findings if f.check == check)


def test_fixed_target_with_or_without_kind_gives_the_same_result(demo_observatory: Observatory) -> None:
    star = {"name": "bulge field", "ra": "17:45:36", "dec": "-29:00:00"}
    plain, explicit = _check(demo_observatory, star, {**star, "kind": "fixed"})
    assert plain.figures == explicit.figures
    assert [f.message for f in plain.findings] == [f.message for f in explicit.findings]
    assert all(f.check != "motion" for f in plain.findings)


def test_a_table_holding_a_fixed_position_gives_the_fixed_stars_hours(demo_observatory: Observatory, grid_2027a: SkyGrid) -> None:
    # The same sky in two forms: a fixed star, and a table that repeats its position every 10 days over the semester.
    star = {"name": "field", "ra": 250.0, "dec": -35.0}
    first = grid_2027a.midnight_mjd[0] - 2.0
    rows = [
        {"time": datetime.fromtimestamp((first + 10.0 * k - 40587.0) * 86400.0, tz=UTC).isoformat(), "ra": 250.0, "dec": -35.0}
        for k in range(math.ceil((grid_2027a.midnight_mjd[-1] + 2.0 - first) / 10.0) + 1)
    ]
    fixed, table = _check(demo_observatory, star, {"kind": "ephemeris_table", "name": "field (table)", "ephemeris_table": rows})
    for name in ("hours_visible", "hours_observable", "hours_usable", "airmass_median"):
        assert table.figures[name] == pytest.approx(fixed.figures[name], abs=0.02), name
    assert _finding(table, "motion").figures["rate_max_arcsec_per_hour"] < 0.01


def test_planet_gets_every_finding_with_figures_and_follows_astropy(demo_observatory: Observatory, grid_2027a: SkyGrid) -> None:
    (jupiter,) = _check(demo_observatory, {"kind": "major_body", "name": "Jupiter", "body": "Jupiter"}, brightness={"magnitude": 12.0, "band": "V"})
    checks = [f.check for f in jupiter.findings]
    assert checks[:5] == ["visibility", "moon", "schedule", "sun-safety", "motion"] and "sensitivity" in checks
    assert jupiter.figures["hours_visible"] > 0
    motion = _finding(jupiter, "motion")
    assert "get_body" in (motion.method or "")
    # Jupiter moves at most about 14′ a day on the sky, 35″/h (from memory), and is stationary twice a year.
    assert 0.0 < motion.figures["rate_min_arcsec_per_hour"] < 5.0 and motion.figures["rate_max_arcsec_per_hour"] < 35.0
    track = jupiter.series["track"]
    assert len(track["ra_deg"]) == grid_2027a.n_nights and track["magnitude"] is None
    # The track's right ascension at the first midnight against astropy get_body (geocentric, built-in ephemeris).
    from astropy.coordinates import get_body, solar_system_ephemeris
    from astropy.time import Time

    from feasibility.offline import log_astropy_warnings

    with log_astropy_warnings(), solar_system_ephemeris.set("builtin"):
        reference = get_body("jupiter", Time(grid_2027a.midnight_mjd[0], format="mjd", scale="utc"))
    assert track["ra_deg"][0] == pytest.approx(float(reference.ra.deg), abs=0.002)
    assert track["dec_deg"][0] == pytest.approx(float(reference.dec.deg), abs=0.002)


def test_the_moon_as_a_target_never_meets_a_moon_separation(demo_observatory: Observatory) -> None:
    (moon,) = _check(demo_observatory, {"kind": "major_body", "name": "Moon", "body": "moon"}, brightness={"magnitude": -10.0, "band": "V"})
    assert moon.figures["hours_visible"] > 0
    assert moon.figures["hours_observable"] == 0.0  # always within the 30° separation of itself
    assert _finding(moon, "moon").figures["moon_separation_min_deg"] < 0.5  # topocentric: the grid's Moon is the same body
    assert _finding(moon, "motion").figures["rate_min_arcsec_per_hour"] > 1500.0  # about half a degree an hour


def test_asteroid_magnitude_follows_h_g_on_the_usable_nights(demo_observatory: Observatory) -> None:
    (asteroid,) = _check(demo_observatory, ASTEROID)
    motion = _finding(asteroid, "motion")
    figures = motion.figures
    assert figures["magnitude_band"] == "V"
    assert figures["magnitude_brightest"] <= figures["magnitude_used"] <= figures["magnitude_faintest"]
    magnitudes = np.array(asteroid.series["track"]["magnitude"])
    usable = np.array(asteroid.series["hours_usable"]) > 0
    assert figures["magnitude_faintest"] == pytest.approx(float(magnitudes[usable].max()), abs=0.01)
    # The S/N used the track's magnitude, not the request's 18.0: the source rate scales as 10^(-0.4 Δm).
    (as_fixed,) = _check(demo_observatory, ASTEROID | {"absolute_magnitude": None, "slope_parameter": None})
    ratio = asteroid.figures["source_rate_e_s"] / as_fixed.figures["source_rate_e_s"]
    assert ratio == pytest.approx(10 ** (-0.4 * (figures["magnitude_used"] - 18.0)), rel=0.01)


def test_comet_near_perihelion_warns_plainly_and_defers(demo_observatory: Observatory) -> None:
    (comet,) = _check(demo_observatory, COMET)
    sun = _finding(comet, "sun-safety")
    assert sun.level is not Level.FEASIBLE
    assert "WARNING" in sun.message and "perihelion" in sun.message
    assert "staff decide" in sun.message
    motion = _finding(comet, "motion")
    assert motion.figures["sun_distance_min_au"] == pytest.approx(0.45, abs=0.01)  # q, reached on 2027-06-20


def test_tracking_limit_loses_the_nights_the_body_moves_faster(demo_observatory: Observatory) -> None:
    (free,) = _check(demo_observatory, ASTEROID)
    fastest = _finding(free, "motion").figures["rate_max_arcsec_per_hour"]
    slowest = _finding(free, "motion").figures["rate_min_arcsec_per_hour"]
    limit = (fastest + slowest) / 2.0
    limited = demo_observatory.model_copy(update={"telescope": demo_observatory.telescope.model_copy(update={"max_tracking_rate_arcsec_per_hour": limit})})
    (slow,) = _check(limited, ASTEROID)
    motion = _finding(slow, "motion")
    assert motion.figures["hours_beyond_tracking_limit"] > 0 and motion.level is not Level.FEASIBLE
    rates = np.array(slow.series["track"]["rate_arcsec_per_hour"])
    lost = float(np.array(slow.series["hours_usable"])[rates > limit].sum())
    assert motion.figures["hours_beyond_tracking_limit"] == pytest.approx(lost, abs=0.05)


def test_sidereal_only_mount_caps_exposures_by_the_trail(demo_observatory: Observatory) -> None:
    sidereal = demo_observatory.model_copy(update={"telescope": demo_observatory.telescope.model_copy(update={"sidereal_tracking_only": True})})
    near_earth = ASTEROID | {"semi_major_axis": 1.3, "eccentricity": 0.3, "mean_anomaly": 340.0, "absolute_magnitude": 19.0}
    (result,) = _check(sidereal, near_earth, goal={"snr": 100})
    motion = _finding(result, "motion")
    cap = motion.figures["exposure_time_s_trail_limit"]
    rate = motion.figures["rate_max_arcsec_per_hour"] / 3600.0
    assert cap == pytest.approx(TRAIL_FRACTION * motion.figures["seeing_arcsec"] / rate, rel=1e-3)
    assert result.figures["exposure_time_s"] <= cap * 1.005  # both figures rounded to 3 significant digits
    assert "follows the stars only" in motion.message


def test_table_outside_its_span_counts_nothing(demo_observatory: Observatory, grid_2027a: SkyGrid) -> None:
    first = grid_2027a.midnight_mjd[0]
    rows = [{"time": datetime.fromtimestamp((first + k - 40587.0) * 86400.0, tz=UTC).isoformat(), "ra": 250.0, "dec": -35.0} for k in (60, 70)]
    (table,) = _check(demo_observatory, {"kind": "ephemeris_table", "name": "short", "ephemeris_table": rows})
    visible = np.array(table.series["hours_visible"])
    assert visible[:60].sum() == 0 and visible[71:].sum() == 0 and visible[60:70].sum() > 0
    assert _finding(table, "motion").figures["nights_outside_table"] > 100


def test_a_table_wholly_outside_the_semester_is_refused_by_the_motion_finding(demo_observatory: Observatory) -> None:
    rows = [{"time": "2020-01-01T00:00:00Z", "ra": 150.0, "dec": -30.0}, {"time": "2020-01-05T00:00:00Z", "ra": 151.0, "dec": -30.0}]
    (table,) = _check(demo_observatory, {"kind": "ephemeris_table", "name": "old", "ephemeris_table": rows})
    assert table.verdict is Level.INFEASIBLE
    assert table.figures["hours_visible"] == 0.0
    motion = _finding(table, "motion")
    assert motion.level is Level.INFEASIBLE and motion.figures["nights_outside_table"] == len(table.series["nights"])


def test_moving_target_parallax_is_applied_for_the_moon(grid_2027a: SkyGrid) -> None:
    # The Moon's topocentric direction differs from its geocentric one by up to its horizontal parallax,
    # about 0.95° (57′, a handbook value); at the zenith the difference vanishes.
    from feasibility.documents.moving_targets import MajorBodyTarget
    from feasibility.engine.positions import separation_deg
    from feasibility.engine.tracks import track_for

    track = track_for(MajorBodyTarget(kind="major_body", name="Moon", body="moon"), grid_2027a)
    view = grid_2027a.samples(0.0)
    topocentric = track.directions(view)
    geocentric = track.geocentric_directions(view.mjd)
    shift = separation_deg(topocentric, geocentric)
    altitude = np.degrees(np.arcsin(np.einsum("ij,ij->i", view.up, topocentric)))
    assert 0.85 < float(shift.max()) < 1.05
    assert float(shift[altitude > 80].max(initial=0.0)) < 0.2
    assert math.isfinite(float(shift.mean()))

"""Every failing finding explains itself: its cause, the threshold missed with both numbers, and a suggestion
whose figure the engine computed (checked here by recomputing it with the suggested change); one cause is
marked once and the findings it causes point to it."""

from __future__ import annotations

import copy
import re
from typing import Any

import numpy as np
import pytest

from feasibility.documents import InstrumentSchedule, ObservationRequest, Observatory, Proposal, parse_document
from feasibility.engine import check_proposal, sky_checks, wording
from feasibility.engine.sky_checks import measure_sky, night_availability
from feasibility.results import Level

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


def _request(**changes: Any) -> dict[str, Any]:
    data = copy.deepcopy(REQUEST)
    for key, value in changes.items():
        if isinstance(value, dict) and isinstance(data.get(key), dict):
            data[key].update(value)
        else:
            data[key] = value
    return data


def _measure(grid, observatory: Observatory, data: dict[str, Any], schedule: InstrumentSchedule | None = None):
    request = parse_document(ObservationRequest, data)
    instrument = observatory.instrument_named(request.instrument)
    weather = np.array([observatory.climate.usable_night_fraction.get(int(m), 1.0) for m in grid.night_months])
    return measure_sky(request, observatory, instrument, grid, night_availability(grid, instrument.name, schedule), weather, schedule is not None)


def _proposal(*requests: dict[str, Any]) -> Proposal:
    return parse_document(
        Proposal,
        {
            "id": "EXPLAIN-1",
            "semester": "2027A",
            "title": "t",
            "pi": {"name": "A", "email": "a@example.org"},
            "requests": list(requests),
        },
    )


@pytest.fixture(scope="module")
def open_site(demo_observatory: Observatory) -> Observatory:
    data = demo_observatory.model_dump(mode="json")
    data["site"].update(horizon=[], min_altitude_deg=0.0)
    data["telescope"].update(min_altitude_deg=0.0, max_altitude_deg=90.0)
    return parse_document(Observatory, data)


def test_visibility_names_threshold_and_an_airmass_limit_that_fits(grid_2027a, open_site: Observatory) -> None:
    # A star at +30° culminates at 90 − 56.4 = 33.6° from latitude −26.4° (sec z = 1.80): little time below 1.9.
    north = {"name": "north", "ra": "17:45:36", "dec": "+30:00:00"}
    data = _request(hours_requested=300.0, target=north, constraints={"max_airmass": 1.9})
    sky = _measure(grid_2027a, open_site, data)
    finding = sky_checks.visibility_finding(sky)
    assert finding.level is not Level.FEASIBLE
    assert "Limited by the airmass limit 1.90" in finding.message
    # The threshold with both numbers, as wording writes them.
    assert re.search(r"1\.90: [\d.,]+ h (even with every night clear|expected clear) < 300 h requested", finding.message), finding.message
    match = re.search(r"airmass limit (\d+\.\d\d) would give ([\d.,]+) h \(([\d.,]+) h expected clear\)", finding.suggestion, re.I)
    assert match, finding.suggestion
    limit = float(match.group(1))
    # Reference: the engine's own count rerun with the suggested limit gives the quoted hours and is feasible ...
    relaxed = _measure(grid_2027a, open_site, _request(hours_requested=300.0, target=north, constraints={"max_airmass": limit}))
    assert wording.hours(relaxed.total_visible) == f"{match.group(2)} h"
    assert sky_checks.visibility_finding(relaxed).level is Level.FEASIBLE
    # ... and the limit 0.1 lower is not (the smallest limit in 0.1 steps is suggested).
    tighter = _measure(grid_2027a, open_site, _request(hours_requested=300.0, target=north, constraints={"max_airmass": round(limit - 0.1, 2)}))
    assert sky_checks.visibility_finding(tighter).level is not Level.FEASIBLE
    assert finding.figures["margin"] == 1.5 and finding.figures["hours_needed_with_margin"] == 450.0


def test_marginal_moon_names_the_margin_and_a_lunar_time_that_fits(grid_2027a, open_site: Observatory) -> None:
    window = [{"start": "2027-07-19T12:00:00Z", "end": "2027-07-22T12:00:00Z"}]  # just after full Moon (2027-07-18)
    data = _request(hours_requested=2.0, windows=window, constraints={"sky": "dark"})
    sky = _measure(grid_2027a, open_site, data)
    finding = sky_checks.moon_finding(sky)
    assert finding.level is Level.MARGINAL, finding.message
    assert "Limited by the Moon constraints" in finding.message
    # The threshold with both numbers: expected clear hours against the requested hours (time-critical: no margin).
    assert re.search(r"[\d.]+ h expected clear < 2\.0 h requested \(time-critical", finding.message), finding.message
    match = re.search(r"(grey|bright) time \(illumination at most [\d.]+\) would give ([\d.,]+) h", finding.suggestion, re.I)
    assert match, finding.suggestion
    relaxed = _measure(grid_2027a, open_site, _request(hours_requested=2.0, windows=window, constraints={"sky": match.group(1).lower()}))
    # Reference: the engine's own count rerun with the suggested lunar time.
    assert wording.hours(relaxed.total_observable) == f"{match.group(2)} h"


def test_schedule_names_the_shutdown_nights_of_a_window(grid_2027a, open_site: Observatory, demo_schedule: InstrumentSchedule) -> None:
    window = [{"start": "2027-06-14T12:00:00Z", "end": "2027-06-20T12:00:00Z"}]
    sky = _measure(grid_2027a, open_site, _request(windows=window, hours_requested=2.0), demo_schedule)
    finding = sky_checks.schedule_finding(sky, None, demo_schedule)
    assert finding.level is Level.INFEASIBLE
    # The schedule (an input) lists these nights as shutdown for mirror recoating.
    shutdown = [e for e in demo_schedule.nights if e.status == "shutdown" and sky.window_night_mask[(e.night - grid_2027a.first_night).days]]
    assert shutdown
    assert f"{len(shutdown)} shutdown nights ({shutdown[0].note})" in finding.message
    assert "Limited by the instrument schedule" in finding.message
    assert "outside the time windows" in finding.suggestion.lower()


def test_one_cause_one_mark_and_one_number(demo_observatory: Observatory, demo_schedule: InstrumentSchedule) -> None:
    faint = _request(label="faint", brightness={"magnitude": 25.0, "band": "V"}, goal={"snr": 5000}, hours_requested=10.0)
    request = check_proposal(_proposal(faint), demo_observatory, demo_schedule).requests[0]
    by = {f.check: f for f in request.findings}
    assert by["sensitivity"].cause and by["sensitivity"].see is None
    assert by["schedule"].see == "sensitivity" and by["instrument"].see == "sensitivity"
    assert not by["schedule"].cause and "follows from the sensitivity finding" in by["schedule"].message
    # One number for one quantity: the hours the goal needs read as wording writes the stored figure.
    assert wording.hours(request.figures["hours_needed"]) in by["schedule"].message
    assert [f.check for f in request.findings if f.cause] == ["sensitivity"]


def test_never_rising_target_is_the_one_cause(demo_observatory: Observatory) -> None:
    # From latitude −26.4° a star at +80° never rises (90 − 106.4 = −16.4° at culmination; spherical astronomy).
    north = _request(label="north", target={"name": "north", "ra": 30.0, "dec": 80.0})
    request = check_proposal(_proposal(north), demo_observatory).requests[0]
    by = {f.check: f for f in request.findings}
    assert by["visibility"].cause
    assert by["moon"].see == "visibility" and by["schedule"].see == "visibility"
    assert by["schedule"].suggestion and by["schedule"].suggestion.startswith("See visibility")
    assert "−16" in by["visibility"].suggestion or "-16" in by["visibility"].suggestion


def test_image_quality_suggests_the_limit_met_half_the_time(demo_observatory: Observatory) -> None:
    from feasibility.engine.exposure_checks import diffraction_fwhm_arcsec, fraction_seeing_better, seeing_fwhm_arcsec

    sharp = _request(label="sharp", constraints={"max_seeing_arcsec": 0.6})
    request = check_proposal(_proposal(sharp), demo_observatory).requests[0]
    finding = next(f for f in request.findings if f.check == "image-quality")
    assert finding.level in (Level.MARGINAL, Level.INFEASIBLE)
    assert 'Missed: 0.60" or better' in finding.message and "< 50 %" in finding.message
    suggested = finding.figures["max_seeing_feasible_arcsec"]
    natural = seeing_fwhm_arcsec(
        demo_observatory.climate.median_seeing_arcsec, request.figures["airmass_typical"], 550.0
    )  # image quality is judged at the typical (median) airmass
    diffraction = diffraction_fwhm_arcsec(550.0, demo_observatory.telescope.aperture_m)
    # Reference: the median of a log-normal distribution is met half the time (mathematics of the log-normal).
    assert fraction_seeing_better(suggested, natural, diffraction) == pytest.approx(0.5, abs=0.01)
    assert f"A limit of {wording.arcsec(suggested)}" in finding.suggestion


def test_atmosphere_suggests_the_nearest_window() -> None:
    from feasibility.engine.explain import nearest_transmitted_nm

    # Common practice: ozone blocks below ~300 nm and transmission is poor to ~320 nm; J/H water band 1340-1450 nm.
    assert nearest_transmitted_nm(290.0) == 320.0
    assert nearest_transmitted_nm(1400.0) in (1340.0, 1450.0)


def test_sun_safety_speaks_of_the_window(demo_observatory: Observatory) -> None:
    # Leo I (RA 10h08m) in late August stands close to the Sun (near RA 10h20m then; Meeus ch. 25 gives the
    # Sun's motion, about 1° a day): it is not up at night inside the window.
    leo = _request(
        label="leo",
        target={"name": "Leo I", "ra": "10:08:28.1", "dec": "+12:18:23"},
        windows=[{"start": "2027-08-15T00:00:00Z", "end": "2027-08-30T00:00:00Z"}],
    )
    request = check_proposal(_proposal(leo), demo_observatory).requests[0]
    finding = next(f for f in request.findings if f.check == "sun-safety")
    assert finding.message.startswith("WARNING") and "within the time windows" in finding.message
    assert "this semester" not in finding.message


def test_hours_read_the_same_from_the_exact_value_and_the_stored_figure() -> None:
    # The sensitivity figures keep four significant digits; the text must not show a fifth.
    assert wording.hours(201812.3) == wording.hours(201800.0) == "201,800 h"
    assert wording.hours(47251.7) == wording.hours(47250.0) == "47,250 h"
    assert wording.hours(2.6) == "2.6 h" and wording.hours(236.4) == "236 h"


def test_visibility_names_the_airmass_formula_and_it_matters(grid_2027a, open_site: Observatory) -> None:
    # A star at δ = +33.5° culminates at 90 − (33.5 + 26.412) = 30.09° from the demo site (spherical astronomy):
    # just above sec z = 2 (30°), and 0.19° above where Kasten & Young's airmass reaches 2 (29.90°).
    target = {"name": "low", "ra": "17:45:36", "dec": "+33:30:00"}
    data = _request(target=target, constraints={"max_airmass": 2.0})
    secant = _measure(grid_2027a, open_site, data)
    stated = open_site.model_dump(mode="json") | {"airmass_limit_formula": "kasten-young-1989"}
    physical = _measure(grid_2027a, parse_document(Observatory, stated), data)
    assert "plain sec z" in sky_checks.visibility_finding(secant).message
    assert "Kasten & Young 1989" in sky_checks.visibility_finding(physical).message
    assert sky_checks.visibility_finding(secant).figures["airmass_limit_formula"] == "secant"
    # More than 1 % of the hours move with the convention (the audit's case).
    assert 0.0 < secant.total_visible < 0.99 * physical.total_visible


def test_the_hours_a_goal_needs_read_the_same_in_every_finding(demo_observatory: Observatory, demo_schedule: InstrumentSchedule) -> None:
    # Demo 002 (a spectrum whose goal needs about 30 h) names those hours in the sensitivity and schedule findings:
    # one quantity, one number (formatted from the exact value in one, from the stored figure in the other).
    from importlib import resources

    text = resources.files("feasibility").joinpath("data/proposals/SQ-2027A-002.yaml").read_bytes()
    request = check_proposal(parse_document(Proposal, text), demo_observatory, demo_schedule).requests[0]
    by = {f.check: f for f in request.findings}
    needed = wording.hours(request.figures["hours_needed"])
    assert f"needs {needed}" in by["sensitivity"].message
    assert f"the goal needs {needed}" in by["schedule"].message

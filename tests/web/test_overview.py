"""The committee's semester overview: counts by verdict, hours per instrument, demand by right ascension."""

from __future__ import annotations

import re
import xml.etree.ElementTree as ET
from typing import Any

import pytest
from flask import Flask
from flask.testing import FlaskClient

from .support import sign_in


def test_overview_sums_the_latest_checks(app: Flask, semester: dict[str, Any], expected: dict[str, Any]) -> None:
    from feasibility.store.db import session_factory
    from feasibility.web.dashboard.overview import semester_overview

    with app.app_context():
        session = session_factory()
        data = semester_overview(session, "2027A")
        session.close()
    assert data.proposals == 4
    # The real engine's verdicts (demo headers: 001 feasible, 002 infeasible, 005 marginal; M-1 feasible).
    counts = {level: sum(r.verdict.value == level for r in expected.values()) for level in ("feasible", "marginal", "unchecked", "infeasible")}
    assert counts == {"feasible": 2, "marginal": 1, "unchecked": 0, "infeasible": 1}
    assert data.counts == counts
    lines = {line.instrument: line for line in data.instruments}
    # Requested hours from the documents: 001 4 + 3.5 h and M-1 1 h on KESTREL, 002 6 h on HERON, 005 1 + 2.5 + 2 h on OWL;
    # only feasible and marginal requests count towards the hours asked of the time offered.
    counted = {"feasible", "marginal"}
    for instrument, line in lines.items():
        mine = [q for r in expected.values() for q in r.requests if q.instrument == instrument]
        assert line.requests == len(mine), instrument
        assert line.not_counted == sum(q.verdict.value not in counted for q in mine), instrument
        # Hours needed: the sums of the engine's per-request figures over the counted requests.
        needed = sum(q.figures["hours_needed"] for q in mine if q.verdict.value in counted)
        assert (line.hours_needed or 0.0) == pytest.approx(needed, rel=1e-9), instrument
    assert lines["KESTREL"].requests == 3 and lines["HERON"].requests == 1
    # 002 (HERON, 6 h) is infeasible: it asks nothing of HERON's time; 001, M-1 and 005 are counted whole.
    assert lines["HERON"].not_counted == 1 and lines["HERON"].hours_requested == 0.0 and lines["HERON"].pressure in (0.0, None)
    assert lines["KESTREL"].hours_requested == 8.5 and lines["OWL"].hours_requested == 5.5
    # Right ascension 13h25m (001) falls in the 13h bin, 19h45m (002) in 19h, 17h46m (005) in 17h, 06h00m (M-1) in 6h.
    assert data.ra_requested[13] == 7.5 and data.ra_requested[19] == 6.0 and data.ra_requested[17] == 5.5 and data.ra_requested[6] == 1.0
    assert sum(data.ra_requested) == 20.0
    # The demo schedule mounts every instrument in 2027A; offered hours are positive and below 12 h a night.
    assert all(line.hours_offered and line.hours_offered > 0 for line in lines.values())
    assert data.ra_dark_offered is not None and data.ra_night_offered is not None
    assert all(d <= n + 1e-9 for d, n in zip(data.ra_dark_offered, data.ra_night_offered))


def test_overview_page_and_plots(client: FlaskClient, semester: dict[str, Any]) -> None:
    sign_in(client, "rita")
    assert client.get("/overview").headers["Location"] == "/semesters/2027A"
    html = client.get("/semesters/2027A").get_data(as_text=True)
    assert "Semester 2027A at a glance" in html
    assert re.search(r"level--infeasible.*?</th><td class=\"num\">1</td>", html, re.S)
    assert re.search(r"level--feasible.*?</th><td class=\"num\">2</td>", html, re.S)
    titles = {"verdicts": "Proposals by verdict", "instruments": "Requested against usable hours per instrument", "ra": "Demand by right ascension"}
    for kind, title in titles.items():
        response = client.get(f"/semesters/2027A/{kind}.svg")
        assert response.status_code == 200, kind
        text = response.get_data(as_text=True)
        assert ET.fromstring(text).tag == "{http://www.w3.org/2000/svg}svg"  # W3C SVG 1.1
        assert f"<!-- {title} -->" in text, kind  # matplotlib's SVG writer notes each text drawn as paths
    assert client.get("/semesters/2027A/other.svg").status_code == 404


def test_semester_without_proposals(client: FlaskClient, people: dict[str, int]) -> None:
    sign_in(client, "rita")
    html = client.get("/semesters/2027B").get_data(as_text=True)
    assert "0 proposals" in html and "No checked requests yet." in html
    assert client.get("/semesters/1999Z").status_code == 200  # no such semester: said so, not an error


def test_requests_without_hours_needed_are_counted_apart(app: Flask, semester: dict[str, Any], expected: dict[str, Any]) -> None:
    from sqlalchemy import update

    from feasibility.store.db import session_factory, session_scope
    from feasibility.store.models import RequestOutcome
    from feasibility.web.dashboard.overview import semester_overview

    with app.app_context():
        with session_scope() as session:
            session.execute(update(RequestOutcome).where(RequestOutcome.instrument == "OWL").values(hours_needed=None))
        session = session_factory()
        lines = {line.instrument: line for line in semester_overview(session, "2027A").instruments}
        session.close()
    # OWL's requests (005, marginal) are counted towards the pressure, so each lacking hours needed is counted apart.
    owl = [q for r in expected.values() for q in r.requests if q.instrument == "OWL" and q.verdict.value in ("feasible", "marginal")]
    assert owl and lines["OWL"].needed_unknown == len(owl) and lines["OWL"].hours_needed is None
    kestrel = sum(q.figures["hours_needed"] for r in expected.values() for q in r.requests if q.instrument == "KESTREL")
    assert lines["KESTREL"].needed_unknown == 0 and lines["KESTREL"].hours_needed == pytest.approx(kestrel, rel=1e-9)  # the engine's figures


def test_overview_places_moving_targets_at_their_right_ascension_on_the_middle_night(app: Flask, people: dict[str, int]) -> None:
    """The demo's solar-system proposal (SQ-2027A-008): Neptune (1 h), an asteroid (4 h) and a comet (2 h) by their
    elements count at their geocentric right ascension at local midnight of 2027A's middle night (the night of
    1 July, at longitude −67.935°); the ephemeris table (1.5 h, 10 May to 4 June) does not cover that night and is
    left out. Neptune's right ascension then is astropy's (``get_body`` with the built-in ephemeris, a reference
    library)."""
    from astropy.coordinates import get_body, solar_system_ephemeris
    from astropy.time import Time

    from feasibility.offline import configure_offline
    from feasibility.store.db import session_factory
    from feasibility.web.dashboard.overview import semester_overview

    from .support import demo_doc, store_checked

    store_checked(app, demo_doc("008"), None)
    with app.app_context():
        session = session_factory()
        data = semester_overview(session, "2027A")
        session.close()
    assert sum(data.ra_requested) == pytest.approx(7.0)  # 1 + 4 + 2 h; not the table's 1.5 h
    configure_offline()
    with solar_system_ephemeris.set("builtin"):
        neptune = get_body("neptune", Time("2027-07-02T04:31:44", scale="utc")).ra.hour  # 0h local + 67.935°/15 h
    assert data.ra_requested[int(neptune)] >= 1.0, (neptune, data.ra_requested)

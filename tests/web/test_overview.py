"""The committee's semester overview: counts by verdict, hours per instrument, demand by right ascension."""

from __future__ import annotations

import re
import xml.etree.ElementTree as ET
from typing import Any

from flask import Flask
from flask.testing import FlaskClient

from .support import sign_in


def test_overview_sums_the_latest_checks(app: Flask, semester: dict[str, Any]) -> None:
    from feasibility.store.db import session_factory
    from feasibility.web.dashboard.overview import semester_overview

    with app.app_context():
        session = session_factory()
        data = semester_overview(session, "2027A")
        session.close()
    assert data.proposals == 4
    assert data.counts == {"feasible": 2, "marginal": 1, "unchecked": 0, "infeasible": 1}
    lines = {line.instrument: line for line in data.instruments}
    assert lines["KESTREL"].hours_requested == 5.0 and lines["KESTREL"].requests == 2
    assert lines["HERON"].hours_requested == 10.0 and lines["OWL"].hours_requested == 2.0
    # Right ascension 18h10m and 18h40m both fall in the 18h bin; 01h30m in 1h; 06h00m in 6h.
    assert data.ra_requested[18] == 12.0 and data.ra_requested[1] == 4.0 and data.ra_requested[6] == 1.0
    assert sum(data.ra_requested) == 17.0
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
    for kind in ("verdicts", "instruments", "ra"):
        response = client.get(f"/semesters/2027A/{kind}.svg")
        assert response.status_code == 200, kind
        assert ET.fromstring(response.get_data()).tag == "{http://www.w3.org/2000/svg}svg"  # W3C SVG 1.1
    assert client.get("/semesters/2027A/other.svg").status_code == 404


def test_semester_without_proposals(client: FlaskClient, people: dict[str, int]) -> None:
    sign_in(client, "rita")
    html = client.get("/semesters/2027B").get_data(as_text=True)
    assert "0 proposals" in html and "No checked requests yet." in html
    assert client.get("/semesters/1999Z").status_code == 200  # no such semester: said so, not an error


def test_requests_without_hours_needed_are_counted_apart(app: Flask, semester: dict[str, Any]) -> None:
    from sqlalchemy import update

    from feasibility.store.db import session_factory, session_scope
    from feasibility.store.models import RequestOutcome
    from feasibility.web.dashboard.overview import semester_overview

    with app.app_context():
        with session_scope() as session:
            session.execute(update(RequestOutcome).where(RequestOutcome.instrument == "HERON").values(hours_needed=None))
        session = session_factory()
        lines = {line.instrument: line for line in semester_overview(session, "2027A").instruments}
        session.close()
    assert lines["HERON"].needed_unknown == 1 and lines["HERON"].hours_needed is None
    assert lines["KESTREL"].needed_unknown == 0 and lines["KESTREL"].hours_needed == 5.0  # 2 requests x 2.5 h (stand-in)

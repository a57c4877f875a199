"""Pressure views: the list's first failing check and hours needed ÷ requested (sorted in SQL), the overview's
requested ÷ offered of feasible and marginal requests by instrument and lunar time, and their CSV tables.

The reference of each figure is the real engine's result for the same document (the ``expected`` fixture).
"""

from __future__ import annotations

import csv
import io
import math
from typing import Any

from flask.testing import FlaskClient

from .support import sign_in

_WORST = {"infeasible": 0, "unchecked": 1, "marginal": 2}


def _first_failing(result: Any) -> str | None:
    """The check of the worst finding that is not feasible, first in the engine's order among equals."""
    found = [(_WORST[f.level.value], i, j, f.check) for i, q in enumerate(result.requests) for j, f in enumerate(q.findings) if f.level.value != "feasible"]
    return min(found)[3] if found else None


def _ratio(result: Any) -> float | None:
    needed = [q.figures.get("hours_needed") for q in result.requests]
    if any(n is None or (isinstance(n, float) and math.isnan(n)) for n in needed):
        return None
    return sum(needed) / sum(q.figures["hours_requested"] for q in result.requests)


def test_list_shows_and_sorts_first_failing_check_and_needed_ratio(client: FlaskClient, semester: dict[str, Any], expected: dict[str, Any]) -> None:
    sign_in(client, "rita")
    rows = {row["proposal_id"]: row for row in client.get("/proposals.json?semester=2027A").get_json()["proposals"]}
    for proposal_id, result in expected.items():
        assert rows[proposal_id]["first_failing_check"] == _first_failing(result), proposal_id
        ratio = _ratio(result)
        shown = rows[proposal_id]["hours_needed_over_requested"]
        assert (shown is None) == (ratio is None) and (ratio is None or abs(shown - ratio) < 1e-3), proposal_id
    # Sorted by the database, the empty ones last in both directions.
    for direction in ("asc", "desc"):
        listed = client.get(f"/proposals.json?semester=2027A&sort=pressure&dir={direction}").get_json()["proposals"]
        known = [row["hours_needed_over_requested"] for row in listed if row["hours_needed_over_requested"] is not None]
        assert known == sorted(known, reverse=direction == "desc")
        assert all(row["hours_needed_over_requested"] is None for row in listed[len(known) :])
        checks = client.get(f"/proposals.json?semester=2027A&sort=failing&dir={direction}").get_json()["proposals"]
        named = [row["first_failing_check"] for row in checks if row["first_failing_check"]]
        assert named == sorted(named, reverse=direction == "desc")
        assert all(row["first_failing_check"] is None for row in checks[len(named) :])
    page = client.get("/proposals?semester=2027A&sort=failing").get_data(as_text=True)
    assert "First failing check" in page and "Needed ÷ requested" in page
    table = list(csv.DictReader(io.StringIO(client.get("/proposals.csv?semester=2027A").get_data(as_text=True))))
    assert {row["proposal_id"]: row["first_failing_check"] for row in table} == {p: _first_failing(r) or "" for p, r in expected.items()}


def _sky(request: dict[str, Any]) -> str:
    return (request.get("constraints") or {}).get("sky") or "bright"  # no sky constraint: any Moon, bright time


def test_overview_counts_only_feasible_and_marginal_requests_by_lunar_time(
    app: Any, semester: dict[str, Any], expected: dict[str, Any], semester_documents: dict[str, dict[str, Any]]
) -> None:
    from feasibility.store.db import session_factory
    from feasibility.web.dashboard.overview import semester_overview

    with app.app_context():
        session = session_factory()
        data = semester_overview(session, "2027A")
        session.close()
    wanted: dict[tuple[str, str], float] = {}
    for proposal_id, result in expected.items():
        by_label = {r["label"]: r for r in semester_documents[proposal_id]["requests"]}
        for item in result.requests:
            if item.verdict.value in ("feasible", "marginal"):
                key = (item.instrument, _sky(by_label[item.label]))
                wanted[key] = wanted.get(key, 0.0) + by_label[item.label]["hours_requested"]
    assert any(r.verdict.value == "infeasible" for r in expected.values())  # 002 (HERON) is left out
    got = {(line.instrument, line.lunar_time): line.hours_requested for line in data.lunar if line.hours_requested}
    assert got == wanted
    by_instrument = {line.instrument: line for line in data.instruments}
    for line in data.lunar:
        assert sum(line.ra_requested) == line.hours_requested
        assert line.hours_offered is not None and abs(sum(line.ra_offered or []) - line.hours_offered) < 1e-6
    for name, line in by_instrument.items():
        # Each time of night falls in exactly one lunar time, so the three add up to the instrument's night hours.
        split = sum(row.hours_offered or 0.0 for row in data.lunar if row.instrument == name)
        assert abs(split - (line.hours_offered or 0.0)) < 0.02 * (line.hours_offered or 1.0), name


def test_overview_tables_as_csv_and_lunar_plots(client: FlaskClient, semester: dict[str, Any]) -> None:
    import xml.etree.ElementTree as ET

    sign_in(client, "rita")
    page = client.get("/semesters/2027A").get_data(as_text=True)
    assert "Pressure by instrument and lunar time" in page
    lunar = list(csv.DictReader(io.StringIO(client.get("/semesters/2027A/lunar.csv").get_data(as_text=True))))
    assert {(row["instrument"], row["lunar_time"]) for row in lunar} == {(i, t) for i in ("HERON", "KESTREL", "OWL") for t in ("dark", "grey", "bright")}
    heron = [row for row in lunar if row["instrument"] == "HERON"]
    assert all(float(row["hours_requested"]) == 0.0 for row in heron)  # its one request (002) is infeasible
    for table in ("verdicts", "instruments", "ra"):
        response = client.get(f"/semesters/2027A/{table}.csv")
        assert response.status_code == 200 and response.mimetype == "text/csv", table
    assert len(list(csv.reader(io.StringIO(client.get("/semesters/2027A/ra.csv").get_data(as_text=True))))) == 25
    assert client.get("/semesters/2027A/other.csv").status_code == 404
    svg = client.get("/semesters/2027A/ra-lunar.svg?instrument=KESTREL&time=dark")
    assert svg.status_code == 200 and ET.fromstring(svg.get_data(as_text=True)).tag == "{http://www.w3.org/2000/svg}svg"
    assert client.get("/semesters/2027A/ra-lunar.svg?instrument=NOPE&time=dark").status_code == 404

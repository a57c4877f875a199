"""Time windows must lie within the proposal's semester; a window elsewhere is an input error, not a finding."""

from __future__ import annotations

import copy

from feasibility.documents import Observatory, Proposal, parse_document
from feasibility.documents.consistency import proposal_problems, semester_span_utc
from tests.documents.examples import GOOD


def _with_windows(*windows: dict[str, str]) -> Proposal:
    data = copy.deepcopy(GOOD)
    data["requests"][0]["windows"] = list(windows)
    return parse_document(Proposal, data)


def test_window_after_the_semester_names_its_first_and_last_night(observatory: Observatory) -> None:
    proposal = _with_windows({"start": "2027-10-05T00:00:00Z", "end": "2027-10-10T00:00:00Z"})
    problems = {p.field: p.message for p in proposal_problems(proposal, observatory)}
    message = problems["requests[0].windows[0]"]
    assert "outside the semester" in message
    assert "2027-04-01" in message and "2027-09-30" in message  # semester 2027A of the demo observatory


def test_window_reaching_over_the_start_is_an_error(observatory: Observatory) -> None:
    proposal = _with_windows(
        {"start": "2027-06-01T00:00:00Z", "end": "2027-06-05T00:00:00Z"},
        {"start": "2027-03-25T00:00:00Z", "end": "2027-04-03T00:00:00Z"},
    )
    problems = {p.field: p.message for p in proposal_problems(proposal, observatory)}
    assert "requests[0].windows[0]" not in problems
    assert "reaches outside" in problems["requests[0].windows[1]"]


def test_last_night_of_the_semester_is_inside(observatory: Observatory) -> None:
    # The night of 2027-09-30 at longitude −67.935° ends at local mean noon on 2027-10-01, 16:31:44 UTC
    # (12 h + 67.935°/15 h; local mean time from the longitude, as the sky grid uses).
    semester = observatory.semester_named("2027A")
    start, end = semester_span_utc(observatory, semester)
    assert end.isoformat() == "2027-10-01T16:31:44.400000+00:00"
    assert start.isoformat() == "2027-04-01T16:31:44.400000+00:00"
    proposal = _with_windows({"start": "2027-09-30T23:00:00Z", "end": "2027-10-01T10:00:00Z"})
    assert proposal_problems(proposal, observatory) == []

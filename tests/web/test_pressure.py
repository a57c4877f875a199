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
    found = [(_WORST[f.level.value], i, j, f.check) for i, q in enumerate(result.requests) for j, f in enumerate(q.findings)
             if f.level.value != "feasible"]
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
        assert all(row["hours_needed_over_requested"] is None for row in listed[len(known):])
        checks = client.get(f"/proposals.json?semester=2027A&sort=failing&dir={direction}").get_json()["proposals"]
        named = [row["first_failing_check"] for row in checks if row["first_failing_check"]]
        assert named == sorted(named, reverse=direction == "desc")
        assert all(row["first_failing_check"] is None for row in checks[len(named):])
    page = client.get("/proposals?semester=2027A&sort=failing").get_data(as_text=True)
    assert "First failing check" in page and "Needed ÷ requested" in page
    table = list(csv.DictReader(io.StringIO(client.get("/proposals.csv?semester=2027A").get_data(as_text=True))))
    assert {row["proposal_id"]: row["first_failing_check"] for row in table} == {p: _first_failing(r) or "" for p, r in expected.items()}

"""Bulk submissions are stored together, yet each item is answered as if it had been sent on its own.

Status codes follow HTTP semantics (RFC 9110: 200 OK, 202 Accepted, 403 Forbidden,
422 Unprocessable Content). The statement counts are this service's own guarantee
(a batch costs the store a few statements, not a few per proposal), counted with
SQLAlchemy's ``before_cursor_execute`` event.
"""

from __future__ import annotations

import threading
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from typing import Any

import pytest
from flask import Flask
from flask.testing import FlaskClient
from sqlalchemy import event, func, select

from feasibility.service import submissions
from feasibility.store.db import session_scope
from feasibility.store.models import CheckRun, ProposalRecord, ProposalVersion

from .helpers import FakeEngine, auth, proposal


def _count(app: Flask, model: type) -> int:
    with app.app_context(), session_scope() as session:
        return int(session.scalar(select(func.count()).select_from(model)) or 0)


@contextmanager
def _statements(app: Flask) -> Iterator[list[str]]:
    """Every SQL statement this thread (the test client's requests, not the embedded workers) runs inside the block."""
    seen: list[str] = []
    engine = app.extensions["feasibility.db"].engine
    me = threading.get_ident()

    def note(conn: Any, cursor: Any, statement: str, *args: Any) -> None:
        if threading.get_ident() == me:
            seen.append(statement)

    event.listen(engine, "before_cursor_execute", note)
    try:
        yield seen
    finally:
        event.remove(engine, "before_cursor_execute", note)


def test_a_bulk_mixing_new_resubmitted_changed_refused_and_bad_items_answers_each_as_alone(
    app: Flask, client: FlaskClient, make_token: Callable[..., str], fake_engine: FakeEngine
) -> None:
    alice, bob = make_token("proposer", "alice"), make_token("proposer", "bob")
    first = client.post("/api/v1/proposals", json=proposal("A-1"), headers=auth(alice)).json["run"]["id"]
    kept = client.post("/api/v1/proposals", json=proposal("B-OLD"), headers=auth(bob)).json["run"]["id"]
    bad = proposal("B-BAD")
    bad["requests"][0]["target"]["dec"] = -95  # declinations lie within ±90 degrees (definition)
    items = [
        proposal("B-NEW"),  # new: 202
        proposal("A-1", hours=7),  # alice's proposal: 403, nothing stored
        proposal("B-OLD", ra="14:30:00"),  # identical to what bob sent before: 200 with that run
        bad,  # 422 naming its field
        proposal("B-OLD", hours=5),  # bob's own proposal changed: a new version and run, 202
        proposal("B-NEW"),  # the same content again in this batch: 200 with the run made by item 0
        proposal("A-1"),  # identical to alice's, but still not bob's: 403
    ]
    answer = client.post("/api/v1/proposals/bulk", json={"proposals": items}, headers=auth(bob))
    assert answer.status_code == 200
    got = answer.json["items"]
    assert [i["index"] for i in got] == list(range(len(items)))
    assert [i["status"] for i in got] == [202, 403, 200, 422, 202, 200, 403]
    assert got[2]["run_id"] == kept and got[2]["created"] is False
    assert got[5]["run_id"] == got[0]["run_id"] and got[5]["created"] is False
    assert got[4]["run_id"] not in (kept, got[0]["run_id"]) and got[4]["created"] is True
    assert "belongs to another user" in got[1]["message"] and got[6]["status"] == 403
    assert got[3]["problems"][0]["field"] == "requests[0].target.dec"
    assert answer.json["accepted"] == 4 and answer.json["rejected"] == 3
    with app.app_context(), session_scope() as session:
        alices = session.scalars(select(ProposalVersion).join(ProposalRecord).where(ProposalRecord.proposal_id == "A-1")).all()
        assert len(alices) == 1 and session.get_one(CheckRun, first).proposal_version_id == alices[0].id  # nothing of bob's stored there
    assert _count(app, ProposalRecord) == 3 and _count(app, ProposalVersion) == 4 and _count(app, CheckRun) == 4
    assert app.extensions["feasibility.dispatch"].wait_idle(10)
    assert sorted(fake_engine.calls) == ["A-1", "B-NEW", "B-OLD", "B-OLD"]  # each new run computed once


def test_a_portal_bulk_keeps_the_portal_rules(app: Flask, client: FlaskClient, make_token: Callable[..., str], fake_engine: FakeEngine) -> None:
    make_token("proposer", "bob")
    portal, other = make_token("portal", "portal-1"), make_token("portal", "portal-2")
    assert client.post("/api/v1/proposals?on_behalf_of=bob", json=proposal("P-1"), headers=auth(portal)).status_code == 202
    with app.app_context(), session_scope() as session:  # stored from the command line: no submitter, no owner
        submissions.submit(session, proposal("CLI-1"), None)
    body = {"proposals": [proposal("P-1", hours=4), proposal("CLI-1", hours=4), proposal("Q-1")]}
    mine = client.post("/api/v1/proposals/bulk?on_behalf_of=bob", json=body, headers=auth(portal)).json["items"]
    assert [i["status"] for i in mine] == [202, 403, 202]
    assert "submitted by another user" in mine[1]["message"]
    theirs = client.post("/api/v1/proposals/bulk", json={"proposals": [proposal("P-1", hours=6)]}, headers=auth(other)).json["items"]
    assert theirs[0]["status"] == 403  # P-1 was submitted by portal-1
    assert client.get("/api/v1/proposals/Q-1", headers=auth(make_token("proposer", "bob"))).status_code == 200  # bob owns it


def test_a_bulk_costs_the_store_the_same_few_statements_whatever_its_size(app: Flask, client: FlaskClient, make_token: Callable[..., str]) -> None:
    token = make_token("portal")
    client.post("/api/v1/proposals", json=proposal("WARM"), headers=auth(token))  # the token's user and the observatory read once
    counts = []
    for size, tag in ((2, "S"), (20, "L")):
        with _statements(app) as seen:
            answer = client.post("/api/v1/proposals/bulk", json={"proposals": [proposal(f"{tag}-{i}") for i in range(size)]}, headers=auth(token))
        assert [i["status"] for i in answer.json["items"]] == [202] * size
        counts.append(len([s for s in seen if not s.lstrip().upper().startswith(("PRAGMA", "BEGIN", "COMMIT"))]))
    assert counts[0] == counts[1] <= 5, counts  # token, what is in force, proposals, versions, runs
    with _statements(app) as seen:
        again = client.post("/api/v1/proposals/bulk", json={"proposals": [proposal(f"L-{i}") for i in range(20)]}, headers=auth(token))
    assert {i["status"] for i in again.json["items"]} == {200}
    assert len([s for s in seen if s.lstrip().upper().startswith(("SELECT", "INSERT", "UPDATE"))]) <= 7  # found, not stored again


def test_a_single_submission_costs_four_statements_besides_its_token(app: Flask, client: FlaskClient, make_token: Callable[..., str]) -> None:
    token = make_token("proposer")
    client.post("/api/v1/proposals", json=proposal("WARM"), headers=auth(token))
    with _statements(app) as seen:
        assert client.post("/api/v1/proposals", json=proposal("ONE"), headers=auth(token)).status_code == 202
    queries = [s for s in seen if s.lstrip().upper().startswith(("SELECT", "INSERT", "UPDATE"))]
    assert len(queries) <= 5, queries  # the token's user; what is in force; the proposal, its version and its run


def test_an_item_the_store_refuses_is_named_and_the_others_are_stored(
    app: Flask, client: FlaskClient, make_token: Callable[..., str], fake_engine: FakeEngine, monkeypatch: pytest.MonkeyPatch
) -> None:
    real = submissions._version_row

    def broken(record_id: int, content_hash: str, parsed: Any, data: dict[str, Any], submitted_by: int | None) -> dict[str, Any]:
        row = real(record_id, content_hash, parsed, data, submitted_by)
        if parsed.id == "X-2":
            row["proposal_ref"] = 10**9  # no such proposal: the store refuses it (a foreign key), however often it is sent
        return row

    monkeypatch.setattr(submissions, "_version_row", broken)
    body = {"proposals": [proposal("X-1"), proposal("X-2"), proposal("X-3")]}
    answer = client.post("/api/v1/proposals/bulk", json=body, headers=auth(make_token("portal")))
    items = answer.json["items"]
    assert [i["status"] for i in items] == [202, 422, 202]
    assert items[1]["problems"][0]["problem"].startswith("cannot be stored")
    assert _count(app, ProposalVersion) == 2 and _count(app, CheckRun) == 2
    assert app.extensions["feasibility.dispatch"].wait_idle(10)
    assert sorted(fake_engine.calls) == ["X-1", "X-3"]

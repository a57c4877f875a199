"""The technical review's API: assignments, notes, decisions, who may do what, re-checks and the append-only trail.

Engine verdicts here are the real engine's results for the same documents
(``engine_result``), and the demo proposals' headers give them (001 feasible,
002 infeasible, 005 marginal). The re-check test takes HERON off every night:
by the schedule check's definition (docs: VOCABULARY "schedule") a HERON request
then has no usable hours and must become infeasible.
"""

from __future__ import annotations

import json
from collections.abc import Callable
from importlib import resources
from typing import Any

import pytest
import yaml
from flask import Flask
from flask.testing import FlaskClient
from sqlalchemy import delete, select, update

from feasibility.service.access import REVIEW_ACTIONS, TABLE
from feasibility.store.db import session_scope
from feasibility.store.models import AppendOnly, ReviewAssignment, ReviewDecision, ReviewNote

from .support import GatedEngine, proposal_doc, store_checked


def _auth(token: str) -> dict[str, str]:
    return {"Authorization": f"Bearer {token}"}


@pytest.fixture
def tokens(make_token: Callable[..., str], semester: dict[str, Any]) -> dict[str, str]:
    """A token per user of the checked semester, and one portal's."""
    return {
        name: make_token(role, name)
        for name, role in (("rita", "reviewer"), ("ada", "admin"), ("pablo", "proposer"), ("petra", "proposer"), ("gate", "portal"))
    }


def _review(client: FlaskClient, token: str, proposal_id: str = "SQ-2027A-001") -> Any:
    return client.get(f"/api/v1/proposals/{proposal_id}/review", headers=_auth(token))


def test_assign_note_confirm_and_override_keep_both_verdicts(client: FlaskClient, tokens: dict[str, str], expected: dict[str, Any]) -> None:
    engine_verdict = expected["SQ-2027A-001"].verdict.value
    assert engine_verdict == "feasible"  # demo 001's header
    answer = client.post("/api/v1/proposals/SQ-2027A-001/review/assignment", json={"reviewer": "rita"}, headers=_auth(tokens["ada"]))
    assert answer.status_code == 200 and answer.json["reviewer"] == "rita"

    label = expected["SQ-2027A-001"].requests[1].label
    answer = client.post("/api/v1/proposals/SQ-2027A-001/review/notes", json={"text": "Check the guide star.", "request": label}, headers=_auth(tokens["rita"]))
    assert answer.status_code == 201 and answer.json["notes"] == [
        {"request": label, "text": "Check the guide star.", "by": "rita", "at": answer.json["notes"][0]["at"]}
    ]

    answer = client.post("/api/v1/proposals/SQ-2027A-001/review/decision", json={"decision": "confirm"}, headers=_auth(tokens["rita"]))
    assert answer.status_code == 201
    assert (answer.json["engine_verdict"], answer.json["final_verdict"], answer.json["decided_by"]) == ("feasible", "feasible", "engine")

    answer = client.post(
        "/api/v1/proposals/SQ-2027A-001/review/decision",
        json={"decision": "override", "verdict": "marginal", "reason": "The guide star is faint."},
        headers=_auth(tokens["rita"]),
    )
    assert answer.status_code == 201, answer.json
    body = answer.json
    assert body["engine_verdict"] == "feasible" and body["final_verdict"] == "marginal"  # the engine's stays beside the reviewer's
    assert body["decision"]["reason"] == "The guide star is faint." and body["to_review_again"] is False
    assert [entry["what"] for entry in body["trail"]] == ["assigned", "note", "confirmed", "overridden"]
    assert all(entry["by"] in ("ada", "rita") and entry["at"] for entry in body["trail"])


def test_override_needs_a_reason_and_bad_input_names_each_field(client: FlaskClient, tokens: dict[str, str]) -> None:
    rita = _auth(tokens["rita"])
    answer = client.post("/api/v1/proposals/SQ-2027A-001/review/decision", json={"decision": "override", "verdict": "marginal"}, headers=rita)
    assert answer.status_code == 422 and [p["field"] for p in answer.json["problems"]] == ["reason"]
    answer = client.post("/api/v1/proposals/SQ-2027A-001/review/decision", json={"decision": "override", "verdict": "great", "reason": "  "}, headers=rita)
    assert answer.status_code == 422 and {p["field"] for p in answer.json["problems"]} == {"reason", "verdict"}
    answer = client.post("/api/v1/proposals/SQ-2027A-001/review/decision", json={"decision": "maybe"}, headers=rita)
    assert answer.status_code == 422 and [p["field"] for p in answer.json["problems"]] == ["decision"]
    answer = client.post("/api/v1/proposals/SQ-2027A-001/review/notes", json={"text": "x", "request": "zz"}, headers=rita)
    assert answer.status_code == 422 and [p["field"] for p in answer.json["problems"]] == ["request"]
    answer = client.post("/api/v1/proposals/SQ-2027A-001/review/notes", data="not json", headers=rita)
    assert answer.status_code == 422
    answer = client.post("/api/v1/proposals/SQ-2027A-001/review/assignment", json={"reviewer": "pablo"}, headers=_auth(tokens["ada"]))
    assert answer.status_code == 422 and answer.json["problems"][0]["field"] == "reviewer"  # a proposer cannot review
    assert client.post("/api/v1/proposals/NOPE/review/notes", json={"text": "x"}, headers=rita).status_code == 404
    assert _review(client, tokens["rita"]).json["trail"] == []  # nothing was stored


def test_bulk_assignment_by_instrument(client: FlaskClient, tokens: dict[str, str]) -> None:
    answer = client.post("/api/v1/reviews/assignments", json={"semester": "2027A", "instrument": "KESTREL", "reviewer": "rita"}, headers=_auth(tokens["ada"]))
    assert answer.status_code == 200, answer.json
    assert answer.json["assigned"] == ["M-1", "SQ-2027A-001"]  # the KESTREL proposals of the checked semester (conftest)
    assert _review(client, tokens["rita"], "M-1").json["reviewer"] == "rita"
    assert _review(client, tokens["rita"], "SQ-2027A-002").json["reviewer"] is None  # HERON
    answer = client.post("/api/v1/reviews/assignments", json={"semester": "", "reviewer": "nobody"}, headers=_auth(tokens["ada"]))
    assert answer.status_code == 422 and {p["field"] for p in answer.json["problems"]} == {"semester", "instrument", "reviewer"}


#: Every role against every review action: the status an allowed and a refused call must get.
_CALLS: dict[str, tuple[str, str, dict[str, Any], int]] = {
    "assign": ("post", "/api/v1/proposals/SQ-2027A-001/review/assignment", {"reviewer": "rita"}, 200),
    "write_note": ("post", "/api/v1/proposals/SQ-2027A-001/review/notes", {"text": "A note."}, 201),
    "decide": ("post", "/api/v1/proposals/SQ-2027A-001/review/decision", {"decision": "confirm"}, 201),
    "read_review": ("get", "/api/v1/proposals/SQ-2027A-001/review", {}, 200),
}


@pytest.mark.parametrize("role_name", ["rita", "ada", "pablo", "gate"])
def test_every_role_against_every_action(client: FlaskClient, tokens: dict[str, str], role_name: str) -> None:
    roles = {"rita": "reviewer", "ada": "admin", "pablo": "proposer", "gate": "portal"}
    role = roles[role_name]
    assert set(_CALLS) | {"read_final"} == set(REVIEW_ACTIONS)
    for action, (method, path, body, ok) in _CALLS.items():
        answer = getattr(client, method)(path, headers=_auth(tokens[role_name]), **({"json": body} if method == "post" else {}))
        allowed = role in TABLE[action]
        if action == "read_review" and not allowed:
            # Not the whole review: pablo owns 001 and reads the verdict that stands; the portal did not submit it: 404.
            if role == "proposer":
                assert answer.status_code == 200 and set(answer.json) == {"proposal_id", "verdict", "reviewed"}, action
            else:
                assert answer.status_code == 404, action
            continue
        assert answer.status_code == (ok if allowed else 403), (role, action, answer.json)
        assert getattr(client, method)(path, **({"json": body} if method == "post" else {})).status_code == 401
    # A proposer reads nothing of another's proposal.
    assert _review(client, tokens["petra"], "SQ-2027A-001").status_code == 404


def test_proposers_see_the_final_verdict_and_notes_only_when_the_observatory_chooses(app: Flask, client: FlaskClient, tokens: dict[str, str]) -> None:
    rita = _auth(tokens["rita"])
    client.post("/api/v1/proposals/SQ-2027A-001/review/notes", json={"text": "Fine by me."}, headers=rita)
    client.post(
        "/api/v1/proposals/SQ-2027A-001/review/decision", json={"decision": "override", "verdict": "infeasible", "reason": "Dome repair."}, headers=rita
    )
    answer = _review(client, tokens["pablo"])
    assert answer.json == {"proposal_id": "SQ-2027A-001", "verdict": "infeasible", "reviewed": True}
    app.config["REVIEW_NOTES_TO_PROPOSERS"] = True
    answer = _review(client, tokens["pablo"])
    assert [n["text"] for n in answer.json["notes"]] == ["Fine by me."] and "by" not in answer.json["notes"][0]
    assert "Dome repair." not in json.dumps(answer.json)  # the decision's reason is the committee's


def test_a_recheck_that_changes_the_engine_verdict_flags_the_override(app: Flask, client: FlaskClient, tokens: dict[str, str], engine: GatedEngine) -> None:
    document = proposal_doc("H-1", instrument="HERON", ra="15:00:00", dec="-40:00:00", hours=2.0)
    document["requests"][0]["brightness"]["magnitude"] = 13.0
    store_checked(app, document, "pablo")
    rita = _auth(tokens["rita"])
    before = _review(client, tokens["rita"], "H-1").json["engine_verdict"]
    assert before != "infeasible"
    answer = client.post(
        "/api/v1/proposals/H-1/review/decision",
        json={"decision": "override", "verdict": "marginal" if before == "feasible" else "feasible", "reason": "Seen by the committee."},
        headers=rita,
    )
    assert answer.status_code == 201, answer.json
    overridden = answer.json["final_verdict"]

    schedule = yaml.safe_load((resources.files("feasibility") / "data" / "schedule-2027A.yaml").read_text())
    schedule = json.loads(json.dumps(schedule, default=str))
    schedule["nights"] = [dict(n, status="engineering") if n.get("instrument") == "HERON" else n for n in schedule["nights"]]
    schedule["version"] = "2027A-no-heron"
    assert client.post("/api/v1/schedules", json=schedule, headers=_auth(tokens["ada"])).status_code == 201
    assert app.extensions["feasibility.dispatch"].wait_idle(timeout=300)

    after = _review(client, tokens["rita"], "H-1").json
    assert after["engine_verdict"] == "infeasible"  # no open HERON night: the schedule check's definition
    assert after["final_verdict"] == overridden and after["to_review_again"] is True  # the override survives, flagged
    assert after["decision"]["engine_verdict"] == before
    answer = client.post("/api/v1/proposals/H-1/review/decision", json={"decision": "confirm"}, headers=rita)
    assert answer.json["to_review_again"] is False and answer.json["final_verdict"] == "infeasible"


def test_the_audit_trail_cannot_be_edited(app: Flask, client: FlaskClient, tokens: dict[str, str]) -> None:
    rita = _auth(tokens["rita"])
    client.post("/api/v1/proposals/SQ-2027A-001/review/assignment", json={"reviewer": "rita"}, headers=_auth(tokens["ada"]))
    client.post("/api/v1/proposals/SQ-2027A-001/review/notes", json={"text": "First."}, headers=rita)
    client.post("/api/v1/proposals/SQ-2027A-001/review/decision", json={"decision": "confirm"}, headers=rita)
    for method in ("put", "patch", "delete"):  # no path changes or deletes what was written
        for path in (
            "/api/v1/proposals/SQ-2027A-001/review",
            "/api/v1/proposals/SQ-2027A-001/review/notes",
            "/api/v1/proposals/SQ-2027A-001/review/decision",
            "/api/v1/proposals/SQ-2027A-001/review/assignment",
        ):
            assert getattr(client, method)(path, json={"text": "changed"}, headers=_auth(tokens["ada"])).status_code == 405, (method, path)
    with app.app_context():
        for model in (ReviewAssignment, ReviewNote, ReviewDecision):
            with pytest.raises(AppendOnly), session_scope() as session:
                row = session.scalars(select(model)).one()
                session.delete(row)
                session.flush()
            with pytest.raises(AppendOnly), session_scope() as session:
                session.execute(update(model).values(proposal_ref=0))
            with pytest.raises(AppendOnly), session_scope() as session:
                session.execute(delete(model))
        with pytest.raises(AppendOnly), session_scope() as session:
            session.scalars(select(ReviewNote)).one().text = "Rewritten."
            session.flush()
    assert [n["text"] for n in _review(client, tokens["rita"]).json["notes"]] == ["First."]
    assert len(_review(client, tokens["rita"]).json["trail"]) == 3

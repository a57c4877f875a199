"""The API on the embedded default: submissions, re-submissions, bad input, roles, lists.

Status codes follow HTTP semantics (RFC 9110: 202 Accepted for work queued,
413 Content Too Large, 422 Unprocessable Content, 401 with a challenge per
RFC 6750 for bearer tokens, 403 Forbidden) — the outside reference here.
"""

from __future__ import annotations

import json
from collections.abc import Callable
from datetime import UTC

import yaml
from flask import Flask
from flask.testing import FlaskClient
from sqlalchemy import func, select

from feasibility.store.db import session_scope
from feasibility.store.models import CheckRun, ProposalVersion

from .helpers import FakeEngine, auth, proposal


def _count(app: Flask, model: type) -> int:
    with app.app_context(), session_scope() as session:
        return int(session.scalar(select(func.count()).select_from(model)) or 0)


def test_submit_queues_a_run_and_the_verdict_is_stored(app: Flask, client: FlaskClient, make_token: Callable[..., str], fake_engine: FakeEngine) -> None:
    token = make_token("proposer")
    answer = client.post("/api/v1/proposals", json=proposal("P-1"), headers=auth(token))
    assert answer.status_code == 202  # RFC 9110 §15.3.3: accepted for processing, not yet done
    run_id = answer.json["run"]["id"]
    assert answer.headers["Location"].endswith(f"/api/v1/runs/{run_id}")
    assert app.extensions["feasibility.dispatch"].wait_idle(10)
    run = client.get(f"/api/v1/runs/{run_id}", headers=auth(token)).json
    assert run["state"] == "done" and run["verdict"] == "feasible"
    assert run["result"]["requests"][0]["figures"]["hours_needed"] == 1.5  # the stand-in's figure, stored as computed
    view = client.get("/api/v1/proposals/P-1", headers=auth(token)).json
    assert view["verdict"] == "feasible" and view["result"]["id"] == run_id


def test_wait_returns_the_verdict_of_a_self_check(client: FlaskClient, make_token: Callable[..., str], fake_engine: FakeEngine) -> None:
    answer = client.post("/api/v1/proposals?wait=10", json=proposal("P-2"), headers=auth(make_token("proposer")))
    assert answer.status_code == 200
    assert answer.json["run"]["state"] == "done"
    assert answer.json["run"]["result"]["verdict"] == "feasible"


def test_wait_beyond_the_bound_is_a_400_naming_the_parameter(client: FlaskClient, make_token: Callable[..., str]) -> None:
    answer = client.post("/api/v1/proposals?wait=31", json=proposal("P-3"), headers=auth(make_token("proposer")))
    assert answer.status_code == 400
    assert answer.json["problems"][0]["field"] == "wait"


def test_identical_content_returns_the_same_run(app: Flask, client: FlaskClient, make_token: Callable[..., str], fake_engine: FakeEngine) -> None:
    token = make_token("proposer")
    first = client.post("/api/v1/proposals", json=proposal("P-4", ra="14:30:00"), headers=auth(token))
    # Same content written differently: YAML, keys reordered, RA in degrees.
    # 14h30m = 217.5 degrees (15 degrees per hour of right ascension, by definition).
    same = proposal("P-4", ra=217.5)
    same = dict(reversed(list(same.items())))
    second = client.post("/api/v1/proposals", data=yaml.safe_dump(same), headers={**auth(token), "Content-Type": "application/yaml"})
    assert first.status_code == 202 and second.status_code == 200
    assert second.json["created"] is False
    assert second.json["run"]["id"] == first.json["run"]["id"]
    assert _count(app, ProposalVersion) == 1 and _count(app, CheckRun) == 1


def test_changed_content_is_a_new_version_and_run(app: Flask, client: FlaskClient, make_token: Callable[..., str], fake_engine: FakeEngine) -> None:
    token = make_token("proposer")
    client.post("/api/v1/proposals", json=proposal("P-5", hours=3), headers=auth(token))
    second = client.post("/api/v1/proposals", json=proposal("P-5", hours=4), headers=auth(token))
    assert second.status_code == 202
    assert _count(app, ProposalVersion) == 2
    app.extensions["feasibility.dispatch"].wait_idle(10)
    history = client.get("/api/v1/proposals/P-5/runs", headers=auth(token)).json["items"]
    assert [r["id"] for r in history] == sorted((r["id"] for r in history), reverse=True) and len(history) == 2


def test_invalid_proposal_is_422_with_field_paths_and_nothing_stored_is_lost(
    app: Flask, client: FlaskClient, make_token: Callable[..., str], fake_engine: FakeEngine
) -> None:
    token = make_token("proposer")
    client.post("/api/v1/proposals", json=proposal("P-6"), headers=auth(token))
    before = (_count(app, ProposalVersion), _count(app, CheckRun))
    bad = proposal("P-6")
    bad["requests"][0]["target"]["dec"] = 123  # declinations lie within ±90 degrees (definition)
    del bad["pi"]["email"]
    answer = client.post("/api/v1/proposals", json=bad, headers=auth(token))
    assert answer.status_code == 422
    fields = {p["field"] for p in answer.json["problems"]}
    assert {"requests[0].target.dec", "pi.email"} <= fields
    unknown = proposal("P-6", instrument="NO-SUCH")
    answer = client.post("/api/v1/proposals", json=unknown, headers=auth(token))
    assert answer.status_code == 422
    assert answer.json["problems"][0]["field"] == "requests[0].instrument"
    assert (_count(app, ProposalVersion), _count(app, CheckRun)) == before
    assert client.get("/api/v1/proposals/P-6", headers=auth(token)).json["versions"] == 1


def test_unreadable_body_is_400_and_empty_body_too(client: FlaskClient, make_token: Callable[..., str]) -> None:
    token = make_token("proposer")
    answer = client.post("/api/v1/proposals", data=b"{not: [json", headers={**auth(token), "Content-Type": "application/json"})
    assert answer.status_code == 400 and answer.json["problems"][0]["problem"].startswith("is neither valid JSON nor YAML")
    assert client.post("/api/v1/proposals", data=b"", headers=auth(token)).status_code == 400


def test_body_over_the_limit_is_413_json(app: Flask, client: FlaskClient, make_token: Callable[..., str]) -> None:
    app.config["MAX_CONTENT_LENGTH"] = 1000
    answer = client.post("/api/v1/proposals", data=json.dumps({"x": "y" * 5000}), headers={**auth(make_token("proposer")), "Content-Type": "application/json"})
    assert answer.status_code == 413  # RFC 9110 §15.5.14 Content Too Large
    assert answer.is_json and answer.json["error"]


def test_missing_or_wrong_token_is_401_with_a_bearer_challenge(client: FlaskClient) -> None:
    for headers in ({}, auth("fz_not-a-token")):
        answer = client.get("/api/v1/proposals", headers=headers)
        assert answer.status_code == 401
        assert answer.headers["WWW-Authenticate"].startswith("Bearer")  # RFC 6750 §3


def test_roles(app: Flask, client: FlaskClient, make_token: Callable[..., str], fake_engine: FakeEngine) -> None:
    alice, bob = make_token("proposer", "alice"), make_token("proposer", "bob")
    reviewer, portal = make_token("reviewer"), make_token("portal", "portal-1")
    assert client.post("/api/v1/proposals", json=proposal("A-1"), headers=auth(alice)).status_code == 202
    # bob may neither read nor overwrite alice's proposal
    assert client.get("/api/v1/proposals/A-1", headers=auth(bob)).status_code == 404
    assert client.post("/api/v1/proposals", json=proposal("A-1", hours=5), headers=auth(bob)).status_code == 403
    assert client.get("/api/v1/proposals", headers=auth(bob)).json["total"] == 0
    # a reviewer reads everything but submits nothing
    assert client.get("/api/v1/proposals/A-1", headers=auth(reviewer)).status_code == 200
    assert client.post("/api/v1/proposals", json=proposal("R-1"), headers=auth(reviewer)).status_code == 403
    # a portal submits for bob, reads what it submitted, and bob owns it
    answer = client.post("/api/v1/proposals?on_behalf_of=bob", json=proposal("B-1"), headers=auth(portal))
    assert answer.status_code == 202
    assert client.get("/api/v1/proposals/B-1", headers=auth(portal)).status_code == 200
    assert client.get("/api/v1/proposals/A-1", headers=auth(portal)).status_code == 404
    assert client.get("/api/v1/proposals/B-1", headers=auth(bob)).status_code == 200
    assert client.post("/api/v1/proposals?on_behalf_of=nobody", json=proposal("B-2"), headers=auth(portal)).status_code == 400
    run_id = answer.json["run"]["id"]
    assert client.get(f"/api/v1/runs/{run_id}", headers=auth(alice)).status_code == 404


def test_a_portal_lists_only_what_it_submitted(app: Flask, client: FlaskClient, make_token: Callable[..., str], fake_engine: FakeEngine) -> None:
    from feasibility.results import Level

    make_token("proposer", "bob")
    alice, first, second = make_token("proposer", "alice"), make_token("portal", "portal-1"), make_token("portal", "portal-2")
    assert client.post("/api/v1/proposals", json=proposal("A-1"), headers=auth(alice)).status_code == 202
    assert client.post("/api/v1/proposals?on_behalf_of=bob", json=proposal("B-1"), headers=auth(first)).status_code == 202
    assert client.post("/api/v1/proposals", json=proposal("P-1", instrument="OWL"), headers=auth(first)).status_code == 202
    assert app.extensions["feasibility.dispatch"].wait_idle(10)
    fake_engine.level = Level.INFEASIBLE
    assert client.post("/api/v1/proposals", json=proposal("Q-1"), headers=auth(second)).status_code == 202
    assert app.extensions["feasibility.dispatch"].wait_idle(10)

    def listing(token: str, query: str = "") -> tuple[list[str], int]:
        answer = client.get(f"/api/v1/proposals?{query}", headers=auth(token))
        assert answer.status_code == 200, answer.json
        return [item["proposal_id"] for item in answer.json["items"]], answer.json["total"]

    assert listing(first) == (["P-1", "B-1"], 2)  # newest first; not alice's A-1, not portal-2's Q-1
    assert listing(second) == (["Q-1"], 1)
    assert listing(first, "instrument=OWL") == (["P-1"], 1)
    assert listing(first, "verdict=infeasible") == ([], 0)
    assert listing(second, "failed_check=visibility&semester=2027A") == (["Q-1"], 1)
    assert listing(first, "per_page=1&page=2") == (["B-1"], 2)


def test_list_filters_and_paging(app: Flask, client: FlaskClient, make_token: Callable[..., str], fake_engine: FakeEngine) -> None:
    from feasibility.results import Level

    token, reviewer = make_token("admin"), make_token("reviewer")
    for i in range(3):
        client.post("/api/v1/proposals", json=proposal(f"L-{i}", instrument="KESTREL"), headers=auth(token))
    app.extensions["feasibility.dispatch"].wait_idle(10)
    fake_engine.level = Level.INFEASIBLE
    client.post("/api/v1/proposals", json=proposal("L-9", instrument="OWL"), headers=auth(token))
    app.extensions["feasibility.dispatch"].wait_idle(10)

    def ids(query: str) -> list[str]:
        answer = client.get(f"/api/v1/proposals?{query}", headers=auth(reviewer))
        assert answer.status_code == 200, answer.json
        return [item["proposal_id"] for item in answer.json["items"]]

    assert ids("semester=2027A") == ["L-9", "L-2", "L-1", "L-0"]
    assert ids("semester=2027B") == []
    assert ids("verdict=infeasible") == ["L-9"]
    assert ids("instrument=KESTREL") == ["L-2", "L-1", "L-0"]
    assert ids("failed_check=visibility") == ["L-9"]
    assert ids("failed_check=moon") == []
    assert ids("per_page=2&page=2") == ["L-1", "L-0"]
    assert client.get("/api/v1/proposals?verdict=maybe", headers=auth(reviewer)).status_code == 400


def test_bulk_answers_each_item(app: Flask, client: FlaskClient, make_token: Callable[..., str], fake_engine: FakeEngine) -> None:
    token = make_token("portal")
    bad = proposal("K-2")
    bad["requests"][0]["hours_requested"] = -1
    body = {"proposals": [proposal("K-1"), bad, proposal("K-1"), "not a mapping"]}
    answer = client.post("/api/v1/proposals/bulk", json=body, headers=auth(token))
    assert answer.status_code == 200
    items = answer.json["items"]
    assert [i["status"] for i in items] == [202, 422, 200, 422]
    assert items[1]["problems"][0]["field"] == "requests[0].hours_requested"
    assert items[0]["run_id"] == items[2]["run_id"]
    assert answer.json["accepted"] == 2 and answer.json["rejected"] == 2
    assert app.extensions["feasibility.dispatch"].wait_idle(10)
    assert fake_engine.calls == ["K-1"]


def test_openapi_document_is_complete(client: FlaskClient) -> None:
    spec = client.get("/api/v1/openapi.json").json
    assert spec["openapi"].startswith("3.")  # OpenAPI Specification 3.x
    refs: list[str] = []

    def collect(node: object) -> None:
        if isinstance(node, dict):
            if isinstance(node.get("$ref"), str):
                refs.append(node["$ref"])
            for value in node.values():
                collect(value)
        elif isinstance(node, list):
            for value in node:
                collect(value)

    collect(spec)
    for ref in refs:  # every reference resolves inside the document
        target = spec
        for part in ref.removeprefix("#/").split("/"):
            target = target[part]
    for path, operations in spec["paths"].items():
        for operation in operations.values():
            assert operation["responses"], path
    assert "/api/v1/proposals" in spec["paths"] and "Proposal" in spec["components"]["schemas"]


def test_unknown_api_path_is_json_404(client: FlaskClient) -> None:
    answer = client.get("/api/v1/nothing-here")
    assert answer.status_code == 404 and answer.is_json


def test_proposals_without_an_owner_cannot_be_taken_over(app: Flask, client: FlaskClient, make_token: Callable[..., str], fake_engine: FakeEngine) -> None:
    from feasibility.service.submissions import submit

    with app.app_context(), session_scope() as session:  # submitted from the command line: no owner
        submit(session, proposal("CLI-1"), None)
    assert client.post("/api/v1/proposals", json=proposal("CLI-1", hours=9), headers=auth(make_token("proposer"))).status_code == 403
    assert client.post("/api/v1/proposals", json=proposal("CLI-1", hours=9), headers=auth(make_token("portal"))).status_code == 403
    assert client.post("/api/v1/proposals", json=proposal("CLI-1", hours=9), headers=auth(make_token("admin"))).status_code == 202


def test_schema_and_observatory_problems_come_in_one_answer(app: Flask, client: FlaskClient, make_token: Callable[..., str]) -> None:
    token = make_token("proposer")
    bad = proposal("P-ALL")
    bad["requests"][0]["target"]["dec"] = 95  # declinations lie within ±90 degrees (definition)
    bad["requests"][0]["setup"]["filter"] = "Halpha"  # the demo imager has no such filter
    bad["requests"][0]["hours_requsted"] = 3  # misspelt
    answer = client.post("/api/v1/proposals", json=bad, headers=auth(token))
    assert answer.status_code == 422
    problems = {p["field"]: p["problem"] for p in answer.json["problems"]}
    assert "between -90 and +90" in problems["requests[0].target.dec"]
    assert "no filter 'Halpha'" in problems["requests[0].setup.filter"]
    assert problems["requests[0].hours_requsted"] == "is not a known field; did you mean 'hours_requested'?"
    assert _count(app, ProposalVersion) == 0


def test_times_are_answered_in_utc_on_every_store(app: Flask, client: FlaskClient, make_token: Callable[..., str], fake_engine: FakeEngine) -> None:
    # The PostgreSQL test database speaks America/Santiago (tests/conftest.py) and SQLite keeps no zone:
    # the API answers the same instants in UTC either way, as ISO 8601 with the offset +00:00.
    from datetime import datetime, timedelta

    token = make_token("proposer")
    before = datetime.now(UTC)
    run_id = client.post("/api/v1/proposals", json=proposal("Z-1"), headers=auth(token)).json["run"]["id"]
    assert app.extensions["feasibility.dispatch"].wait_idle(10)
    run = client.get(f"/api/v1/runs/{run_id}", headers=auth(token)).json
    view = client.get("/api/v1/proposals/Z-1", headers=auth(token)).json
    for text in (run["queued_at"], run["finished_at"]):
        assert text.endswith("+00:00"), text
        moment = datetime.fromisoformat(text)
        assert before - timedelta(seconds=1) <= moment <= datetime.now(UTC)
    assert json.dumps(view).count("-03:00") + json.dumps(view).count("-04:00") == 0

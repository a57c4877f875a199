"""The simulation API (the chance of completion) on SQLite and on PostgreSQL, with the embedded workers.

The result must be the engine's own: the stored result equals ``simulate_semester`` run
directly on the same documents with the same seed (the figures themselves are tested
against outside references in tests/engine/test_simulate.py). Celery workers run it in
tests/integration/test_simulations_live.py.
"""

from __future__ import annotations

import time
from importlib import resources
from pathlib import Path
from typing import Any

import pytest
import yaml
from flask import Flask
from flask.testing import FlaskClient

from feasibility.store.db import session_scope
from feasibility.web.auth import create_token, create_user
from tests.simulation_apps import simulation_grid_cache  # noqa: F401 (a fixture)

pytestmark = pytest.mark.usefixtures("simulation_grid_cache")

DEMO = Path(str(resources.files("feasibility") / "data"))


def _tokens(app: Flask) -> dict[str, str]:
    with app.app_context(), session_scope() as session:
        return {role: create_token(session, create_user(session, f"{role}-1", role)) for role in ("reviewer", "admin", "proposer", "portal")}


def _auth(token: str) -> dict[str, str]:
    return {"Authorization": f"Bearer {token}"}


def _demo_proposals() -> list[dict[str, Any]]:
    documents = [yaml.safe_load(path.read_text(encoding="utf-8")) for path in sorted((DEMO / "proposals").glob("*.yaml"))]
    return [d for d in documents if d["semester"] == "2027A"][:4]


def _wait(client: FlaskClient, url: str, token: str, timeout: float = 120.0) -> dict[str, Any]:
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        answer = client.get(url, headers=_auth(token))
        assert answer.status_code == 200, answer.json
        if answer.json["state"] in ("done", "failed"):
            return answer.json
        time.sleep(0.2)
    raise AssertionError(f"simulation {url} not finished within {timeout} s")


def test_a_reviewer_asks_for_a_simulation_and_gets_the_engines_result(app: Flask) -> None:
    client = app.test_client()
    tokens = _tokens(app)
    documents = _demo_proposals()
    for document in documents:
        assert client.post("/api/v1/proposals", json=document, headers=_auth(tokens["proposer"])).status_code in (200, 201, 202)

    answer = client.post("/api/v1/semesters/2027A/simulations", json={"realisations": 120, "seed": 9}, headers=_auth(tokens["reviewer"]))
    assert answer.status_code == 202, answer.json
    assert answer.json["state"] == "queued" and answer.json["settings"]["realisations"] == 120
    done = _wait(client, answer.json["url"], tokens["reviewer"])
    assert done["state"] == "done", done["error"]

    from feasibility.documents import InstrumentSchedule, Observatory, Proposal, load_document, parse_document
    from feasibility.engine.simulate import simulate_semester

    direct = simulate_semester(
        sorted((parse_document(Proposal, d) for d in documents), key=lambda p: p.id),
        load_document(Observatory, DEMO / "observatory.yaml"),
        load_document(InstrumentSchedule, DEMO / "schedule-2027A.yaml"),
        realisations=120,
        seed=9,
    )
    assert done["result"]["requests"] == direct["requests"]
    assert done["result"]["time"] == direct["time"]
    assert {row["proposal_id"] for row in done["result"]["proposals"]} == {d["id"] for d in documents}

    listed = client.get("/api/v1/semesters/2027A/simulations", headers=_auth(tokens["admin"]))
    assert listed.status_code == 200 and [item["id"] for item in listed.json["items"]] == [answer.json["id"]]
    assert "result" not in listed.json["items"][0]


def test_only_reviewers_and_admins_and_bad_settings_name_the_field(app: Flask) -> None:
    client = app.test_client()
    tokens = _tokens(app)
    url = "/api/v1/semesters/2027A/simulations"
    assert client.post(url, json={}).status_code == 401
    for role in ("proposer", "portal"):
        assert client.post(url, json={}, headers=_auth(tokens[role])).status_code == 403
        assert client.get(url, headers=_auth(tokens[role])).status_code == 403
    bad = client.post(url, json={"realisations": 0, "seed": -1, "hours": "all", "colour": "red"}, headers=_auth(tokens["admin"]))
    assert bad.status_code == 422
    fields = {problem["field"] for problem in bad.json["problems"]}
    assert {"realisations", "seed", "hours", "colour"} <= fields
    assert client.post(url, data="{not json", content_type="application/json", headers=_auth(tokens["admin"])).status_code == 400
    assert client.post("/api/v1/semesters/1999Z/simulations", json={}, headers=_auth(tokens["admin"])).status_code == 404
    assert client.get(f"{url}/12345", headers=_auth(tokens["reviewer"])).status_code == 404
    assert client.get("/api/v1/semesters/2027A/simulations", headers=_auth(tokens["reviewer"])).json["items"] == []


def test_a_semester_without_proposals_fails_with_the_reason(app: Flask) -> None:
    client = app.test_client()
    tokens = _tokens(app)
    answer = client.post("/api/v1/semesters/2027B/simulations", json={"realisations": 10}, headers=_auth(tokens["admin"]))
    assert answer.status_code == 202
    done = _wait(client, answer.json["url"], tokens["admin"])
    assert done["state"] == "failed" and "no proposals" in done["error"] and done["result"] is None

"""The simulation API (the chance of completion) on SQLite and on PostgreSQL, with the embedded workers.

The result must be the engine's own: the stored result equals ``simulate_semester`` run
directly on the same documents with the same seed (the figures themselves are tested
against outside references in tests/engine/test_simulate.py). Celery workers run it in
tests/integration/test_simulations_live.py.
"""

from __future__ import annotations

import os
import time
import uuid
from collections.abc import Iterator
from importlib import resources
from pathlib import Path
from typing import Any

import pytest
import yaml
from flask import Flask
from flask.testing import FlaskClient

from feasibility.store.db import session_scope
from feasibility.web.auth import create_token, create_user

POSTGRES_URL = os.environ.get("TEST_POSTGRES_URL", "postgresql+psycopg://postgres@127.0.0.1:5432/postgres")
IN_CI = os.environ.get("CI", "").lower() in ("1", "true", "yes")
DEMO = Path(str(resources.files("feasibility") / "data"))


@pytest.fixture(scope="module", autouse=True)
def _grid_cache(tmp_path_factory: pytest.TempPathFactory) -> Iterator[None]:
    previous = os.environ.get("FEASIBILITY_CACHE_DIR")
    os.environ["FEASIBILITY_CACHE_DIR"] = str(tmp_path_factory.getbasetemp() / "simulation-sky-cache")
    yield
    if previous is None:
        os.environ.pop("FEASIBILITY_CACHE_DIR", None)
    else:
        os.environ["FEASIBILITY_CACHE_DIR"] = previous


@pytest.fixture(params=["sqlite", "postgresql"])
def store_app(request: pytest.FixtureRequest, tmp_path: Path) -> Iterator[Flask]:
    """The app on a fresh SQLite file or a fresh PostgreSQL database, with embedded workers."""
    from sqlalchemy import create_engine, text
    from sqlalchemy.engine import make_url

    from feasibility.web import create_app

    admin = None
    name = None
    if request.param == "sqlite":
        url = f"sqlite:///{tmp_path / 'feasibility.sqlite'}"
    else:
        admin = create_engine(POSTGRES_URL, isolation_level="AUTOCOMMIT")
        try:
            with admin.connect() as connection:
                connection.execute(text("SELECT 1"))
        except Exception as exc:  # noqa: BLE001
            admin.dispose()
            if IN_CI:
                pytest.fail(f"PostgreSQL at {POSTGRES_URL} is not reachable: {exc} (CI is set)", pytrace=False)
            pytest.skip(f"PostgreSQL at {POSTGRES_URL} is not reachable: {exc}")
        name = f"feasibility_test_{uuid.uuid4().hex[:12]}"
        with admin.connect() as connection:
            connection.execute(text(f'CREATE DATABASE "{name}"'))
        url = make_url(POSTGRES_URL).set(database=name).render_as_string(hide_password=False)
    app = create_app({"TESTING": True, "SECRET_KEY": "test", "DATABASE_URL": url, "CREATE_TABLES": True, "BROKER_URL": None, "SWEEP_INTERVAL_S": 0})
    yield app
    dispatcher = app.extensions["feasibility.dispatch"]
    if hasattr(dispatcher, "shutdown"):
        dispatcher.shutdown()
    app.extensions["feasibility.db"]["engine"].dispose()
    if admin is not None:
        with admin.connect() as connection:
            connection.execute(text(f'DROP DATABASE IF EXISTS "{name}" WITH (FORCE)'))
        admin.dispose()


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


def test_a_reviewer_asks_for_a_simulation_and_gets_the_engines_result(store_app: Flask) -> None:
    client = store_app.test_client()
    tokens = _tokens(store_app)
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
        realisations=120, seed=9,
    )
    assert done["result"]["requests"] == direct["requests"]
    assert done["result"]["time"] == direct["time"]
    assert {row["proposal_id"] for row in done["result"]["proposals"]} == {d["id"] for d in documents}

    listed = client.get("/api/v1/semesters/2027A/simulations", headers=_auth(tokens["admin"]))
    assert listed.status_code == 200 and [item["id"] for item in listed.json["items"]] == [answer.json["id"]]
    assert "result" not in listed.json["items"][0]


def test_only_reviewers_and_admins_and_bad_settings_name_the_field(store_app: Flask) -> None:
    client = store_app.test_client()
    tokens = _tokens(store_app)
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


def test_a_semester_without_proposals_fails_with_the_reason(store_app: Flask) -> None:
    client = store_app.test_client()
    tokens = _tokens(store_app)
    answer = client.post("/api/v1/semesters/2027B/simulations", json={"realisations": 10}, headers=_auth(tokens["admin"]))
    assert answer.status_code == 202
    done = _wait(client, answer.json["url"], tokens["admin"])
    assert done["state"] == "failed" and "no proposals" in done["error"] and done["result"] is None

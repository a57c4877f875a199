"""Honest answers: each bulk item stands on its own; a run that failed for good says why.

Status codes follow HTTP semantics (RFC 9110: 202 Accepted, 422 Unprocessable Content).
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

import pytest
from flask import Flask
from flask.testing import FlaskClient
from sqlalchemy import select

from feasibility.service.runs import execute_run
from feasibility.service.submissions import submit
from feasibility.store.db import session_scope
from feasibility.store.models import CheckRun, User

from .helpers import FakeEngine, auth, proposal


def test_a_bad_item_in_the_middle_of_a_bulk_leaves_the_others_stored_and_queued(
    app: Flask, client: FlaskClient, make_token: Callable[..., str], fake_engine: FakeEngine
) -> None:
    bad = proposal("B-2")
    bad["requests"][0]["setup"]["filter"] = "Z"
    body = {"proposals": [proposal("B-1"), bad, "not a proposal", proposal("B-4", ra="10:00:00")]}
    answer = client.post("/api/v1/proposals/bulk", json=body, headers=auth(make_token("portal")))
    assert answer.status_code == 200
    items = answer.json["items"]
    assert [i["status"] for i in items] == [202, 422, 422, 202]
    assert items[1]["problems"][0]["field"] == "requests[0].setup.filter"
    assert answer.json["accepted"] == 2 and answer.json["rejected"] == 2
    assert app.extensions["feasibility.dispatch"].wait_idle(10)
    with app.app_context(), session_scope() as session:
        states = {session.get_one(CheckRun, i["run_id"]).state for i in (items[0], items[3])}
    assert states == {"done"}  # stored and queued, both: the bad items in between changed nothing
    assert sorted(fake_engine.calls) == ["B-1", "B-4"]


def test_a_run_that_failed_for_good_shows_the_reason_to_its_submitter(
    app: Flask, client: FlaskClient, make_token: Callable[..., str], fake_engine: FakeEngine, monkeypatch: pytest.MonkeyPatch
) -> None:
    token = make_token("proposer", "poison-owner")

    def absurd(*args: Any) -> Any:
        result = fake_engine(*args)
        result.requests[0].figures["hours_needed"] = 10**400  # no float holds it: the result can never be stored
        return result

    monkeypatch.setattr("feasibility.service.runs.check", absurd)
    with app.app_context(), session_scope() as session:
        owner = session.scalar(select(User).where(User.name == "poison-owner"))
        run_id = submit(session, proposal("POISON-API"), owner).run.id
    with app.app_context():
        assert execute_run(run_id) == "failed"
        assert execute_run(run_id) == "skipped"  # never computed again by itself
    view = client.get(f"/api/v1/runs/{run_id}", headers=auth(token)).json
    assert view["state"] == "failed" and view["verdict"] is None
    assert view["error"].startswith("the result could not be stored: OverflowError")

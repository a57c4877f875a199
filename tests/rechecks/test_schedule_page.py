"""The dashboard's schedule page: the nights that changed and the verdicts they moved, by role.

Expected rows follow from the schedule edit (every HERON night closed) and the
schedule-aware stand-in engine of test_admin_api.py.
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

import pytest
from flask import Flask
from flask.testing import FlaskClient

from web.support import add_user, sign_in

from .test_admin_api import _auth, _submit, _wait, _without_heron, scheduled_engine


@pytest.fixture
def stand_in(monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setattr("feasibility.service.runs.check", scheduled_engine)


def test_schedule_page_shows_changes(
    app: Flask, client: FlaskClient, make_token: Callable[..., str], stand_in: None, demo_schedule: dict[str, Any], proposal: Any
) -> None:
    admin = make_token("admin")
    _submit(client, admin, proposal("PAGE-H", "HERON"))
    _wait(app)
    assert client.post("/api/v1/schedules", json=_without_heron(demo_schedule), headers=_auth(admin)).status_code == 201
    _wait(app)
    add_user(app, "rita", "reviewer")
    add_user(app, "pablo", "proposer")

    sign_in(client, "rita")
    page = client.get("/semesters/2027A/schedule")
    assert page.status_code == 200
    html = page.get_data(as_text=True)
    assert "2027A-noheron" in html and "status changed" in html
    assert '<th scope="row">HERON</th>' in html and "KESTREL</th>" not in html  # only HERON nights changed
    assert "PAGE-H" in html  # its verdict moved (feasible to infeasible)
    assert client.get("/semesters/2031B/schedule").status_code == 404

    other = app.test_client()
    sign_in(other, "pablo")  # a proposer who does not own PAGE-H
    html = other.get("/semesters/2027A/schedule").get_data(as_text=True)
    assert "PAGE-H" not in html and "No verdict of a proposal you may see has changed." in html

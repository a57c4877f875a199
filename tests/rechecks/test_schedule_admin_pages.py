"""The admins' schedule pages: upload with a dry-run preview then confirm, the calendar, and the changes page's summary.

Expected rows follow from the schedule edit (every HERON night closed) and the
schedule-aware stand-in engine of test_admin_api.py.
"""

from __future__ import annotations

import io
import json
import re
from collections.abc import Callable
from typing import Any

import pytest
from flask import Flask
from flask.testing import FlaskClient

from web.support import add_user, csrf_from, sign_in

from .test_admin_api import _submit, _wait, _without_heron, scheduled_engine


@pytest.fixture
def stand_in(monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setattr("feasibility.service.runs.check", scheduled_engine)


def test_preview_stores_nothing_then_confirm_stores_and_rechecks(
    app: Flask, client: FlaskClient, make_token: Callable[..., str], stand_in: None, demo_schedule: dict[str, Any], proposal: Any
) -> None:
    admin_token = make_token("admin")
    _submit(client, admin_token, proposal("ADM-H", "HERON"))
    _submit(client, admin_token, proposal("ADM-K", "KESTREL"))
    _wait(app)
    add_user(app, "ada", "admin")
    add_user(app, "rita", "reviewer")
    heron_open = sum(1 for n in demo_schedule["nights"] if n.get("instrument") == "HERON" and n.get("status", "open") == "open")

    page = app.test_client()
    sign_in(page, "ada")
    # The first version (loaded at start-up): a summary, not every night.
    first = page.get("/semesters/2027A/schedule").get_data(as_text=True)
    assert "The first version at a glance" in first and "night added" not in first
    assert f"HERON {heron_open}" in first

    edited = _without_heron(demo_schedule)
    form = csrf_from(page.get("/admin/schedule").get_data(as_text=True))
    preview = page.post(
        "/admin/schedule", data={"csrf_token": form, "document": (io.BytesIO(json.dumps(edited).encode()), "s.json")}, content_type="multipart/form-data"
    )
    html = preview.get_data(as_text=True)
    assert preview.status_code == 200
    assert re.search(r"<th scope=\"row\">HERON</th><td class=\"num\">\+0</td><td class=\"num\">−" + str(heron_open) + r"</td>", html)
    assert "ADM-H" in html and "ADM-K" not in html  # only the HERON proposal would be checked again
    # Nothing was stored by the preview.
    assert "2027A-noheron" not in page.get("/semesters/2027A/schedule").get_data(as_text=True)

    token = csrf_from(html)
    document = re.search(r'<textarea name="document" hidden>(.*?)</textarea>', html, re.S).group(1)
    digest = re.search(r'name="digest" value="([0-9a-f]+)"', html).group(1)
    import html as html_lib

    tampered = page.post("/admin/schedule", data={"csrf_token": token, "action": "confirm", "digest": digest, "document": "{}"})
    assert tampered.status_code == 400
    done = page.post("/admin/schedule", data={"csrf_token": token, "action": "confirm", "digest": digest, "document": html_lib.unescape(document)})
    assert done.status_code == 303
    _wait(app)
    after = page.get("/semesters/2027A/schedule").get_data(as_text=True)
    assert "2027A-noheron" in after and "ADM-H" in after
    assert re.search(r"<td class=\"num\">−" + str(heron_open) + "</td>", after)
    assert "ADM-K" not in after  # its verdict and figures did not move
    assert not re.search(r"\d{2}:\d{2}:\d{2}\.\d{3,}", after)  # no microseconds

    reviewer = app.test_client()
    sign_in(reviewer, "rita")
    refused = reviewer.get("/admin/schedule")
    assert refused.status_code == 403 and "an admin" in refused.get_data(as_text=True)
    calendar = reviewer.get("/semesters/2027A/calendar").get_data(as_text=True)
    assert 'data-night="2027-04-01"' in calendar and "Monthly maintenance" in calendar  # the demo schedule's first night
    assert reviewer.get("/semesters/2031B/calendar").status_code == 404


def test_preview_of_a_bad_schedule_names_the_field(app: Flask, client: FlaskClient, demo_schedule: dict[str, Any]) -> None:
    add_user(app, "ada", "admin")
    sign_in(client, "ada")
    bad = dict(demo_schedule, nights=[{"night": "2027-04-02", "instrument": "NOSUCH"}])
    token = csrf_from(client.get("/admin/schedule").get_data(as_text=True))
    answer = client.post(
        "/admin/schedule", data={"csrf_token": token, "document": (io.BytesIO(json.dumps(bad).encode()), "bad.json")}, content_type="multipart/form-data"
    )
    assert answer.status_code == 422 and "nights[0].instrument" in answer.get_data(as_text=True)

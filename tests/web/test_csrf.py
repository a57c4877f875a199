"""Forms refuse posts without this session's CSRF token (OWASP CSRF Prevention Cheat Sheet, synchroniser token)."""

from __future__ import annotations

import io
from typing import Any

from flask import Flask
from flask.testing import FlaskClient
from sqlalchemy import func, select

from .support import PASSWORD, csrf_from, proposal_doc, sign_in


def _proposal_count(app: Flask) -> int:
    from feasibility.store.db import session_scope
    from feasibility.store.models import ProposalRecord

    with app.app_context(), session_scope() as session:
        return int(session.scalar(select(func.count()).select_from(ProposalRecord)) or 0)


def test_sign_in_without_token_is_rejected(client: FlaskClient, people: dict[str, int]) -> None:
    response = client.post("/sign-in", data={"name": "rita", "password": PASSWORD})
    assert response.status_code == 400
    assert client.get("/proposals").status_code == 302  # not signed in


def test_token_of_another_session_is_rejected(app: Flask, people: dict[str, int]) -> None:
    other = app.test_client()
    foreign = csrf_from(other.get("/sign-in").get_data(as_text=True))
    client = app.test_client()
    client.get("/sign-in")  # this session has a token of its own
    response = client.post("/sign-in", data={"name": "rita", "password": PASSWORD, "csrf_token": foreign})
    assert response.status_code == 400


def test_sign_out_needs_token(client: FlaskClient, people: dict[str, int]) -> None:
    sign_in(client, "rita")
    assert client.post("/sign-out").status_code == 400
    assert client.get("/proposals").status_code == 200  # still signed in
    token = csrf_from(client.get("/proposals").get_data(as_text=True))
    assert client.post("/sign-out", data={"csrf_token": token}).status_code == 302
    assert client.get("/proposals").status_code == 302


def test_upload_without_token_stores_nothing(app: Flask, client: FlaskClient, people: dict[str, int], engine: Any) -> None:
    import json

    sign_in(client, "pablo")
    before = _proposal_count(app)
    data = {"document": (io.BytesIO(json.dumps(proposal_doc("C-1")).encode()), "c1.json")}
    response = client.post("/upload", data=data, content_type="multipart/form-data")
    assert response.status_code == 400
    assert _proposal_count(app) == before
    # The same post with the token goes through.
    token = csrf_from(client.get("/upload").get_data(as_text=True))
    data = {"document": (io.BytesIO(json.dumps(proposal_doc("C-1")).encode()), "c1.json"), "csrf_token": token}
    assert client.post("/upload", data=data, content_type="multipart/form-data").status_code == 303
    assert _proposal_count(app) == before + 1


def test_rejected_form_gets_a_readable_page(client: FlaskClient, people: dict[str, int]) -> None:
    response = client.post("/sign-in", data={"name": "rita", "password": PASSWORD})
    html = response.get_data(as_text=True)
    assert response.status_code == 400 and "Reload the page and try again." in html and "dashboard.css" in html

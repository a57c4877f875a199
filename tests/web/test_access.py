"""Who sees what: sign-in, roles, proposers limited to their own proposals, session cookie attributes."""

from __future__ import annotations

from typing import Any

from flask import Flask
from flask.testing import FlaskClient

from .support import PASSWORD, csrf_from, sign_in


def test_pages_need_sign_in(client: FlaskClient, semester: dict[str, Any]) -> None:
    for path in ("/proposals", "/proposals/SQ-2027A-001", "/proposals.csv", "/semesters/2027A", "/upload"):
        response = client.get(path)
        assert response.status_code == 302, path  # redirected, nothing shown
        assert response.headers["Location"].startswith("/sign-in"), path
    assert client.get(f"/runs/{semester['runs']['SQ-2027A-001']}/status.json").status_code == 401


def test_wrong_password_is_refused(client: FlaskClient, people: dict[str, int]) -> None:
    token = csrf_from(client.get("/sign-in").get_data(as_text=True))
    response = client.post("/sign-in", data={"name": "rita", "password": "not it", "csrf_token": token})
    assert response.status_code == 401
    assert client.get("/proposals").status_code == 302  # still not signed in
    response = client.post("/sign-in", data={"name": "nobody", "password": PASSWORD, "csrf_token": token})
    assert response.status_code == 401


def test_reviewer_sees_every_proposal(client: FlaskClient, semester: dict[str, Any]) -> None:
    sign_in(client, "rita")
    page = client.get("/proposals?semester=2027A").get_data(as_text=True)
    for proposal_id in ("SQ-2027A-001", "SQ-2027A-002", "SQ-2027A-005", "M-1"):
        assert f'/proposals/{proposal_id}"' in page
        assert client.get(f"/proposals/{proposal_id}").status_code == 200
    assert client.get("/semesters/2027A").status_code == 200


def test_proposer_sees_only_own_proposals(client: FlaskClient, semester: dict[str, Any]) -> None:
    sign_in(client, "pablo")
    page = client.get("/proposals?semester=2027A").get_data(as_text=True)
    assert '/proposals/SQ-2027A-001"' in page and '/proposals/SQ-2027A-002"' in page
    assert '/proposals/SQ-2027A-005"' not in page and '/proposals/M-1"' not in page
    # Another's proposal, its plots, its run and its status: all "not found", so nothing leaks about it.
    q_run = semester["runs"]["SQ-2027A-005"]
    for path in (
        "/proposals/SQ-2027A-005",
        "/proposals/M-1",
        f"/proposals/SQ-2027A-005/runs/{q_run}/requests/0/night.svg",
        f"/proposals/SQ-2027A-001/runs/{q_run}/requests/0/night.svg",  # own proposal id, another's run
        f"/runs/{q_run}",
        f"/runs/{q_run}/status.json",
    ):
        assert client.get(path).status_code == 404, path
    exported = client.get("/proposals.json?semester=2027A").get_json()
    assert sorted(p["proposal_id"] for p in exported["proposals"]) == ["SQ-2027A-001", "SQ-2027A-002"]
    assert client.get("/semesters/2027A").status_code == 403  # the committee's overview is not for proposers


def test_session_cookie_attributes(client: FlaskClient, people: dict[str, int]) -> None:
    token = csrf_from(client.get("/sign-in").get_data(as_text=True))
    response = client.post("/sign-in", data={"name": "rita", "password": PASSWORD, "csrf_token": token})
    cookie = response.headers["Set-Cookie"]
    # RFC 6265 HttpOnly keeps scripts from reading it; SameSite=Lax (RFC 6265bis) keeps cross-site posts from sending it.
    assert "HttpOnly" in cookie
    assert "SameSite=Lax" in cookie
    assert "Secure" not in cookie  # not asked for in this test app


def test_secure_cookie_from_environment(monkeypatch: Any, database_url: str) -> None:
    from feasibility.web import create_app

    monkeypatch.setenv("SESSION_COOKIE_SECURE", "true")
    app = create_app(
        {"TESTING": True, "SECRET_KEY": "t", "DATABASE_URL": database_url, "CREATE_TABLES": True, "BROKER_URL": None, "SWEEP_INTERVAL_S": 0, "SEED_DEMO": False}
    )
    try:
        assert app.config["SESSION_COOKIE_SECURE"] is True
        response = app.test_client().get("/sign-in")
        assert "Secure" in response.headers["Set-Cookie"]  # the CSRF token's session cookie
    finally:
        app.extensions["feasibility.dispatch"].shutdown()
        app.extensions["feasibility.db"]["engine"].dispose()


def test_changed_password_ends_sessions(app: Flask, client: FlaskClient, people: dict[str, int]) -> None:
    from feasibility.store.db import session_scope
    from feasibility.store.models import User
    from feasibility.web.auth import hash_password

    sign_in(client, "rita")
    assert client.get("/proposals").status_code == 200
    assert client.get("/api/v1/me").status_code == 200  # the API reads with the signed-in session too
    with app.app_context(), session_scope() as session:
        session.get_one(User, people["rita"]).password_hash = hash_password("a new one")
    assert client.get("/proposals").status_code == 302
    assert client.get("/api/v1/me").status_code == 401  # ...and stops with it


def test_sign_in_goes_only_to_local_pages(client: FlaskClient, people: dict[str, int]) -> None:
    for target, expected in (("/proposals/SQ-2027A-001", "/proposals/SQ-2027A-001"), ("//evil.example/x", "/"), ("https://evil.example/", "/")):
        token = csrf_from(client.get("/sign-in").get_data(as_text=True))
        response = client.post("/sign-in", data={"name": "rita", "password": PASSWORD, "csrf_token": token, "next": target})
        assert response.headers["Location"] == expected  # OWASP: unvalidated redirects


def test_portal_accounts_cannot_use_the_pages(app: Flask, client: FlaskClient) -> None:
    from .support import add_user

    add_user(app, "portal-1", "portal")
    token = csrf_from(client.get("/sign-in").get_data(as_text=True))
    response = client.post("/sign-in", data={"name": "portal-1", "password": PASSWORD, "csrf_token": token})
    assert response.status_code == 401


def test_private_pages_are_not_cached_but_the_stylesheet_is(client: FlaskClient, semester: dict[str, Any]) -> None:
    sign_in(client, "rita")
    # RFC 9111 section 5.2.2.5: no-store keeps a response out of every cache.
    assert client.get("/proposals").headers["Cache-Control"] == "no-store"
    assert client.get("/proposals.csv").headers["Cache-Control"] == "no-store"
    with client.get("/assets/dashboard.css") as stylesheet:  # a file response: closed after use
        assert stylesheet.status_code == 200
        assert "no-store" not in stylesheet.headers.get("Cache-Control", "")

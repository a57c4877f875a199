"""Server-side dashboard sessions: the cookie holds only a random id, and signing out or a new password ends every copy of it.

References: OWASP Session Management Cheat Sheet (session ids are random, renewed at
sign-in, invalidated on the server at sign-out and on a password change) and RFC 6265
(cookie attributes); see docs/references.md.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

import pytest
from flask import Flask
from flask.testing import FlaskClient
from sqlalchemy import select, update

from feasibility.store.db import session_scope
from feasibility.store.models import PageSession, User

from .support import csrf_from, sign_in


def _cookie(client: FlaskClient) -> str:
    cookie = client.get_cookie("session")
    assert cookie is not None
    return cookie.value


def _copy_of(app: Flask, client: FlaskClient) -> FlaskClient:
    """Another browser holding a copy of ``client``'s session cookie (as a thief would)."""
    other = app.test_client()
    other.set_cookie("session", _cookie(client))
    return other


def _cookie_contents(app: Flask, client: FlaskClient) -> dict[str, Any]:
    serializer = app.session_interface.get_signing_serializer(app)  # type: ignore[attr-defined]
    return dict(serializer.loads(_cookie(client)))


def test_cookie_carries_only_a_random_session_id(app: Flask, client: FlaskClient, people: dict[str, int]) -> None:
    client.get("/sign-in")
    # Before sign-in the cookie holds only the forms' CSRF token (web/protection.py); plant a session id in it.
    assert set(_cookie_contents(app, client)) == {"csrf_token"}
    planted = "p" * 43
    with client.session_transaction() as cookie_session:
        cookie_session["sid"] = planted
    sign_in(client, "rita")
    contents = _cookie_contents(app, client)
    assert set(contents) == {"sid"}  # no user id, no role, no password digest in the cookie (and the old CSRF token gone)
    assert contents["sid"] != planted  # a new id at sign-in: a planted id is never signed in (session fixation)
    assert len(contents["sid"]) >= 43  # 32 random bytes in URL-safe base64
    with app.app_context(), session_scope() as session:
        rows = session.scalars(select(PageSession)).all()
        assert [row.user_id for row in rows] == [people["rita"]]
        assert rows[0].id_hash != contents["sid"] and len(rows[0].id_hash) == 64  # only its SHA-256 is stored


def test_copied_cookie_stops_working_after_sign_out(app: Flask, client: FlaskClient, people: dict[str, int]) -> None:
    sign_in(client, "rita")
    thief = _copy_of(app, client)
    assert thief.get("/proposals").status_code == 200  # a copied cookie works while the session lives...
    assert thief.get("/api/v1/me").status_code == 200
    token = csrf_from(client.get("/proposals").get_data(as_text=True))
    assert client.post("/sign-out", data={"csrf_token": token}).status_code == 302
    assert thief.get("/proposals").status_code == 302  # ...and not once its owner signed out
    assert thief.get("/api/v1/me").status_code == 401
    assert client.get("/proposals").status_code == 302
    with app.app_context(), session_scope() as session:
        assert session.scalars(select(PageSession.revoked_at)).one() is not None


def test_copied_cookie_stops_working_after_a_password_change(app: Flask, client: FlaskClient, people: dict[str, int]) -> None:
    from feasibility.web.auth import set_password

    sign_in(client, "rita")
    second = app.test_client()
    sign_in(second, "rita")  # the same person in another browser
    sign_in(other := app.test_client(), "pablo")
    thief = _copy_of(app, client)
    assert thief.get("/proposals").status_code == 200
    with app.app_context(), session_scope() as session:
        ended = set_password(session, session.get_one(User, people["rita"]), "a brand new passphrase")
    assert ended == 2  # both of rita's sessions
    for browser in (client, second, thief):
        assert browser.get("/proposals").status_code == 302
        assert browser.get("/api/v1/me").status_code == 401
    assert other.get("/proposals").status_code == 200  # pablo's session is not touched
    sign_in(app.test_client(), "rita", "a brand new passphrase")


def test_expired_session_signs_nobody_in(app: Flask, client: FlaskClient, people: dict[str, int]) -> None:
    from feasibility.store.models import utcnow

    sign_in(client, "rita")
    with app.app_context(), session_scope() as session:
        session.execute(update(PageSession).values(expires_at=utcnow()))
    assert client.get("/proposals").status_code == 302


def test_password_rules_apply_to_every_way_of_setting_one(app: Flask, people: dict[str, int]) -> None:
    from feasibility.web.auth import create_user, set_password

    with app.app_context(), session_scope() as session:
        rita = session.get_one(User, people["rita"])
        # NIST SP 800-63B section 5.1.1.2: at least 8 characters.
        with pytest.raises(ValueError, match="at least 8 characters"):
            set_password(session, rita, "short")
        with pytest.raises(ValueError, match="at least 8 characters"):
            create_user(session, "newcomer", "reviewer", password="1234567")


def _app(tmp_path: Path, **config: Any) -> Flask:
    from feasibility.web import create_app

    return create_app(
        {
            "SECRET_KEY": "t",
            "DATABASE_URL": f"sqlite:///{tmp_path / 's.sqlite'}",
            "CREATE_TABLES": True,
            "BROKER_URL": None,
            "SWEEP_INTERVAL_S": 0,
            "SEED_DEMO": False,
            **config,
        }
    )


def _close(app: Flask) -> None:
    app.extensions["feasibility.dispatch"].shutdown()
    app.extensions["feasibility.db"]["engine"].dispose()


def test_cookie_is_secure_by_default_except_when_testing(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.delenv("SESSION_COOKIE_SECURE", raising=False)
    monkeypatch.delenv("FEASIBILITY_SESSION_COOKIE_SECURE", raising=False)
    served = _app(tmp_path)
    try:
        assert served.config["SESSION_COOKIE_SECURE"] is True
        cookie = served.test_client().get("/sign-in").headers["Set-Cookie"]
        # RFC 6265 section 4.1.2.5 (Secure), 4.1.2.6 (HttpOnly); SameSite=Lax from RFC 6265bis.
        assert "Secure" in cookie and "HttpOnly" in cookie and "SameSite=Lax" in cookie
    finally:
        _close(served)
    testing = _app(tmp_path, TESTING=True)
    try:
        assert testing.config["SESSION_COOKIE_SECURE"] is False
    finally:
        _close(testing)
    monkeypatch.setenv("FEASIBILITY_SESSION_COOKIE_SECURE", "false")  # the documented override
    plain = _app(tmp_path)
    try:
        assert plain.config["SESSION_COOKIE_SECURE"] is False
        assert "Secure" not in plain.test_client().get("/sign-in").headers["Set-Cookie"]
    finally:
        _close(plain)

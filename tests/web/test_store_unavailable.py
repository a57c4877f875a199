"""While the store cannot be reached the API and the pages answer 503 with Retry-After, never a 500.

RFC 9110 section 15.6.4 (503 Service Unavailable: a temporary overload or maintenance)
and section 10.2.3 (Retry-After, in seconds) are the outside reference. The stopped
and restarted database is a PRIVATE PostgreSQL instance started here (own port and
directories), never the shared one (the ``private_postgres`` fixture of tests/conftest.py).
"""

from __future__ import annotations

from typing import Any

import pytest
from flask import Flask
from flask.testing import FlaskClient

from feasibility.web.page_sessions import COOKIE_KEY

from .support import add_user, sign_in


def _app(url: str, **settings: Any) -> Flask:
    from feasibility.web import create_app

    return create_app({"TESTING": True, "SECRET_KEY": "t", "DATABASE_URL": url, "BROKER_URL": None, "SWEEP_INTERVAL_S": 0, **settings})


def _close(app: Flask) -> None:
    app.extensions["feasibility.dispatch"].shutdown()
    app.extensions["feasibility.db"]["engine"].dispose()


def _assert_unavailable(client: FlaskClient, token: str | None) -> None:
    answer = client.get("/api/v1/proposals", headers={"Authorization": f"Bearer {token or 'fz_any'}"})
    assert answer.status_code == 503  # RFC 9110 15.6.4
    assert answer.headers["Retry-After"] == "5"  # RFC 9110 10.2.3: delay-seconds (the RETRY_AFTER_S default)
    assert answer.json["error"] == "service unavailable"
    assert "database" in answer.json["message"] and "try again" in answer.json["message"]
    page = client.get("/proposals")
    assert page.status_code == 503
    assert page.headers["Retry-After"] == "5"
    assert page.mimetype == "text/html"
    text = page.get_data(as_text=True)
    assert "Service unavailable" in text and "Traceback" not in text


def test_unreachable_database_is_503_with_retry_after() -> None:
    # Nothing listens on port 1: every connection is refused, as while the server is down.
    app = _app("postgresql+psycopg://postgres@127.0.0.1:1/feasibility?connect_timeout=2")
    try:
        client = app.test_client()
        with client.session_transaction() as cookie:
            cookie[COOKIE_KEY] = "a-session-id"  # a signed-in browser: the page must look its session up
        _assert_unavailable(client, None)
    finally:
        _close(app)


@pytest.mark.integration
def test_database_stopped_is_503_and_restarted_serves_again(private_postgres: Any) -> None:
    app = _app(private_postgres.url, CREATE_TABLES=True)
    try:
        from feasibility.store.db import session_scope
        from feasibility.web.auth import create_token, create_user

        with app.app_context(), session_scope() as session:
            token = create_token(session, create_user(session, "rev", "reviewer"))
        add_user(app, "rita", "reviewer")
        client = app.test_client()
        sign_in(client, "rita")
        assert client.get("/api/v1/proposals", headers={"Authorization": f"Bearer {token}"}).status_code == 200
        assert client.get("/proposals").status_code == 200

        private_postgres.stop()  # the pool still holds connections to the server that went away
        _assert_unavailable(client, token)

        private_postgres.start()  # a restart: the dead pooled connections are replaced, nothing to do by hand
        assert client.get("/api/v1/proposals", headers={"Authorization": f"Bearer {token}"}).status_code == 200
        assert client.get("/proposals").status_code == 200
    finally:
        _close(app)

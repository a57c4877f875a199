"""The admin API for taking access away: listing and revoking tokens, setting a password (which ends sessions)."""

from __future__ import annotations

import re
from collections.abc import Callable

from flask import Flask
from flask.testing import FlaskClient

from feasibility.store.db import session_scope

from .helpers import auth


def _sign_in(client: FlaskClient, name: str, password: str) -> int:
    form = client.get("/sign-in").get_data(as_text=True)
    token = re.search(r'name="csrf_token" value="([^"]+)"', form)
    assert token is not None
    return client.post("/sign-in", data={"name": name, "password": password, "csrf_token": token.group(1)}).status_code


def test_admin_lists_and_revokes_one_token(client: FlaskClient, make_token: Callable[..., str]) -> None:
    admin = make_token("admin")
    first, second = make_token("portal", "portal-1"), make_token("portal", "portal-1")
    listed = client.get("/api/v1/users/portal-1/tokens", headers=auth(admin))
    assert listed.status_code == 200
    items = listed.json["items"]
    assert [item["revoked_at"] for item in items] == [None, None]
    assert all(first not in str(item) and second not in str(item) for item in items)  # never the token itself

    answer = client.post(f"/api/v1/tokens/{items[0]['id']}/revoke", headers=auth(admin))
    assert answer.status_code == 200 and answer.json["revoked_now"] is True and answer.json["revoked_at"]
    assert client.get("/api/v1/me", headers=auth(first)).status_code == 401
    assert client.get("/api/v1/me", headers=auth(second)).status_code == 200
    again = client.post(f"/api/v1/tokens/{items[0]['id']}/revoke", headers=auth(admin))
    assert again.status_code == 200 and again.json["revoked_now"] is False
    assert client.post("/api/v1/tokens/99999/revoke", headers=auth(admin)).status_code == 404


def test_admin_revokes_every_token_of_a_user(client: FlaskClient, make_token: Callable[..., str]) -> None:
    admin = make_token("admin")
    tokens = [make_token("portal", "portal-1") for _ in range(3)]
    answer = client.post("/api/v1/users/portal-1/tokens/revoke", headers=auth(admin))
    assert answer.status_code == 200 and len(answer.json["revoked"]) == 3
    assert all(client.get("/api/v1/me", headers=auth(token)).status_code == 401 for token in tokens)
    assert client.get("/api/v1/me", headers=auth(admin)).status_code == 200
    assert client.post("/api/v1/users/portal-1/tokens/revoke", headers=auth(admin)).json["revoked"] == []
    assert client.post("/api/v1/users/nobody/tokens/revoke", headers=auth(admin)).status_code == 404


def test_only_admins_take_access_away(client: FlaskClient, make_token: Callable[..., str]) -> None:
    reviewer = make_token("reviewer")
    for method, path in (
        ("get", "/api/v1/users/reviewer-user/tokens"),
        ("post", "/api/v1/tokens/1/revoke"),
        ("post", "/api/v1/users/reviewer-user/tokens/revoke"),
        ("put", "/api/v1/users/reviewer-user/password"),
    ):
        assert getattr(client, method)(path, headers=auth(reviewer), json={"password": "long enough"}).status_code == 403, path
        assert getattr(client, method)(path, json={"password": "long enough"}).status_code == 401, path
    assert client.get("/api/v1/me", headers=auth(reviewer)).status_code == 200  # nothing was revoked


def test_admin_sets_a_password_and_every_session_of_the_user_ends(app: Flask, client: FlaskClient, make_token: Callable[..., str]) -> None:
    from feasibility.web.auth import create_user

    admin = make_token("admin")
    with app.app_context(), session_scope() as session:
        create_user(session, "rita", "reviewer", password="old password")
    browser = app.test_client()
    assert _sign_in(browser, "rita", "old password") == 302
    copy = app.test_client()
    copy.set_cookie("session", browser.get_cookie("session").value)  # type: ignore[union-attr]
    assert copy.get("/api/v1/me").status_code == 200

    answer = client.put("/api/v1/users/rita/password", json={"password": "new password"}, headers=auth(admin))
    assert answer.status_code == 200, answer.json
    assert answer.json == {"name": "rita", "role": "reviewer", "sessions_ended": 1}
    assert browser.get("/proposals").status_code == 302 and copy.get("/api/v1/me").status_code == 401
    assert _sign_in(app.test_client(), "rita", "old password") == 401
    assert _sign_in(app.test_client(), "rita", "new password") == 302


def test_bad_password_requests_name_the_field(client: FlaskClient, make_token: Callable[..., str]) -> None:
    admin = make_token("admin")
    make_token("reviewer", "rita")
    short = client.put("/api/v1/users/rita/password", json={"password": "short"}, headers=auth(admin))
    # NIST SP 800-63B section 5.1.1.2: at least 8 characters (docs/references.md).
    assert short.status_code == 422
    assert short.json["problems"] == [{"field": "password", "problem": "must be at least 8 characters long"}]
    missing = client.put("/api/v1/users/rita/password", json={"secret": "x"}, headers=auth(admin))
    assert missing.status_code == 422 and missing.json["problems"][0]["field"] == "password"
    not_json = client.put("/api/v1/users/rita/password", data="password=x", headers=auth(admin))
    assert not_json.status_code == 422 and not_json.is_json
    assert client.put("/api/v1/users/nobody/password", json={"password": "long enough"}, headers=auth(admin)).status_code == 404


def test_openapi_describes_the_access_endpoints(client: FlaskClient) -> None:
    paths = client.get("/api/v1/openapi.json").json["paths"]
    assert "post" in paths["/api/v1/tokens/{token_id}/revoke"]
    assert "post" in paths["/api/v1/users/{name}/tokens/revoke"]
    assert "get" in paths["/api/v1/users/{name}/tokens"]
    assert "put" in paths["/api/v1/users/{name}/password"]

"""Protection in one place (feasibility/web/protection.py): CSRF on every form, rate limits with 429 and Retry-After.

References: OWASP CSRF Prevention Cheat Sheet (synchroniser token on every state-changing
request); RFC 6585 section 4 (429 Too Many Requests, optionally with Retry-After); RFC 9110
section 10.2.3 (Retry-After as delay-seconds); see docs/references.md. The limits set here
are small numbers chosen for the tests; the defaults are our own choice (common practice).
"""

from __future__ import annotations

import uuid
from typing import Any

import pytest
from flask import Flask
from flask.testing import FlaskClient

from feasibility.web.protection import TOKEN_API_BLUEPRINTS
from tests.services import REDIS_URL, service_unavailable

from .support import PASSWORD, csrf_from, proposal_doc, sign_in


def _post_sign_in(client: FlaskClient, name: str, password: str) -> Any:
    token = csrf_from(client.get("/sign-in").get_data(as_text=True))
    return client.post("/sign-in", data={"name": name, "password": password, "csrf_token": token})


def _from(app: Flask, address: str) -> FlaskClient:
    client = app.test_client()
    client.environ_base["REMOTE_ADDR"] = address
    return client


def _unsafe_page_routes(app: Flask) -> list[tuple[str, str]]:
    """Every (method, url) of a page route that changes something, with made-up path values."""
    adapter = app.url_map.bind("localhost")
    out = []
    for rule in app.url_map.iter_rules():
        if rule.endpoint.partition(".")[0] in TOKEN_API_BLUEPRINTS or rule.endpoint == "static":
            continue
        values = {name: 1 if "int" in type(rule._converters[name]).__name__.lower() else "x" for name in rule.arguments}
        for method in sorted((rule.methods or set()) & {"POST", "PUT", "PATCH", "DELETE"}):
            out.append((method, adapter.build(rule.endpoint, values)))
    return out


def test_every_form_refuses_a_post_without_the_token(app: Flask, client: FlaskClient, people: dict[str, int]) -> None:
    routes = _unsafe_page_routes(app)
    assert len(routes) >= 8 and ("POST", "/sign-in") in routes and ("POST", "/upload") in routes
    sign_in(client, "ada")  # an admin: every page's own checks would let the post through
    for method, url in routes:
        response = client.open(url, method=method, data={"x": "1"})
        page = response.get_data(as_text=True)
        assert response.status_code == 400, (method, url, response.status_code)
        assert "did not come from this site (the CSRF token is missing)" in page and "Reload the page" in page, (method, url)
    assert client.get("/proposals").status_code == 200  # still signed in: nothing was done


def test_a_wrong_token_is_named(client: FlaskClient, people: dict[str, int]) -> None:
    client.get("/sign-in")
    response = client.post("/sign-in", data={"name": "rita", "password": PASSWORD, "csrf_token": "not-the-token"})
    assert response.status_code == 400 and "(the CSRF token is invalid)" in response.get_data(as_text=True)


def test_a_header_token_serves_scripts(client: FlaskClient, people: dict[str, int]) -> None:
    token = csrf_from(client.get("/sign-in").get_data(as_text=True))
    response = client.post("/sign-in", data={"name": "rita", "password": PASSWORD}, headers={"X-CSRF-Token": token})
    assert response.status_code == 302


def test_the_token_api_is_exempt_and_takes_no_cookies_for_changes(client: FlaskClient, make_token: Any, people: dict[str, int]) -> None:
    token = make_token("proposer", "pablo")
    answer = client.post("/api/v1/proposals", json={}, headers={"Authorization": f"Bearer {token}"})
    assert answer.status_code == 422  # read and judged, not refused for want of a CSRF token
    sign_in(client, "pablo")  # a signed-in browser session: what a forged cross-site post would carry
    forged = client.post("/api/v1/proposals", json=proposal_doc("X-1"))
    assert forged.status_code == 401  # cookies never authenticate a change through the API


def test_sign_in_posts_per_address_get_429_with_retry_after(app: Flask, people: dict[str, int]) -> None:
    app.config["RATE_LIMIT_SIGN_IN_PER_ADDRESS"] = "3 per minute"
    client = _from(app, "192.0.2.40")
    for name in ("alice", "bob", "carol"):  # unknown names: the failure throttle counts per account, this per address
        assert _post_sign_in(client, name, "guess").status_code == 401
    response = _post_sign_in(client, "rita", PASSWORD)
    page = response.get_data(as_text=True)
    assert response.status_code == 429
    assert 1 <= int(response.headers["Retry-After"]) <= 60
    assert "Too many sign-in attempts from this address: the limit is 3 per 1 minute. Try again in" in page
    assert _post_sign_in(_from(app, "192.0.2.41"), "rita", PASSWORD).status_code == 302  # another address signs in


def test_sign_in_posts_per_account_get_429(app: Flask, people: dict[str, int]) -> None:
    app.config["RATE_LIMIT_SIGN_IN_PER_ACCOUNT"] = "2 per minute"
    assert _post_sign_in(_from(app, "198.51.100.1"), "Rita", "guess").status_code == 401
    assert _post_sign_in(_from(app, "198.51.100.2"), "rita", "guess").status_code == 401
    response = _post_sign_in(_from(app, "198.51.100.3"), "rita ", PASSWORD)  # a third address; the same account
    assert response.status_code == 429 and "Retry-After" in response.headers
    assert "Too many sign-in attempts for this account: the limit is 2 per 1 minute. Try again in" in response.get_data(as_text=True)
    assert _post_sign_in(_from(app, "198.51.100.3"), "pablo", PASSWORD).status_code == 302


def test_submissions_per_token_get_429_in_json(app: Flask, client: FlaskClient, make_token: Any) -> None:
    app.config["RATE_LIMIT_SUBMISSIONS_PER_TOKEN"] = "2 per minute"
    first, second = make_token("proposer", "pablo"), make_token("proposer", "petra")
    auth = {"Authorization": f"Bearer {first}"}
    assert client.post("/api/v1/proposals", json={}, headers=auth).status_code == 422  # counted whatever the answer
    assert client.post("/api/v1/proposals/bulk", json={"proposals": []}, headers=auth).status_code == 200  # one count for both
    refused = client.post("/api/v1/proposals", json=proposal_doc("R-1"), headers=auth)
    assert refused.status_code == 429
    body = refused.get_json()
    assert body["error"] == "too many requests" and body["limit"] == "2 per 1 minute"
    assert body["message"].startswith("Too many submissions with this API token: the limit is 2 per 1 minute.")
    assert int(refused.headers["Retry-After"]) == body["retry_after_s"] and 1 <= body["retry_after_s"] <= 60
    assert client.post("/api/v1/proposals/bulk", json={"proposals": []}, headers=auth).status_code == 429
    other = client.post("/api/v1/proposals", json=proposal_doc("R-2"), headers={"Authorization": f"Bearer {second}"})
    assert other.status_code == 202  # another token is not held up
    assert client.get("/api/v1/me", headers=auth).status_code == 200  # reading is not limited


def test_limits_are_shared_through_redis(app: Flask, make_token: Any) -> None:
    """Two apps on one Redis stand for two web processes: a count made in one holds in the other."""
    import redis

    try:
        redis.Redis.from_url(REDIS_URL).ping()
    except redis.RedisError as exc:
        service_unavailable(f"Redis at {REDIS_URL}", exc)
    from feasibility.web import create_app

    settings = {"RATELIMIT_STORAGE_URI": REDIS_URL, "RATELIMIT_KEY_PREFIX": f"test-{uuid.uuid4().hex}", "RATE_LIMIT_SUBMISSIONS_PER_TOKEN": "2 per minute"}
    apps = [
        create_app(
            {
                "TESTING": True,
                "SECRET_KEY": "test",
                "DATABASE_URL": app.config["DATABASE_URL"],
                "BROKER_URL": None,
                "SWEEP_INTERVAL_S": 0,
                "SEED_DEMO": False,
                **settings,
            }
        )
        for _ in range(2)
    ]
    try:
        auth = {"Authorization": f"Bearer {make_token('proposer', 'pablo')}"}
        statuses = [apps[k % 2].test_client().post("/api/v1/proposals", json={}, headers=auth).status_code for k in range(3)]
        assert statuses == [422, 422, 429]
    finally:
        for other in apps:
            other.extensions["feasibility.dispatch"].shutdown()
            other.extensions["feasibility.db"]["engine"].dispose()


@pytest.mark.parametrize("setting", ["RATE_LIMIT_SIGN_IN_PER_ADDRESS", "RATE_LIMIT_SIGN_IN_PER_ACCOUNT", "RATE_LIMIT_SUBMISSIONS_PER_TOKEN"])
def test_each_limit_is_a_setting_with_a_default(app: Flask, setting: str) -> None:
    from limits import parse_many

    assert parse_many(app.config[setting])  # a limit the limiter reads ("N per minute")


def test_limits_hold_in_memory_while_redis_is_away(app: Flask, make_token: Any) -> None:
    """A limiter store that cannot be reached (nothing listens on port 1) neither fails a submission nor lifts the limit."""
    from feasibility.web import create_app

    other = create_app(
        {
            "TESTING": True,
            "SECRET_KEY": "test",
            "DATABASE_URL": app.config["DATABASE_URL"],
            "BROKER_URL": None,
            "SWEEP_INTERVAL_S": 0,
            "SEED_DEMO": False,
            "RATELIMIT_STORAGE_URI": "redis://127.0.0.1:1/0",
            "RATE_LIMIT_SUBMISSIONS_PER_TOKEN": "2 per minute",
        }
    )
    try:
        auth = {"Authorization": f"Bearer {make_token('proposer', 'pablo')}"}
        client = other.test_client()
        assert [client.post("/api/v1/proposals", json={}, headers=auth).status_code for _ in range(3)] == [422, 422, 429]
    finally:
        other.extensions["feasibility.dispatch"].shutdown()
        other.extensions["feasibility.db"]["engine"].dispose()

"""The sign-in throttle: per account and per client address, kept in the store, with a growing wait.

References: OWASP Authentication Cheat Sheet, "Login Throttling" (limit failed attempts
per account and per source, with a growing delay); RFC 6585 section 4 (429 Too Many
Requests, optionally with Retry-After); RFC 9110 section 10.2.3 (Retry-After in seconds);
see docs/references.md. The limits themselves (5 per account, 20 per address, 30 s
doubling to 15 min) are our settings, common practice rather than a published rule.
"""

from __future__ import annotations

from datetime import UTC, datetime, timedelta

from flask import Flask
from flask.testing import FlaskClient

from feasibility.store.db import session_scope
from feasibility.web.sign_in_limits import Limits, delay_after, record_failure, seconds_to_wait

from .support import PASSWORD, csrf_from


def _attempt(client: FlaskClient, name: str, password: str) -> tuple[int, str, dict[str, str]]:
    token = csrf_from(client.get("/sign-in").get_data(as_text=True))
    response = client.post("/sign-in", data={"name": name, "password": password, "csrf_token": token})
    return response.status_code, response.get_data(as_text=True), dict(response.headers)


def _from(app: Flask, address: str) -> FlaskClient:
    client = app.test_client()
    client.environ_base["REMOTE_ADDR"] = address
    return client


def test_account_waits_after_five_failures_even_with_the_right_password(client: FlaskClient, people: dict[str, int]) -> None:
    for _ in range(5):
        assert _attempt(client, "rita", "not it")[0] == 401
    status, page, headers = _attempt(client, "rita", PASSWORD)
    assert status == 429  # RFC 6585: Too Many Requests
    assert 1 <= int(headers["Retry-After"]) <= 30  # RFC 9110: delay-seconds; our first wait is 30 s
    assert "Too many failed sign-ins" in page and "Wait " in page
    assert client.get("/proposals").status_code == 302  # not signed in
    # Another account from another address is not held up.
    assert _attempt(_from(client.application, "192.0.2.7"), "pablo", PASSWORD)[0] == 302


def test_throttle_holds_across_web_processes(app: Flask, people: dict[str, int]) -> None:
    """Two apps on one store stand for two gunicorn workers: failures seen by one hold up the other."""
    from feasibility.web import create_app

    other = create_app(
        {"TESTING": True, "SECRET_KEY": "test", "DATABASE_URL": app.config["DATABASE_URL"], "BROKER_URL": None, "SWEEP_INTERVAL_S": 0, "SEED_DEMO": False}
    )
    try:
        first, second = app.test_client(), other.test_client()
        for k in range(5):
            assert _attempt(first if k % 2 else second, "rita", "not it")[0] == 401
        assert _attempt(_from(other, "198.51.100.3"), "rita", PASSWORD)[0] == 429
        assert _attempt(_from(app, "198.51.100.4"), "rita", PASSWORD)[0] == 429
    finally:
        other.extensions["feasibility.dispatch"].shutdown()
        other.extensions["feasibility.db"]["engine"].dispose()


def test_address_waits_after_failures_on_many_accounts(app: Flask, people: dict[str, int]) -> None:
    app.config["SIGN_IN_FAILURES_PER_ADDRESS"] = 3
    guesser = _from(app, "203.0.113.9")
    for name in ("alice", "bob", "carol"):  # unknown names count as well: nothing tells which names exist
        assert _attempt(guesser, name, "guess")[0] == 401
    assert _attempt(guesser, "pablo", PASSWORD)[0] == 429  # the address must wait, whatever the account
    assert _attempt(_from(app, "203.0.113.10"), "pablo", PASSWORD)[0] == 302  # another address signs in


def test_successful_sign_in_clears_the_account_count(client: FlaskClient, people: dict[str, int]) -> None:
    for _ in range(4):
        assert _attempt(client, "rita", "not it")[0] == 401
    assert _attempt(client, "rita", PASSWORD)[0] == 302
    fresh = client.application.test_client()
    for _ in range(4):
        assert _attempt(fresh, "rita", "not it")[0] == 401  # eight failures in all, but only four since the success
    assert _attempt(fresh, "rita", PASSWORD)[0] == 302


def test_wait_doubles_with_each_failure_past_the_limit() -> None:
    limits = Limits()  # 5 per account, first wait 30 s, at most 15 min
    waits = [delay_after(n, 5, limits).total_seconds() for n in range(3, 12)]
    assert waits == [0, 0, 30, 60, 120, 240, 480, 900, 900]


def test_waits_counted_from_the_latest_failure_within_the_window(app: Flask) -> None:
    limits = Limits(per_account=2, per_address=100, window=timedelta(minutes=10), first_delay=timedelta(seconds=30))
    t0 = datetime(2027, 3, 1, 22, 0, tzinfo=UTC)
    with app.app_context(), session_scope() as session:
        record_failure(session, "rita", "192.0.2.1", limits, now=t0)
        assert seconds_to_wait(session, "rita", "192.0.2.1", limits, now=t0) == 0  # one failure: no wait
        record_failure(session, "rita", "192.0.2.2", limits, now=t0 + timedelta(seconds=5))
        assert seconds_to_wait(session, "rita", "192.0.2.3", limits, now=t0 + timedelta(seconds=5)) == 30
        assert seconds_to_wait(session, "rita", "192.0.2.3", limits, now=t0 + timedelta(seconds=25)) == 10
        assert seconds_to_wait(session, "rita", "192.0.2.3", limits, now=t0 + timedelta(seconds=36)) == 0
        assert seconds_to_wait(session, "ada", "192.0.2.1", limits, now=t0 + timedelta(seconds=6)) == 0
        record_failure(session, "rita", "192.0.2.2", limits, now=t0 + timedelta(seconds=40))
        assert seconds_to_wait(session, "rita", "192.0.2.3", limits, now=t0 + timedelta(seconds=40)) == 60  # doubled
        # Ten and a half minutes on, the first two failures have left the ten-minute window: one left, no wait.
        assert seconds_to_wait(session, "rita", "192.0.2.3", limits, now=t0 + timedelta(minutes=10, seconds=30)) == 0

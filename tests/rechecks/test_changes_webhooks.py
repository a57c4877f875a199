"""Recording verdict changes and sending signed notices to a portal's local receiver.

References: the signature is checked with Python's standard ``hmac`` library
(HMAC-SHA256, RFC 2104) and ``hmac.compare_digest``, independently of the code
that signs; the receiver is a standard-library HTTP server on 127.0.0.1, so these
tests allow private addresses (``allow_private=True``, the WEBHOOK_ALLOW_PRIVATE setting).
"""

from __future__ import annotations

import hashlib
import hmac
import json
import threading
from collections.abc import Iterator
from datetime import timedelta
from http.server import BaseHTTPRequestHandler, ThreadingHTTPServer
from typing import Any

import pytest
from sqlalchemy import select

from feasibility.service.changes import record_changes
from feasibility.service.webhooks import DELIVERY_HEADER, SIGNATURE_HEADER, deliver_due, retry_delay, webhook_url_problem
from feasibility.store.db import session_factory, session_scope
from feasibility.store.models import CheckRun, User, VerdictChange, WebhookDelivery, utcnow
from feasibility.web.auth import create_user

SECRET = "shared-secret-for-tests"


class Receiver:
    """A local HTTP server that records what it receives and answers with the given statuses in turn."""

    def __init__(self) -> None:
        self.received: list[tuple[dict[str, str], bytes]] = []
        self.statuses: list[int] = []
        receiver = self

        class Handler(BaseHTTPRequestHandler):
            def do_POST(self) -> None:  # noqa: N802 - the standard library's name
                body = self.rfile.read(int(self.headers["Content-Length"]))
                receiver.received.append((dict(self.headers), body))
                status = receiver.statuses.pop(0) if receiver.statuses else 204
                self.send_response(status)
                self.send_header("Content-Length", "0")
                self.end_headers()

            def log_message(self, *args: Any) -> None:
                pass

        self.server = ThreadingHTTPServer(("127.0.0.1", 0), Handler)
        self.url = f"http://127.0.0.1:{self.server.server_address[1]}/notices"
        self.thread = threading.Thread(target=self.server.serve_forever, daemon=True)
        self.thread.start()

    def close(self) -> None:
        self.server.shutdown()
        self.server.server_close()


@pytest.fixture
def receiver() -> Iterator[Receiver]:
    r = Receiver()
    yield r
    r.close()


def _portal(session: Any, url: str) -> User:
    user = create_user(session, "portal-1", "portal")
    user.webhook_url, user.webhook_secret = url, SECRET
    return user


def _finish(session: Any, run: CheckRun, verdict: str, hours: float) -> None:
    """Store a second result for ``run``'s proposal as the worker would, then record changes."""
    run.state, run.verdict, run.finished_at = "done", verdict, utcnow()
    run.result = {
        "proposal_id": "H1",
        "verdict": verdict,
        "schedule_version": "2027A-2",
        "requests": [{"label": "heron-0", "instrument": "HERON", "target": "T", "verdict": verdict, "figures": {"hours_observable": hours}}],
    }
    session.flush()


def test_changed_verdict_is_recorded_and_notice_verifies(store: str, proposal: Any, done: Any, receiver: Receiver) -> None:
    with session_scope() as session:
        portal = _portal(session, receiver.url)
        from feasibility.service.submissions import submit

        first = submit(session, proposal("H1", "HERON"), portal).run
        first.state, first.verdict, first.finished_at = "done", "feasible", utcnow() - timedelta(hours=1)
        first.result = {
            "proposal_id": "H1",
            "verdict": "feasible",
            "schedule_version": "2027A-1",
            "requests": [{"label": "heron-0", "instrument": "HERON", "target": "T", "verdict": "feasible", "figures": {"hours_observable": 40.0}}],
        }
        session.flush()
        # A re-check against a schedule without HERON nights (a new run of the same proposal version).
        second = CheckRun(
            proposal_version_id=first.proposal_version_id,
            observatory_version_id=first.observatory_version_id,
            schedule_key=0,
            engine_version="test",
            reason="re-check: schedule",
        )
        session.add(second)
        _finish(session, second, "infeasible", 0.0)
        change = record_changes(session, second)
        assert change is not None and (change.verdict_before, change.verdict_after) == ("feasible", "infeasible")
        assert change.details["requests"][0]["changed_figures"] == ["hours_observable"]  # 40 h -> 0 h
        assert record_changes(session, second) is None  # recorded once only
    report = deliver_due(session_factory, allow_private=True)
    assert report.sent == 1
    headers, body = receiver.received[0]
    expected = hmac.new(SECRET.encode(), body, hashlib.sha256).hexdigest()  # standard-library HMAC-SHA256
    assert hmac.compare_digest(headers[SIGNATURE_HEADER], expected)
    assert not hmac.compare_digest(headers[SIGNATURE_HEADER], hmac.new(b"wrong", body, hashlib.sha256).hexdigest())
    notice = json.loads(body)
    assert (notice["proposal_id"], notice["verdict_before"], notice["verdict_after"]) == ("H1", "feasible", "infeasible")
    assert headers[DELIVERY_HEADER].isdigit()
    assert deliver_due(session_factory, allow_private=True).sent == 0  # nothing left to send


def test_same_verdict_small_move_records_nothing(store: str, proposal: Any, done: Any) -> None:
    with session_scope() as session:
        first = done(session, proposal("K1", "KESTREL"))
        first.finished_at = utcnow() - timedelta(hours=1)
        second = CheckRun(
            proposal_version_id=first.proposal_version_id, observatory_version_id=first.observatory_version_id, schedule_key=0, engine_version="test"
        )
        session.add(second)
        second.state, second.verdict, second.finished_at = "done", "feasible", utcnow()
        second.result = dict(first.result)
        session.flush()
        assert record_changes(session, second) is None  # same verdict, same figures
        assert session.scalars(select(VerdictChange)).all() == []


def test_failed_deliveries_back_off_then_give_up(store: str, proposal: Any, receiver: Receiver) -> None:
    with session_scope() as session:
        portal = _portal(session, receiver.url)
        from feasibility.service.submissions import submit

        run = submit(session, proposal("H1", "HERON"), portal).run
        change = VerdictChange(
            proposal_ref=run.proposal_version.proposal_ref,
            previous_run_id=run.id,
            run_id=run.id,
            verdict_before="feasible",
            verdict_after="marginal",
            details={},
        )
        session.add(change)
        session.flush()
        session.add(WebhookDelivery(user_id=portal.id, change_id=change.id, body='{"x":1}'))
    receiver.statuses = [500, 503]
    first = deliver_due(session_factory, allow_private=True)
    assert first.retrying == 1 and first.sent == 0
    assert deliver_due(session_factory, allow_private=True).sent == 0  # not due yet: the back-off holds it
    later = utcnow() + timedelta(minutes=5)
    assert deliver_due(session_factory, allow_private=True, now=later).retrying == 1  # second failure (503)
    with session_scope() as session:
        row = session.scalars(select(WebhookDelivery)).one()
        assert (row.attempts, row.last_error) == (2, "HTTP 503")
    assert deliver_due(session_factory, allow_private=True, now=utcnow() + timedelta(minutes=10)).sent == 1  # then 204
    assert len(receiver.received) == 3
    # Exponential back-off: 30 s, 60 s, 120 s ... capped at 6 h (the documented schedule).
    assert [retry_delay(n).total_seconds() for n in (1, 2, 3)] == [30, 60, 120]
    assert retry_delay(30) == timedelta(hours=6)


def test_unreachable_portal_fails_after_max_attempts(store: str, proposal: Any) -> None:
    with session_scope() as session:
        portal = _portal(session, "http://127.0.0.1:9/closed")  # port 9 (discard): nothing listens in tests
        from feasibility.service.submissions import submit

        run = submit(session, proposal("H1", "HERON"), portal).run
        change = VerdictChange(
            proposal_ref=run.proposal_version.proposal_ref,
            previous_run_id=run.id,
            run_id=run.id,
            verdict_before="feasible",
            verdict_after="marginal",
            details={},
        )
        session.add(change)
        session.flush()
        session.add(WebhookDelivery(user_id=portal.id, change_id=change.id, body="{}"))
    report = deliver_due(session_factory, allow_private=True, max_attempts=1, timeout_s=2)
    assert report.failed == 1
    with session_scope() as session:
        assert session.scalars(select(WebhookDelivery.state)).one() == "failed"


@pytest.mark.parametrize(
    ("url", "ok"),
    [
        ("https://203.0.113.5/hook", True),  # an address literal: no name to resolve (TEST-NET-3, allowed here)
        ("http://127.0.0.1:8080/x", True),
        ("ftp://portal.example.org/", False),
        ("https://user:pw@portal.example.org/", False),
        ("not a url", False),
    ],
)
def test_webhook_url_rules_when_private_addresses_are_allowed(url: str, ok: bool) -> None:
    assert (webhook_url_problem(url, allow_private=True) is None) is ok

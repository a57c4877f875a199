"""Webhook addresses: http(s) only, and public internet addresses only unless WEBHOOK_ALLOW_PRIVATE allows others.

References (docs/references.md): the IANA IPv4/IPv6 Special-Purpose Address Registries
(RFC 6890) with RFC 1918 (private 10/8, 172.16/12, 192.168/16), RFC 1122 (loopback
127/8, "this host" 0.0.0.0), RFC 3927 (link-local 169.254/16), RFC 4291 (::1, fe80::/10,
IPv4-mapped ::ffff:0:0/96), RFC 5771 (multicast 224/4), RFC 1112 (240/4 reserved),
RFC 6598 (shared 100.64/10), RFC 4193 (unique local fc00::/7) and RFC 6761 (``.invalid``
never resolves); OWASP Server-Side Request Forgery Prevention Cheat Sheet (check the
address connected to, do not follow redirects). The receivers are standard-library
HTTP servers on 127.0.0.1.
"""

from __future__ import annotations

import logging
import threading
import urllib.error
from collections.abc import Callable, Iterator
from http.server import BaseHTTPRequestHandler, ThreadingHTTPServer
from typing import Any

import pytest
from flask import Flask
from flask.testing import FlaskClient
from sqlalchemy import select

from feasibility.service.outbound import RefusedAddress, opener
from feasibility.service.webhooks import deliver_due, webhook_url_problem
from feasibility.store.db import session_factory, session_scope
from feasibility.store.models import VerdictChange, WebhookDelivery
from feasibility.web.auth import create_user

from .test_changes_webhooks import SECRET, Receiver


@pytest.mark.parametrize(
    ("url", "words"),
    [
        ("http://127.0.0.1:8080/x", "loopback"),  # RFC 1122
        ("http://127.8.9.10/x", "loopback"),
        ("http://localhost:8080/x", "loopback"),  # a name, resolved (to 127.0.0.1 by /etc/hosts)
        ("http://2130706433/x", "loopback"),  # 127.0.0.1 written as one number: resolved like a name
        ("http://[::1]/x", "loopback"),  # RFC 4291
        ("http://[::ffff:127.0.0.1]/x", "loopback"),  # IPv4-mapped
        ("http://0.0.0.0/x", "unspecified"),
        ("http://169.254.169.254/latest/meta-data", "link-local"),  # RFC 3927 (where cloud metadata services answer)
        ("http://[fe80::1]/x", "link-local"),
        ("http://224.0.0.1/x", "multicast"),  # RFC 5771
        ("http://240.0.0.1/x", "reserved"),  # RFC 1112
        ("http://10.1.2.3/x", "private"),  # RFC 1918
        ("http://172.16.5.4/x", "private"),
        ("https://192.168.1.10/x", "private"),
        ("http://[fc00::1]/x", "private"),  # RFC 4193
        ("http://100.64.0.1/x", "not a public"),  # RFC 6598 shared address space
    ],
)
def test_non_public_addresses_are_refused_by_default(url: str, words: str) -> None:
    problem = webhook_url_problem(url)
    assert problem is not None and words in problem, problem
    assert "WEBHOOK_ALLOW_PRIVATE" in problem  # says how an administrator may allow it
    assert webhook_url_problem(url, allow_private=True) is None


@pytest.mark.parametrize("url", ["https://8.8.8.8/hook", "http://[2606:4700:4700::1111]:8443/hook", "https://portal.invalid/hook"])
def test_public_and_not_yet_resolvable_addresses_are_accepted(url: str) -> None:
    # portal.invalid never resolves (RFC 6761): accepted when set, checked again at each delivery.
    assert webhook_url_problem(url) is None


@pytest.mark.parametrize("url", ["ftp://8.8.8.8/", "file:///etc/passwd", "gopher://8.8.8.8/", "https://u:p@8.8.8.8/", "http:///nohost"])
def test_only_plain_http_and_https_addresses(url: str) -> None:
    assert webhook_url_problem(url, allow_private=True) is not None


def test_setting_a_loopback_webhook_is_a_field_error_unless_allowed(app: Flask, client: FlaskClient, make_token: Callable[..., str]) -> None:
    admin = {"Authorization": f"Bearer {make_token('admin')}"}
    make_token("portal", "portal-a")
    answer = client.put("/api/v1/users/portal-a/webhook", json={"url": "http://127.0.0.1:9000/hook", "secret": SECRET}, headers=admin)
    assert answer.status_code == 422
    (problem,) = answer.get_json()["problems"]
    assert problem["field"] == "url" and "loopback" in problem["problem"]
    app.set_settings(WEBHOOK_ALLOW_PRIVATE=True)  # the administrator allows it (a closed site network, tests)
    assert client.put("/api/v1/users/portal-a/webhook", json={"url": "http://127.0.0.1:9000/hook", "secret": SECRET}, headers=admin).status_code == 200


@pytest.fixture
def receiver() -> Iterator[Receiver]:
    r = Receiver()
    yield r
    r.close()


def _queue_notice(url: str) -> None:
    """A portal whose stored address is ``url`` (as if set before these rules, or allowed then) and one notice due for it."""
    from feasibility.service.submissions import submit

    from .conftest import make_proposal

    with session_scope() as session:
        portal = create_user(session, "portal-1", "portal")
        portal.webhook_url, portal.webhook_secret = url, SECRET
        run = submit(session, make_proposal("H1", "HERON"), portal).run
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


def test_delivery_to_a_name_resolving_to_loopback_is_skipped_and_logged(store: str, receiver: Receiver, caplog: pytest.LogCaptureFixture) -> None:
    port = receiver.url.split(":")[2].split("/")[0]
    _queue_notice(f"http://localhost:{port}/notices")  # resolved when the notice is due: 127.0.0.1
    with caplog.at_level(logging.WARNING, logger="feasibility.service.webhooks"):
        report = deliver_due(session_factory)
    assert (report.sent, report.refused, report.retrying, report.failed) == (0, 1, 0, 0)
    assert receiver.received == []  # nothing reached the loopback receiver
    with session_scope() as session:
        row = session.scalars(select(WebhookDelivery)).one()
        assert row.state == "failed" and row.last_error.startswith("refused:") and "loopback" in row.last_error
    assert any("not sent" in record.getMessage() and "loopback" in record.getMessage() for record in caplog.records)


def test_the_same_delivery_goes_through_when_allowed(store: str, receiver: Receiver) -> None:
    _queue_notice(receiver.url)
    assert deliver_due(session_factory, allow_private=True).sent == 1
    assert len(receiver.received) == 1


def test_the_connection_itself_refuses_non_public_addresses(receiver: Receiver) -> None:
    """The guard sits in the connection (after resolving), not only in the check made when the address is set."""
    with pytest.raises(urllib.error.URLError) as refused:
        opener().open(receiver.url, data=b"{}", timeout=5)
    assert isinstance(refused.value.reason, RefusedAddress) and "loopback" in str(refused.value.reason)
    assert receiver.received == []
    with opener(allow_private=True).open(receiver.url, data=b"{}", timeout=5) as answer:
        assert answer.status == 204
    assert len(receiver.received) == 1


class _Redirector:
    """A local server answering every POST with a redirect to ``target``."""

    def __init__(self, target: str) -> None:
        class Handler(BaseHTTPRequestHandler):
            def do_POST(self) -> None:  # noqa: N802 - the standard library's name
                self.rfile.read(int(self.headers["Content-Length"]))
                self.send_response(307)
                self.send_header("Location", target)
                self.send_header("Content-Length", "0")
                self.end_headers()

            def log_message(self, *args: Any) -> None:
                pass

        self.server = ThreadingHTTPServer(("127.0.0.1", 0), Handler)
        self.url = f"http://127.0.0.1:{self.server.server_address[1]}/hook"
        threading.Thread(target=self.server.serve_forever, daemon=True).start()

    def close(self) -> None:
        self.server.shutdown()
        self.server.server_close()


def test_redirects_are_not_followed(store: str, receiver: Receiver) -> None:
    redirector = _Redirector(receiver.url)
    try:
        _queue_notice(redirector.url)
        report = deliver_due(session_factory, allow_private=True)
    finally:
        redirector.close()
    assert report.retrying == 1 and receiver.received == []  # RFC 9110 307: the notice was not sent on to the target
    with session_scope() as session:
        assert session.scalars(select(WebhookDelivery.last_error)).one() == "HTTP 307"

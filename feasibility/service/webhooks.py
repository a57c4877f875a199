"""Signed notices of changed verdicts, sent to the portals that asked for them.

A portal user whose account has a ``webhook_url`` (set by an administrator,
never by the portal itself) receives a JSON notice each time a re-check changes
the verdict of a proposal it owns or submitted. The notice is signed: the
header :data:`SIGNATURE_HEADER` carries the hex HMAC-SHA256 of the raw request
body, keyed with the user's ``webhook_secret``, so the portal can check it with
``hmac.compare_digest``.

Notices are queued as :class:`~feasibility.store.models.WebhookDelivery` rows in
the transaction that records the change (:func:`queue_notices`), and sent later
by :func:`deliver_due` (a periodic worker task, or the embedded timer), so a slow
or absent portal never holds up a check. A failed delivery is tried again after
an exponentially growing delay, up to :data:`MAX_ATTEMPTS` times. Redirects are
not followed and no proxy is used: a notice goes only to the configured URL.

Addresses are http(s) only and, unless the ``WEBHOOK_ALLOW_PRIVATE`` setting
allows it, must lead to a public internet address (:mod:`feasibility.service.outbound`):
one that does not is refused with a field error when it is set, and a notice
whose address resolves to one when it is due is not sent: the delivery fails at
once with the reason, which is logged.
"""

from __future__ import annotations

import hashlib
import hmac
import json
import logging
import threading
import urllib.error
import urllib.request
from collections.abc import Callable
from contextlib import AbstractContextManager
from dataclasses import dataclass
from datetime import datetime, timedelta
from typing import Any, cast
from urllib.parse import urlsplit

from sqlalchemy import CursorResult, event, func, select, update
from sqlalchemy.orm import Session

from feasibility.service import access
from feasibility.service.outbound import RefusedAddress, host_problem, opener
from feasibility.service.runtime import Runtime, current_runtime, current_settings
from feasibility.store.models import ProposalRecord, User, VerdictChange, WebhookDelivery, utcnow

__all__ = [
    "DELIVERY_HEADER",
    "DeliveryReport",
    "MAX_ATTEMPTS",
    "SIGNATURE_HEADER",
    "deliver_due",
    "notice_body",
    "queue_notices",
    "retry_delay",
    "sign",
    "webhook_url_problem",
]

#: The header carrying the hex HMAC-SHA256 of the raw body.
SIGNATURE_HEADER = "X-Feasibility-Signature"
#: The header carrying the delivery's id, the same on every retry (lets a portal drop repeats).
DELIVERY_HEADER = "X-Feasibility-Delivery"

#: Attempts before a delivery is given up as failed.
MAX_ATTEMPTS = 8
#: Delay before the first retry; each later retry waits twice as long, up to :data:`MAX_DELAY`.
FIRST_RETRY_DELAY = timedelta(seconds=30)
MAX_DELAY = timedelta(hours=6)
#: How long a sender holds a delivery before another sender may try it.
CLAIM_LEASE = timedelta(minutes=2)
#: Seconds to wait for a portal's answer.
TIMEOUT_S = 10.0
#: Longest sleep of the embedded sender between looks at the store.
SENDER_IDLE_S = 60.0
#: The Celery task that sends due notices (worker/recheck_tasks.py).
NOTICE_TASK = "feasibility.deliver_notices"

log = logging.getLogger(__name__)


def sign(body: bytes, secret: str) -> str:
    """The hex HMAC-SHA256 of ``body`` keyed with ``secret``: the value of :data:`SIGNATURE_HEADER`."""
    return hmac.new(secret.encode("utf-8"), body, hashlib.sha256).hexdigest()


def queue_notices(session: Session, change: VerdictChange) -> list[WebhookDelivery]:
    """Queue a notice of ``change`` for every user with a webhook who is told of it (:func:`feasibility.service.access.notice_recipients`).

    Runs inside the caller's transaction; nothing is sent here.
    """
    users = session.scalars(select(User).where(User.webhook_url.is_not(None), access.notice_recipients(change.proposal_ref)).order_by(User.id)).all()
    record = session.get(ProposalRecord, change.proposal_ref)
    body = notice_body(change, record)
    deliveries = [WebhookDelivery(user_id=user.id, change_id=change.id, body=body) for user in users]
    session.add_all(deliveries)
    if deliveries and not event.contains(session, "after_commit", _send_soon):
        event.listen(session, "after_commit", _send_soon, once=True)
    return deliveries


def notice_body(change: VerdictChange, record: ProposalRecord | None) -> str:
    """The JSON text of a notice: which proposal, the verdict before and after, and each request that changed."""
    details = change.details or {}
    notice: dict[str, Any] = {
        "event": "verdict-changed",
        "change_id": change.id,
        "proposal_id": record.proposal_id if record is not None else details.get("proposal_id"),
        "semester": record.semester if record is not None else None,
        "verdict_before": change.verdict_before,
        "verdict_after": change.verdict_after,
        "reason": details.get("reason"),
        "run_id": change.run_id,
        "recorded_at": (change.recorded_at or utcnow()).isoformat(),
        "requests": [{k: r.get(k) for k in ("label", "instrument", "verdict_before", "verdict_after", "changed_figures")} for r in details.get("requests", [])],
    }
    return json.dumps(notice, sort_keys=True, separators=(",", ":"))


@dataclass
class DeliveryReport:
    """What one call of :func:`deliver_due` did."""

    sent: int = 0
    retrying: int = 0
    failed: int = 0
    refused: int = 0  #: not sent: the address is not a public one (given up at once, not counted in ``failed``)

    def as_dict(self) -> dict[str, int]:
        return {"sent": self.sent, "retrying": self.retrying, "failed": self.failed, "refused": self.refused}


SessionMaker = Callable[[], AbstractContextManager[Session]]


def deliver_due(
    sessions: SessionMaker,
    *,
    now: datetime | None = None,
    limit: int = 50,
    timeout_s: float = TIMEOUT_S,
    max_attempts: int = MAX_ATTEMPTS,
    allow_private: bool | None = None,
) -> DeliveryReport:
    """Send every pending notice whose time has come; retry later or give up on failure.

    Parameters
    ----------
    sessions
        Makes a new session (a ``sessionmaker``); each step commits on its own,
        and no transaction is open while waiting for a portal.
    now
        The time to compare ``next_attempt_at`` with (default: now).
    limit
        Most notices sent in one call.
    allow_private
        Send to loopback, private and other non-public addresses too (default: the
        current settings' ``webhook_allow_private``).
    """
    now = now or utcnow()
    if allow_private is None:
        allow_private = current_settings().webhook_allow_private
    report = DeliveryReport()
    for delivery_id, url, secret, body, attempts in _claim(sessions, now, limit):
        refused: str | None = None
        try:
            error = _post(url, secret or "", body, delivery_id, timeout_s, allow_private=allow_private)
        except RefusedAddress as exc:
            refused = error = f"refused: {exc}"
            log.warning("webhook notice %s not sent to %s: %s", delivery_id, url, exc)
        with sessions() as session, session.begin():
            row = session.get(WebhookDelivery, delivery_id)
            if row is None:
                continue
            row.attempts = attempts + 1
            if refused is not None:
                row.state, row.last_error = "failed", refused
                report.refused += 1
            elif error is None:
                row.state, row.last_error = "sent", None
                report.sent += 1
            elif row.attempts >= max_attempts:
                row.state, row.last_error = "failed", error
                report.failed += 1
            else:
                row.last_error = error
                row.next_attempt_at = utcnow() + retry_delay(row.attempts)
                report.retrying += 1
    return report


def retry_delay(attempts: int) -> timedelta:
    """Wait before the next try after ``attempts`` failed ones: 30 s, 1 min, 2 min, ... up to 6 h."""
    return min(FIRST_RETRY_DELAY * (2 ** max(attempts - 1, 0)), MAX_DELAY)


def webhook_url_problem(url: str, *, allow_private: bool = False) -> str | None:
    """Why ``url`` cannot be a webhook address (None when it can).

    http(s), a host, no credentials; unless ``allow_private``, a host that is not,
    and does not resolve to, a loopback, private or other non-public address.
    """
    try:
        parts = urlsplit(url)
        port = parts.port
    except ValueError:
        return "is not a URL (or has a bad port)"
    if parts.scheme not in ("http", "https"):
        return "must start with http:// or https://"
    if not parts.hostname:
        return "has no host"
    if parts.username or parts.password:
        return "must not carry a user name or password"
    if len(url) > 2000:
        return "is longer than 2000 characters"
    if not allow_private and (problem := host_problem(parts.hostname, port or (443 if parts.scheme == "https" else 80))) is not None:
        return f"must lead to a public internet address: {problem} (an administrator may allow such addresses with WEBHOOK_ALLOW_PRIVATE)"
    return None


def _claim(sessions: SessionMaker, now: datetime, limit: int) -> list[tuple[int, str, str | None, str, int]]:
    """Take due deliveries for this sender by moving their next attempt past a short lease."""
    claimed: list[tuple[int, str, str | None, str, int]] = []
    with sessions() as session, session.begin():
        rows = session.execute(
            select(WebhookDelivery, User.webhook_url, User.webhook_secret)
            .join(User, User.id == WebhookDelivery.user_id)
            .where(WebhookDelivery.state == "pending", WebhookDelivery.next_attempt_at <= now)
            .order_by(WebhookDelivery.next_attempt_at, WebhookDelivery.id)
            .limit(limit)
        ).all()
        for delivery, url, secret in rows:
            if not url:
                delivery.state, delivery.last_error = "failed", "the user no longer has a webhook address"
                continue
            taken = cast(
                CursorResult[Any],
                session.execute(
                    update(WebhookDelivery)
                    .where(WebhookDelivery.id == delivery.id, WebhookDelivery.next_attempt_at == delivery.next_attempt_at)
                    .values(next_attempt_at=now + CLAIM_LEASE)
                    .execution_options(synchronize_session=False)
                ),
            )
            if taken.rowcount == 1:
                claimed.append((delivery.id, url, secret, delivery.body, delivery.attempts))
    return claimed


def _send_soon(session: Session) -> None:
    """After the change is committed, have the notices sent: by a Celery task, or by this runtime's sender thread."""
    runtime = current_runtime()
    if runtime is None:
        return  # a script or test without a runtime calls deliver_due itself
    try:
        if runtime.settings.broker_url and runtime.celery is not None:
            from feasibility.service.dispatch import queue_names

            runtime.celery.send_task(NOTICE_TASK, queue=queue_names(runtime.settings))
        else:
            _sender_for(runtime).wake()
    except Exception:  # never let a notice disturb the check that caused it; the periodic task is the backstop
        log.exception("could not schedule the sending of verdict-change notices")


class _Sender:
    """One daemon thread per runtime (embedded mode) sending due notices until none is pending."""

    def __init__(self, runtime: Runtime) -> None:
        self.runtime = runtime
        self.woken = threading.Event()
        self.lock = threading.Lock()
        self.thread: threading.Thread | None = None

    def wake(self) -> None:
        with self.lock:
            self.woken.set()
            if self.thread is None or not self.thread.is_alive():
                self.thread = threading.Thread(target=self._run, name="feasibility-notices", daemon=True)
                self.thread.start()

    def _run(self) -> None:
        while True:
            self.woken.clear()
            try:
                with self.runtime.bound():
                    from feasibility.store.db import session_factory

                    deliver_due(session_factory)
                    wait = _seconds_to_next(session_factory)
            except Exception:
                log.exception("sending verdict-change notices failed")
                wait = SENDER_IDLE_S
            with self.lock:
                if wait is None and not self.woken.is_set():
                    self.thread = None
                    return
            self.woken.wait(min(wait if wait is not None else 0.0, SENDER_IDLE_S))


_senders_lock = threading.Lock()


def _sender_for(runtime: Runtime) -> _Sender:
    with _senders_lock:
        sender = runtime.extras.get("notice-sender")
        if sender is None:
            sender = runtime.extras["notice-sender"] = _Sender(runtime)
        return sender


def _seconds_to_next(sessions: SessionMaker) -> float | None:
    """Seconds until the next pending notice is due (None: nothing pending)."""
    with sessions() as session:
        due = session.scalar(select(func.min(WebhookDelivery.next_attempt_at)).where(WebhookDelivery.state == "pending"))
    if due is None:
        return None
    return max((due - utcnow()).total_seconds(), 0.05)


def _post(url: str, secret: str, body: str, delivery_id: int, timeout_s: float, *, allow_private: bool = False) -> str | None:
    """POST the signed notice; None on a 2xx answer, else what went wrong. Raises RefusedAddress for a non-public address."""
    if (problem := webhook_url_problem(url, allow_private=True)) is not None:  # stored before the rules were what they are
        raise RefusedAddress(f"the address {problem}")
    raw = body.encode("utf-8")
    request = urllib.request.Request(
        url,
        data=raw,
        method="POST",
        headers={
            "Content-Type": "application/json",
            "User-Agent": "feasibility-notices",
            SIGNATURE_HEADER: sign(raw, secret),
            DELIVERY_HEADER: str(delivery_id),
        },
    )
    try:
        with opener(allow_private=allow_private).open(request, timeout=timeout_s) as answer:
            status = answer.status
    except urllib.error.HTTPError as exc:
        exc.close()
        return f"HTTP {exc.code}"
    except urllib.error.URLError as exc:
        if isinstance(exc.reason, RefusedAddress):
            raise exc.reason from None
        return f"not delivered: {exc.reason}"
    except (OSError, ValueError) as exc:
        reason = getattr(exc, "reason", exc)
        return f"not delivered: {reason}"
    return None if 200 <= status < 300 else f"HTTP {status}"

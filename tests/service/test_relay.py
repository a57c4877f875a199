"""The outbox and its relay: runs stored while the broker is away are sent later; lost messages are sent again.

These use the real broker (Redis at TEST_REDIS_URL, under a key prefix of their
own) and, for a broker that is down, a port where nothing listens. In CI a
missing Redis fails them.
"""

from __future__ import annotations

import os
import socket
import subprocess
import sys
import uuid
from collections.abc import Callable, Iterator
from datetime import timedelta
from typing import Any

import pytest
from flask import Flask
from sqlalchemy import update

from feasibility.service.dispatch import enqueue
from feasibility.service.relay import relay
from feasibility.service.submissions import submit
from feasibility.store.db import session_scope
from feasibility.store.models import CheckRun, utcnow

from .helpers import FakeEngine, auth, proposal

REDIS_URL = os.environ.get("TEST_REDIS_URL", "redis://127.0.0.1:6379/0")
IN_CI = os.environ.get("CI", "").lower() in ("1", "true", "yes")


@pytest.fixture
def prefix() -> Iterator[str]:
    """A key prefix of this test's own in the real Redis; its keys are deleted afterwards."""
    import redis

    client = redis.Redis.from_url(REDIS_URL)
    try:
        client.ping()
    except Exception as exc:  # noqa: BLE001
        client.close()
        if IN_CI:
            pytest.fail(f"Redis at {REDIS_URL} is not reachable: {exc} (CI is set: it is required)", pytrace=False)
        pytest.skip(f"Redis at {REDIS_URL} is not reachable: {exc}")
    name = f"fzr{uuid.uuid4().hex[:10]}"
    yield name
    for key in client.scan_iter(f"{name}*"):
        client.delete(key)
    client.close()


def _free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


def _celery_app(app: Flask, prefix: str, broker: str) -> Flask:
    """Another app on the same store, dispatching to Celery through ``broker``."""
    from feasibility.web import create_app

    return create_app(
        {
            "TESTING": True,
            "SECRET_KEY": "test",
            "DATABASE_URL": app.config["DATABASE_URL"],
            "BROKER_URL": broker,
            "QUEUE_PREFIX": prefix,
            "SEED_DEMO": False,
            "SWEEP_INTERVAL_S": 5,
            "QUEUED_TIMEOUT_S": 600,
        }
    )


def _run(app: Flask, run_id: int) -> CheckRun:
    with app.app_context(), session_scope() as session:
        return session.get_one(CheckRun, run_id)


def _messages(app: Flask) -> int:
    with app.app_context():
        count = app.extensions["feasibility.dispatch"].message_count()
    assert count is not None
    return int(count)


def _relay(app: Flask) -> Any:
    with app.app_context():
        return relay(app.extensions["feasibility.dispatch"], app.extensions["feasibility.runtime"].settings)


def _drop_keys(prefix: str, *, keep_marker: bool) -> None:
    import redis

    client = redis.Redis.from_url(REDIS_URL)
    for key in client.scan_iter(f"{prefix}*"):
        if keep_marker and key.endswith(b"marker"):
            continue
        client.delete(key)
    client.close()


def test_a_submission_stored_while_the_broker_is_down_is_accepted_and_sent_later(app: Flask, prefix: str, make_token: Callable[..., str]) -> None:
    token = make_token("proposer")
    down = _celery_app(app, prefix, f"redis://127.0.0.1:{_free_port()}/0")  # nothing listens there
    answer = down.test_client().post("/api/v1/proposals", json=proposal("OUT-1"), headers=auth(token))
    assert answer.status_code == 202, answer.json  # stored: accepted, though not yet queued (RFC 9110 §15.3.3)
    run_id = answer.json["run"]["id"]
    assert _run(app, run_id).dispatched_at is None  # still in the outbox

    up = _celery_app(app, prefix, REDIS_URL)
    again = up.test_client().post("/api/v1/proposals", json=proposal("OUT-1"), headers=auth(token))
    assert again.status_code == 200 and again.json["created"] is False
    assert _run(app, run_id).dispatched_at is not None  # the re-submission found it queued and sent it
    assert _messages(up) == 1

    first = _relay(up)  # the first pass finds no marker yet: it sends the queued run once more (harmless)
    assert first.fresh == [run_id]
    assert _relay(up).sent == 0  # the broker holds its message: nothing to do
    assert _messages(up) == 2


def test_the_relay_sends_unsent_runs_and_runs_whose_messages_were_lost(app: Flask, prefix: str) -> None:
    up = _celery_app(app, prefix, REDIS_URL)
    with app.app_context(), session_scope() as session:  # stored by a process that died before sending
        run_id = submit(session, proposal("OUT-2"), None).run.id
        session.flush()
    with app.app_context(), session_scope() as session:
        session.execute(update(CheckRun).where(CheckRun.id == run_id).values(queued_at=utcnow() - timedelta(seconds=5)))
    assert _relay(up).fresh == [run_id]
    assert _relay(up).sent == 0
    assert _messages(up) == 1

    _drop_keys(prefix, keep_marker=False)  # the broker restarted without persistence: messages and marker gone
    lost = _relay(up)
    assert lost.lost_messages and lost.fresh == [run_id]
    assert _messages(up) == 1

    _drop_keys(prefix, keep_marker=True)  # the message alone vanished: the broker holds fewer than the runs waiting
    with app.app_context(), session_scope() as session:
        session.execute(update(CheckRun).where(CheckRun.id == run_id).values(dispatched_at=utcnow() - timedelta(minutes=1)))
    assert _relay(up).sent == 0  # one pass could catch a message in passage: noted, not acted on
    counted = _relay(up)
    assert counted.lost_messages and counted.fresh == [run_id]
    assert _relay(up).sent == 0  # its message is there again


def test_the_relay_takes_back_a_lapsed_claim_and_never_sends_a_failed_run(app: Flask, prefix: str) -> None:
    up = _celery_app(app, prefix, REDIS_URL)
    with app.app_context(), session_scope() as session:
        lapsed = submit(session, proposal("OUT-3"), None).run.id
        failed = submit(session, proposal("OUT-4"), None).run.id
    now = utcnow()
    with app.app_context(), session_scope() as session:
        session.execute(
            update(CheckRun)
            .where(CheckRun.id == lapsed)
            .values(
                state="running",
                attempts=1,
                started_at=now - timedelta(minutes=2),
                lease_owner="elsewhere:7",
                lease_expires_at=now - timedelta(seconds=1),
                dispatched_at=now - timedelta(minutes=2),
            )
        )
        session.execute(
            update(CheckRun).where(CheckRun.id == failed).values(state="failed", error="the result could not be stored: DataError", dispatched_at=None)
        )
    done = _relay(up)
    assert done.taken_back == [lapsed] and done.fresh == [lapsed]
    run = _run(app, lapsed)
    assert run.state == "queued" and run.lease_owner is None and run.dispatched_at is not None
    assert _run(app, failed).state == "failed"


def test_the_pool_takes_over_at_once_what_a_killed_process_left(app: Flask, fake_engine: FakeEngine) -> None:
    with app.app_context(), session_scope() as session:
        held = submit(session, proposal("KILLED-1"), None).run.id
        waiting = submit(session, proposal("KILLED-2"), None).run.id
    child = subprocess.Popen([sys.executable, "-c", "pass"])
    child.wait()
    now = utcnow()
    with app.app_context(), session_scope() as session:  # claimed by a process of this host that is gone, lease still live
        session.execute(
            update(CheckRun)
            .where(CheckRun.id == held)
            .values(
                state="running", attempts=1, started_at=now, lease_owner=f"{socket.gethostname()}:{child.pid}", lease_expires_at=now + timedelta(seconds=30)
            )
        )
    pool = app.extensions["feasibility.dispatch"]
    assert pool.sweep() == 2
    assert pool.wait_idle(10)
    assert {_run(app, i).state for i in (held, waiting)} == {"done"}
    assert _run(app, held).attempts == 2


def test_the_relay_counts_the_runs_a_batch_message_carries(app: Flask, prefix: str) -> None:
    up = _celery_app(app, prefix, REDIS_URL)
    with app.app_context(), session_scope() as session:
        ids = [submit(session, proposal(f"BATCH-{n}"), None).run.id for n in range(20)]
    with up.app_context():
        assert enqueue(ids, bulk=True)  # marked sent once the broker has them
        dispatcher = up.extensions["feasibility.dispatch"]
        messages = dispatcher.message_count()
        assert messages is not None and messages < len(ids)  # several runs a message
        assert dispatcher.message_count(at_least=len(ids)) == len(ids)  # read from the messages' headers
    first = _relay(up)  # the first pass finds no marker yet: it sends every queued run once more (harmless)
    assert sorted(first.fresh + first.bulk) == sorted(ids)
    for _ in range(3):  # every run has a message: no pass finds messages missing
        again = _relay(up)
        assert again.sent == 0 and not again.lost_messages

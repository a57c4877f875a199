"""The embedded pool: fresh submissions before bulk re-checks; the sweeper picks up runs queued elsewhere."""

from __future__ import annotations

import threading

from flask import Flask

from feasibility.service.dispatch import enqueue
from feasibility.service.pool import EmbeddedPool
from feasibility.service.submissions import submit
from feasibility.store.db import session_scope
from feasibility.store.models import CheckRun

from .helpers import FakeEngine, proposal


def _runs(app: Flask, ids: list[str]) -> list[int]:
    with app.app_context(), session_scope() as session:
        return [submit(session, proposal(i), None).run.id for i in ids]


def test_fresh_submissions_run_before_bulk_rechecks(app: Flask, fake_engine: FakeEngine) -> None:
    runtime = app.extensions["feasibility.runtime"]
    runtime.dispatcher = app.extensions["feasibility.dispatch"] = pool = EmbeddedPool(runtime, workers=1, sweep_interval_s=0)
    blocker, *bulk = _runs(app, ["Q-0", "Q-1", "Q-2", "Q-3"])
    (fresh,) = _runs(app, ["Q-9"])
    fake_engine.gate = threading.Event()
    with app.app_context():
        enqueue([blocker])  # occupies the single worker
        while not fake_engine.calls:
            threading.Event().wait(0.01)
        enqueue(bulk, bulk=True)
        enqueue([fresh])
    fake_engine.gate.set()
    assert pool.wait_idle(10)
    pool.shutdown()
    assert fake_engine.calls == ["Q-0", "Q-9", "Q-1", "Q-2", "Q-3"]


def test_sweep_queues_runs_created_by_another_process(app: Flask, fake_engine: FakeEngine) -> None:
    pool = app.extensions["feasibility.dispatch"]
    run_ids = _runs(app, ["W-1", "W-2"])  # stored but never enqueued here
    assert pool.sweep() == 2
    assert pool.wait_idle(10)
    with app.app_context(), session_scope() as session:
        assert {session.get_one(CheckRun, i).state for i in run_ids} == {"done"}
    assert sorted(fake_engine.calls) == ["W-1", "W-2"]

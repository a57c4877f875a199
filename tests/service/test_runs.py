"""The task body: idempotent, one stored result per run however often it is executed."""

from __future__ import annotations

import threading
from collections.abc import Iterator
from datetime import timedelta

import pytest
from flask import Flask
from sqlalchemy import func, select, update
from sqlalchemy.exc import OperationalError

from feasibility.service.runs import execute_run
from feasibility.service.submissions import submit
from feasibility.service.sweeper import stale_runs
from feasibility.store.db import session_scope
from feasibility.store.models import CheckRun, FindingRow, RequestOutcome, utcnow

from .helpers import FakeEngine, proposal


@pytest.fixture
def ctx(app: Flask) -> Iterator[Flask]:
    with app.app_context():
        yield app


def _new_run(proposal_id: str = "R-1") -> int:
    with session_scope() as session:
        return submit(session, proposal(proposal_id), None).run.id


def _outcomes(run_id: int) -> int:
    with session_scope() as session:
        return int(session.scalar(select(func.count()).select_from(RequestOutcome).where(RequestOutcome.run_id == run_id)) or 0)


def test_running_a_task_twice_stores_one_result(ctx: Flask, fake_engine: FakeEngine) -> None:
    run_id = _new_run()
    assert execute_run(run_id) == "done"
    assert execute_run(run_id) == "skipped"  # a done run is not recomputed
    assert fake_engine.calls == ["R-1"]
    assert _outcomes(run_id) == 1
    with session_scope() as session:
        run = session.get_one(CheckRun, run_id)
        assert (run.state, run.verdict, run.attempts) == ("done", "feasible", 1)
        assert session.scalar(select(func.count()).select_from(FindingRow)) == 2


def test_two_workers_at_once_store_one_result(ctx: Flask, fake_engine: FakeEngine) -> None:
    run_id = _new_run()
    fake_engine.gate = threading.Event()
    answers: list[str] = []

    def work() -> None:
        with ctx.app_context():
            answers.append(execute_run(run_id))

    threads = [threading.Thread(target=work) for _ in range(2)]
    for t in threads:
        t.start()
    fake_engine.gate.set()
    for t in threads:
        t.join(10)
    assert sorted(answers) == ["done", "skipped"]
    assert _outcomes(run_id) == 1


def test_an_engine_fault_is_stored_not_raised(ctx: Flask, fake_engine: FakeEngine) -> None:
    run_id = _new_run()
    fake_engine.error = ValueError("engine trouble")
    assert execute_run(run_id) == "failed"
    with session_scope() as session:
        run = session.get_one(CheckRun, run_id)
        assert run.state == "failed" and "engine trouble" in (run.error or "")


def test_a_lost_run_is_taken_over_and_the_late_result_dropped(ctx: Flask, fake_engine: FakeEngine) -> None:
    run_id = _new_run()
    long_ago = utcnow() - timedelta(hours=2)
    with session_scope() as session:  # as if a worker claimed it and died two hours ago
        session.execute(update(CheckRun).where(CheckRun.id == run_id).values(state="running", started_at=long_ago, attempts=1))
    assert execute_run(run_id) == "done"
    with session_scope() as session:
        assert session.get_one(CheckRun, run_id).attempts == 2
    assert _outcomes(run_id) == 1


def test_a_database_fault_propagates_and_releases_the_claim(ctx: Flask, fake_engine: FakeEngine, monkeypatch: pytest.MonkeyPatch) -> None:
    run_id = _new_run()

    def broken(*args: object) -> str:
        raise OperationalError("INSERT", {}, Exception("database is locked"))

    monkeypatch.setattr("feasibility.service.runs._store_result", broken)
    with pytest.raises(OperationalError):
        execute_run(run_id)
    with session_scope() as session:
        assert session.get_one(CheckRun, run_id).state == "queued"  # ready for the retry
    monkeypatch.undo()
    monkeypatch.setattr("feasibility.service.runs.check", fake_engine)
    assert execute_run(run_id) == "done"


def test_sweeper_finds_stale_runs_only(ctx: Flask, fake_engine: FakeEngine) -> None:
    fresh, stale = _new_run("S-1"), _new_run("S-2")
    with session_scope() as session:
        session.execute(update(CheckRun).where(CheckRun.id == stale).values(queued_at=utcnow() - timedelta(hours=1)))
    found = stale_runs(timedelta(minutes=10), timedelta(minutes=15))
    assert found == ([stale], [])
    assert stale_runs(timedelta(minutes=10), timedelta(minutes=15)) == ([], [])  # queued_at was reset
    assert fresh != stale


def test_submitting_again_after_an_engine_fault_queues_the_run_again(ctx: Flask, fake_engine: FakeEngine) -> None:
    run_id = _new_run("F-1")
    fake_engine.error = ValueError("engine trouble")
    assert execute_run(run_id) == "failed"
    with session_scope() as session:
        again = submit(session, proposal("F-1"), None)
    assert again.run.id == run_id and again.created  # same inputs, same run: queued again, to be enqueued
    fake_engine.error = None
    assert execute_run(run_id) == "done"
    assert _outcomes(run_id) == 1

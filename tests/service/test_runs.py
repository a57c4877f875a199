"""The task body: idempotent, one stored result per run however often it is executed; leases and store faults."""

from __future__ import annotations

import socket
import subprocess
import sys
import threading
from collections.abc import Iterator
from datetime import timedelta

import pytest
from flask import Flask
from sqlalchemy import func, select, update
from sqlalchemy.exc import OperationalError

from feasibility.results import Level
from feasibility.service.leases import owner_id
from feasibility.service.runs import LeaseHeld, execute_run
from feasibility.service.submissions import submit
from feasibility.store.db import session_scope
from feasibility.store.models import CheckRun, FindingRow, RequestOutcome, VerdictChange, utcnow

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
        assert session.scalar(select(func.count()).select_from(FindingRow)) == 0  # feasible findings have no row (the lists ask for none)


def test_two_workers_at_once_store_one_result(ctx: Flask, fake_engine: FakeEngine) -> None:
    run_id = _new_run()
    fake_engine.gate = threading.Event()
    answers: list[str] = []

    def work() -> None:
        with ctx.app_context():
            try:
                answers.append(execute_run(run_id))
            except LeaseHeld:  # the other thread's claim is live: this message is to be tried again later
                answers.append("held")
            finally:
                fake_engine.gate.set()

    threads = [threading.Thread(target=work) for _ in range(2)]
    for t in threads:
        t.start()
    for t in threads:
        t.join(10)
    assert sorted(answers) == ["done", "held"]
    assert execute_run(run_id) == "skipped"  # the retried message, once the run is done
    assert _outcomes(run_id) == 1 and fake_engine.calls == ["R-1"]


def test_an_engine_fault_is_stored_not_raised(ctx: Flask, fake_engine: FakeEngine) -> None:
    run_id = _new_run()
    fake_engine.error = ValueError("engine trouble")
    assert execute_run(run_id) == "failed"
    with session_scope() as session:
        run = session.get_one(CheckRun, run_id)
        assert run.state == "failed" and "engine trouble" in (run.error or "")


def _hold(run_id: int, owner: str, lease_s: float, attempts: int = 1) -> None:
    """As if ``owner`` had claimed the run, with its lease lapsing ``lease_s`` seconds from now (negative: lapsed)."""
    now = utcnow()
    with session_scope() as session:
        session.execute(
            update(CheckRun)
            .where(CheckRun.id == run_id)
            .values(
                state="running", started_at=now - timedelta(seconds=5), attempts=attempts, lease_owner=owner, lease_expires_at=now + timedelta(seconds=lease_s)
            )
        )


def _dead_pid() -> int:
    child = subprocess.Popen([sys.executable, "-c", "pass"])
    child.wait()
    return child.pid


def test_a_run_whose_lease_lapsed_is_taken_over_and_the_late_result_dropped(ctx: Flask, fake_engine: FakeEngine) -> None:
    run_id = _new_run()
    _hold(run_id, "another-host:4242", lease_s=-1)  # its worker stopped renewing a second ago
    assert execute_run(run_id) == "done"
    with session_scope() as session:
        run = session.get_one(CheckRun, run_id)
        assert (run.attempts, run.lease_owner, run.lease_expires_at) == (2, None, None)
    assert _outcomes(run_id) == 1


def test_a_live_lease_elsewhere_is_waited_for_not_dropped(ctx: Flask, fake_engine: FakeEngine) -> None:
    run_id = _new_run()
    _hold(run_id, "another-host:4242", lease_s=20)
    with pytest.raises(LeaseHeld) as held:
        execute_run(run_id)
    assert 20 <= held.value.retry_in <= 22  # the lease's remaining time (20 s), and a margin of a second
    assert fake_engine.calls == []
    with session_scope() as session:
        assert session.get_one(CheckRun, run_id).attempts == 1  # untouched


def test_a_claim_held_by_a_dead_process_of_this_host_is_taken_over_at_once(ctx: Flask, fake_engine: FakeEngine) -> None:
    run_id = _new_run()
    _hold(run_id, f"{socket.gethostname()}:{_dead_pid()}", lease_s=25)  # as a worker child killed mid-run
    assert execute_run(run_id) == "done"
    with session_scope() as session:
        assert session.get_one(CheckRun, run_id).attempts == 2


def test_a_stale_claim_of_this_very_process_is_taken_over(ctx: Flask, fake_engine: FakeEngine) -> None:
    run_id = _new_run()
    _hold(run_id, owner_id(), lease_s=25)  # our own claim, left when a release failed; nobody here computes it
    assert execute_run(run_id) == "done"


def test_the_heartbeat_renews_the_lease_while_the_run_computes(ctx: Flask, fake_engine: FakeEngine) -> None:
    ctx.set_settings(LEASE_S=0.6)  # renewed every 0.2 s
    run_id = _new_run()
    fake_engine.gate = threading.Event()
    seen: list[object] = []
    worker = threading.Thread(target=lambda: ctx.app_context().push() or seen.append(execute_run(run_id)))
    worker.start()
    while not fake_engine.calls:
        threading.Event().wait(0.02)
    with session_scope() as session:
        first = session.get_one(CheckRun, run_id).lease_expires_at
    threading.Event().wait(1.0)  # longer than the lease: without renewal it would have lapsed
    with session_scope() as session:
        run = session.get_one(CheckRun, run_id)
        assert run.state == "running" and run.lease_owner == owner_id()
        assert run.lease_expires_at is not None and first is not None and run.lease_expires_at > first
    with pytest.raises(LeaseHeld):
        execute_run(run_id)  # a second message, here, while it computes: live, so it waits
    fake_engine.gate.set()
    worker.join(10)
    assert seen == ["done"]


def test_a_database_fault_propagates_and_releases_the_claim(ctx: Flask, fake_engine: FakeEngine, monkeypatch: pytest.MonkeyPatch) -> None:
    run_id = _new_run()

    def broken(*args: object) -> str:
        raise OperationalError("INSERT", {}, Exception("database is locked"))

    monkeypatch.setattr("feasibility.service.runs._store_together", broken)
    with pytest.raises(OperationalError):
        execute_run(run_id)
    with session_scope() as session:
        assert session.get_one(CheckRun, run_id).state == "queued"  # ready for the retry
    monkeypatch.undo()
    monkeypatch.setattr("feasibility.service.runs.check", fake_engine)
    assert execute_run(run_id) == "done"


def test_a_store_fault_that_will_not_pass_fails_the_run_for_good(ctx: Flask, fake_engine: FakeEngine, monkeypatch: pytest.MonkeyPatch) -> None:
    run_id = _new_run("POISON-1")
    original = fake_engine.__call__

    def absurd(*args: object) -> object:
        result = original(*args)
        result.requests[0].figures["hours_requested"] = 10**400  # no float can hold it: storing fails, every time
        return result

    monkeypatch.setattr("feasibility.service.runs.check", absurd)
    assert execute_run(run_id) == "failed"
    with session_scope() as session:
        run = session.get_one(CheckRun, run_id)
        assert run.state == "failed" and run.result is None
        assert (run.error or "").startswith("the result could not be stored: OverflowError")
    assert execute_run(run_id) == "skipped"  # a redelivered message does not bring it back
    assert _outcomes(run_id) == 0


def test_unreadable_inputs_fail_the_run_instead_of_looping(ctx: Flask, fake_engine: FakeEngine) -> None:
    run_id = _new_run("POISON-2")
    with session_scope() as session:  # as if the stored document no longer met the document rules
        version = session.get_one(CheckRun, run_id).proposal_version
        version.document = {**version.document, "requests": "not a list"}
    assert execute_run(run_id) == "failed"
    with session_scope() as session:
        assert "requests" in (session.get_one(CheckRun, run_id).error or "")
    assert fake_engine.calls == []


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


def test_a_runs_change_is_recorded_whatever_other_proposals_are_stored(ctx: Flask, fake_engine: FakeEngine) -> None:
    # Another proposal stored first and not yet checked: the test that a run has one before it must look at its own proposal.
    _new_run("OTHER-1")
    first = _new_run("R-CHANGE")
    assert execute_run(first) == "done"
    with session_scope() as session:
        assert session.scalar(select(func.count()).select_from(VerdictChange)) == 0  # the proposal's first run: nothing to compare
    changed = proposal("R-CHANGE", hours=5.0)  # a new version of the same proposal
    with session_scope() as session:
        second = submit(session, changed, None).run.id
    fake_engine.level = Level.INFEASIBLE
    assert execute_run(second) == "done"
    with session_scope() as session:
        change = session.scalars(select(VerdictChange)).one()
        assert (change.previous_run_id, change.run_id) == (first, second)
        assert (change.verdict_before, change.verdict_after) == ("feasible", "infeasible")

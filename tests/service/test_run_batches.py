"""A batch of check runs claimed, computed and stored together: each run keeps the guarantees of a run alone.

Finished only while its own claim is ours, stored once however often the batch is
executed, held runs left for later, a result that cannot be stored failing only its
own run, a passing store fault giving every claim back. Also the slimmer rows
(migration 0007) and the batch's one heartbeat.
"""

from __future__ import annotations

import threading
from collections.abc import Iterator
from datetime import timedelta
from pathlib import Path
from typing import Any

import pytest
from alembic import command
from flask import Flask
from sqlalchemy import func, select, text, update
from sqlalchemy.exc import OperationalError

from feasibility.results import Level
from feasibility.service.leases import Heartbeat
from feasibility.service.runs import execute_run, execute_runs
from feasibility.service.submissions import submit
from feasibility.store.db import make_engine, session_scope
from feasibility.store.migrate import alembic_config, upgrade
from feasibility.store.models import CheckRun, FindingRow, RequestOutcome, VerdictChange, utcnow

from .helpers import FakeEngine, proposal


@pytest.fixture
def ctx(app: Flask) -> Iterator[Flask]:
    with app.app_context():
        yield app


def _new_runs(*proposal_ids: str, hours: float = 3.0) -> list[int]:
    with session_scope() as session:
        return [submit(session, proposal(proposal_id, hours=hours), None).run.id for proposal_id in proposal_ids]


def _states(run_ids: list[int]) -> list[tuple[str, int]]:
    with session_scope() as session:
        return [(run.state, run.attempts) for run in (session.get_one(CheckRun, run_id) for run_id in run_ids)]


def _outcomes_per_run() -> dict[int, int]:
    with session_scope() as session:
        return dict(session.execute(select(RequestOutcome.run_id, func.count()).group_by(RequestOutcome.run_id)).all())


def test_a_batch_stores_each_run_once_however_often_it_is_executed(ctx: Flask, fake_engine: FakeEngine) -> None:
    ids = _new_runs("B-1", "B-2", "B-3")
    assert dict(execute_runs(ids).ended) == {"done": 3}
    again = execute_runs(ids)  # the message delivered again (a worker that died before acknowledging it)
    assert dict(again.ended) == {"skipped": 3} and not again.held
    assert fake_engine.calls == ["B-1", "B-2", "B-3"]
    assert _outcomes_per_run() == {run_id: 1 for run_id in ids}
    assert _states(ids) == [("done", 1)] * 3
    with session_scope() as session:
        run = session.get_one(CheckRun, ids[1])
        assert (run.verdict, run.result["proposal_id"], run.lease_owner, run.lease_expires_at) == ("feasible", "B-2", None, None)


def test_a_held_run_is_left_for_later_and_the_others_stored(ctx: Flask, fake_engine: FakeEngine) -> None:
    ids = _new_runs("H-1", "H-2", "H-3")
    execute_run(ids[2])  # done already: skipped in the batch
    now = utcnow()
    with session_scope() as session:  # as if a live worker elsewhere had claimed H-2 with 20 s left on its lease
        session.execute(
            update(CheckRun)
            .where(CheckRun.id == ids[1])
            .values(state="running", attempts=1, started_at=now, lease_owner="another-host:4242", lease_expires_at=now + timedelta(seconds=20))
        )
    batch = execute_runs(ids)
    assert dict(batch.ended) == {"done": 1, "skipped": 1}
    assert list(batch.held) == [ids[1]] and 20 <= batch.held[ids[1]] <= 22  # its lease's remaining time and a margin of a second
    assert _states(ids) == [("done", 1), ("running", 1), ("done", 1)]
    assert fake_engine.calls == ["H-3", "H-1"]


def test_a_run_whose_claim_was_taken_over_while_computing_is_dropped_alone(ctx: Flask, fake_engine: FakeEngine, monkeypatch: pytest.MonkeyPatch) -> None:
    ids = _new_runs("T-1", "T-2")

    def taken_over(proposal: Any, observatory: Any, schedule: Any) -> Any:
        if proposal.id == "T-1":  # another worker takes T-1 over (its lease seen lapsed): its attempt is counted again
            with session_scope() as session:
                session.execute(update(CheckRun).where(CheckRun.id == ids[0]).values(attempts=CheckRun.attempts + 1, lease_owner="another-host:1"))
        return fake_engine(proposal, observatory, schedule)

    monkeypatch.setattr("feasibility.service.runs.check", taken_over)
    assert dict(execute_runs(ids).ended) == {"superseded": 1, "done": 1}
    assert _states(ids) == [("running", 2), ("done", 1)]  # the other worker's claim stands, untouched
    assert _outcomes_per_run() == {ids[1]: 1}


def test_a_result_that_cannot_be_stored_fails_its_run_only(ctx: Flask, fake_engine: FakeEngine, monkeypatch: pytest.MonkeyPatch) -> None:
    ids = _new_runs("P-1", "POISON-3", "P-2")

    def absurd(*args: Any) -> Any:
        result = fake_engine(*args)
        if result.proposal_id == "POISON-3":
            result.requests[0].figures["hours_requested"] = 10**400  # no float can hold it: storing fails, every time
        return result

    monkeypatch.setattr("feasibility.service.runs.check", absurd)
    assert dict(execute_runs(ids).ended) == {"done": 2, "failed": 1}
    assert [state for state, _ in _states(ids)] == ["done", "failed", "done"]
    assert _outcomes_per_run() == {ids[0]: 1, ids[2]: 1}
    with session_scope() as session:
        assert (session.get_one(CheckRun, ids[1]).error or "").startswith("the result could not be stored: OverflowError")


def test_an_engine_fault_fails_its_run_only(ctx: Flask, fake_engine: FakeEngine, monkeypatch: pytest.MonkeyPatch) -> None:
    ids = _new_runs("E-1", "E-2")

    def faulty(proposal: Any, *args: Any) -> Any:
        if proposal.id == "E-1":
            raise ValueError("engine trouble")
        return fake_engine(proposal, *args)

    monkeypatch.setattr("feasibility.service.runs.check", faulty)
    assert dict(execute_runs(ids).ended) == {"failed": 1, "done": 1}
    with session_scope() as session:
        failed = session.get_one(CheckRun, ids[0])
        assert (failed.state, failed.result, failed.verdict) == ("failed", None, None) and "engine trouble" in (failed.error or "")


def test_a_passing_store_fault_gives_every_claim_back(ctx: Flask, fake_engine: FakeEngine, monkeypatch: pytest.MonkeyPatch) -> None:
    ids = _new_runs("F-1", "F-2")

    def broken(*args: object) -> object:
        raise OperationalError("UPDATE", {}, Exception("server closed the connection unexpectedly"))

    monkeypatch.setattr("feasibility.service.runs._store_together", broken)
    with pytest.raises(OperationalError):
        execute_runs(ids)
    assert _states(ids) == [("queued", 1), ("queued", 1)]  # ready for the retry of the whole batch
    monkeypatch.undo()
    monkeypatch.setattr("feasibility.service.runs.check", fake_engine)
    assert dict(execute_runs(ids).ended) == {"done": 2}
    assert _outcomes_per_run() == {ids[0]: 1, ids[1]: 1}


def test_two_versions_of_a_proposal_in_one_batch_record_their_changes_in_order(ctx: Flask, fake_engine: FakeEngine) -> None:
    (first,) = _new_runs("V-1")
    assert execute_run(first) == "done"
    (second,) = _new_runs("V-1", hours=5.0)
    (third,) = _new_runs("V-1", hours=7.0)
    fake_engine.level = Level.INFEASIBLE
    assert dict(execute_runs([second, third]).ended) == {"done": 2}
    with session_scope() as session:
        changes = session.execute(select(VerdictChange.previous_run_id, VerdictChange.run_id).order_by(VerdictChange.id)).all()
    # As if stored one after the other: the second against the first; the third's verdict did not change from the second's,
    # and its hours were not asked of the stand-in engine, so nothing is recorded for it.
    assert changes == [(first, second)]


def test_finding_rows_hold_check_and_level_of_findings_that_are_not_feasible(ctx: Flask, fake_engine: FakeEngine) -> None:
    fake_engine.level = Level.MARGINAL  # the stand-in's visibility finding; its moon finding stays feasible
    ids = _new_runs("R-1", "R-2")
    execute_runs(ids)
    with session_scope() as session:
        rows = session.execute(select(FindingRow.check, FindingRow.level)).all()
        assert rows == [("visibility", "marginal")] * 2
        stored = session.get_one(CheckRun, ids[0]).result
    findings = stored["requests"][0]["findings"]  # the result holds every finding, its words, not its figures
    assert [(f["check"], f["level"], f["message"]) for f in findings] == [("visibility", "marginal", "stand-in"), ("moon", "feasible", "stand-in moon")]
    assert all("figures" not in f for f in findings)


def test_one_heartbeat_renews_every_claim_of_a_batch_and_notes_one_taken_over(ctx: Flask, fake_engine: FakeEngine) -> None:
    ids = _new_runs("L-1", "L-2")
    now = utcnow()
    with session_scope() as session:
        session.execute(update(CheckRun).where(CheckRun.id.in_(ids)).values(state="running", attempts=1, started_at=now, lease_expires_at=now))
        session.execute(update(CheckRun).where(CheckRun.id == ids[1]).values(attempts=2))  # taken over by another worker
    with Heartbeat({ids[0]: 1, ids[1]: 1}, timedelta(seconds=0.3), timedelta(minutes=1)) as heartbeat:
        threading.Event().wait(0.5)  # the beat is every 0.1 s
    assert heartbeat.lost == {ids[1]}
    with session_scope() as session:
        renewed, untouched = (session.get_one(CheckRun, run_id).lease_expires_at for run_id in ids)
    assert renewed is not None and renewed > now and untouched == now


@pytest.mark.parametrize("store", ["sqlite", "postgresql"])
def test_migration_0007_drops_the_copies_and_keeps_results_readable(store: str, tmp_path: Path, request: pytest.FixtureRequest) -> None:
    url = f"sqlite:///{tmp_path / 'migrated.sqlite'}" if store == "sqlite" else request.getfixturevalue("new_postgres_database")
    upgrade(url, "0006")
    engine = make_engine(url)
    result = '{"proposal_id":"M-1","requests":[{"label":"a","figures":{"hours_needed":1.5},"findings":[{"check":"moon","level":"infeasible"}]}]}'
    with engine.begin() as connection:  # a run stored by the worker before 0007: rows with their copies, feasible ones too
        connection.execute(text("INSERT INTO users (id, name, role, created_at) VALUES (1, 'm', 'proposer', CURRENT_TIMESTAMP)"))
        connection.execute(
            text(
                "INSERT INTO observatory_versions (id, name, version_label, content_hash, document, uploaded_at) "
                "VALUES (1, 'o', '1', 'h', '{}', CURRENT_TIMESTAMP)"
            )
        )
        connection.execute(text("INSERT INTO proposals (id, proposal_id, semester, created_at) VALUES (1, 'M-1', '2027A', CURRENT_TIMESTAMP)"))
        connection.execute(
            text(
                "INSERT INTO proposal_versions (id, proposal_ref, content_hash, document, title, pi_name, instruments, targets, hours_requested, submitted_at) "
                "VALUES (1, 1, 'h', '{}', 't', 'p', 'KESTREL', 'x', 1.0, CURRENT_TIMESTAMP)"
            )
        )
        connection.execute(
            text(
                "INSERT INTO check_runs (id, proposal_version_id, observatory_version_id, schedule_key, engine_version, state, reason, priority, "
                "attempts, verdict, result, queued_at) VALUES (1, 1, 1, 0, '0.1.0', 'done', 'submitted', 0, 1, 'infeasible', :result, CURRENT_TIMESTAMP)"
            ),
            {"result": result},
        )
        connection.execute(
            text(
                "INSERT INTO request_outcomes (id, run_id, label, instrument, target, verdict, hours_needed, figures) "
                "VALUES (1, 1, 'a', 'KESTREL', 'x', 'infeasible', 1.5, '{\"hours_needed\": 1.5}')"
            )
        )
        for finding_id, check, level in ((1, "moon", "infeasible"), (2, "visibility", "feasible")):
            connection.execute(
                text("INSERT INTO findings (id, outcome_id, \"check\", level, message, figures) VALUES (:id, 1, :check, :level, 'words', '{}')"),
                {"id": finding_id, "check": check, "level": level},
            )
    upgrade(url)
    with engine.connect() as connection:
        assert connection.execute(text('SELECT "check", level FROM findings')).all() == [("moon", "infeasible")]
        assert connection.execute(text("SELECT label, hours_needed FROM request_outcomes")).all() == [("a", 1.5)]
        stored = connection.execute(select(CheckRun.result)).scalar_one()
    assert stored["requests"][0]["figures"] == {"hours_needed": 1.5}  # the result, untouched
    command.downgrade(alembic_config(url), "0006")  # and back: the columns return, empty
    with engine.connect() as connection:
        message, figures = connection.execute(text("SELECT message, figures FROM findings")).one()
    assert message == "" and figures in ("{}", {})  # SQLite gives the JSON's text, psycopg reads it
    engine.dispose()


def test_the_batch_heartbeat_allows_each_run_its_own_time(ctx: Flask, fake_engine: FakeEngine) -> None:
    (run_id,) = _new_runs("L-3")
    start = utcnow()
    with session_scope() as session:
        session.execute(update(CheckRun).where(CheckRun.id == run_id).values(state="running", attempts=1, started_at=start, lease_expires_at=start))
    # At most 0.25 s a run, beats every 0.1 s: five runs of 0.15 s each keep the leases renewed past the first run's limit.
    with Heartbeat({run_id: 1}, timedelta(seconds=0.3), timedelta(seconds=0.25)) as heartbeat:
        for _ in range(5):
            heartbeat.computing()
            threading.Event().wait(0.15)
        assert heartbeat._thread.is_alive()
        with session_scope() as session:
            assert (session.get_one(CheckRun, run_id).lease_expires_at or start) > start + timedelta(seconds=0.6)
        threading.Event().wait(0.5)  # the last run hangs: the heartbeat stops, the lease is left to lapse
        assert not heartbeat._thread.is_alive()


class _Retry(Exception):
    pass


class _FakeTask:
    """Stands in for the bound Celery task: its tries so far, and what it was asked to retry with."""

    def __init__(self, retries: int = 0) -> None:
        self.request = type("Request", (), {"retries": retries})()
        self.asked: dict[str, Any] = {}

    def retry(self, **options: Any) -> _Retry:
        self.asked = options
        return _Retry()


def test_the_batch_task_sends_again_only_the_held_runs_and_all_after_a_store_fault(
    ctx: Flask, fake_engine: FakeEngine, monkeypatch: pytest.MonkeyPatch
) -> None:
    from worker.tasks import check_runs

    body = check_runs.run.__func__  # type: ignore[attr-defined]
    ids = _new_runs("C-1", "C-2")
    now = utcnow()
    with session_scope() as session:
        session.execute(
            update(CheckRun)
            .where(CheckRun.id == ids[0])
            .values(state="running", attempts=1, started_at=now, lease_owner="another-host:4242", lease_expires_at=now + timedelta(seconds=20))
        )
    task = _FakeTask()
    with pytest.raises(_Retry):
        body(task, ids)
    assert task.asked["args"] == [[ids[0]]] and task.asked["headers"] == {"runs": 1} and 20 <= task.asked["countdown"] <= 22
    assert _states(ids)[1] == ("done", 1)

    def broken(*args: object) -> object:
        raise OperationalError("UPDATE", {}, Exception("server closed the connection unexpectedly"))

    more = _new_runs("C-3", "C-4")
    monkeypatch.setattr("feasibility.service.runs._store_together", broken)
    task = _FakeTask(retries=3)
    with pytest.raises(_Retry):
        body(task, more)
    assert task.asked["args"] == [more] and task.asked["headers"] == {"runs": 2} and 0 < task.asked["countdown"] <= 8
    assert _states(more) == [("queued", 1), ("queued", 1)]

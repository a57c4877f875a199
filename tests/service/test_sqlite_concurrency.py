"""The embedded SQLite store under concurrent writers: several processes, several threads each.

SQLite allows one writer at a time. A deferred transaction that reads and then
writes cannot wait for the write lock: "If some other database connection has
already modified the database or is already in the process of modifying the
database, then upgrading to a write transaction is not possible and the write
statement will fail with SQLITE_BUSY" (SQLite documentation, "Transaction",
section 2.1, sqlite.org/lang_transaction.html). Submitting (look up the proposal,
then insert) is such a transaction, and so is storing a run's result. The store
therefore begins write transactions ``BEGIN IMMEDIATE``, which waits for the
lock under the busy timeout; these tests hammer it and expect no error at all.

SQLite only, on purpose: the write lock, WAL and ``PRAGMA query_only`` are SQLite's;
PostgreSQL has row locks and MVCC, and its concurrent runs are tested with real
worker processes in tests/integration.
"""

from __future__ import annotations

import multiprocessing
import threading
import traceback
from pathlib import Path

import pytest
from flask import Flask
from sqlalchemy import func, select, text
from sqlalchemy.exc import OperationalError

from feasibility.store.db import make_engine
from feasibility.store.models import CheckRun, ProposalRecord, ProposalVersion, RequestOutcome

from .helpers import proposal

PROCESSES = 4
THREADS = 3
PROPOSALS_PER_THREAD = 3


def test_many_processes_and_threads_submit_and_store_without_locking_errors(tmp_path: Path) -> None:
    url = f"sqlite:///{tmp_path / 'shared.sqlite'}"
    _app(url, create=True)  # schema and demo observatory, once, before the writers start
    spawn = multiprocessing.get_context("spawn")  # a fresh interpreter each: no inherited connections or locks
    with spawn.Pool(PROCESSES) as pool:
        reports = pool.map(_hammer, [(url, n) for n in range(PROCESSES)])

    # No writer failed: SQLITE_BUSY would surface as OperationalError "database is locked".
    errors = [error for report in reports for error in report["errors"]]
    assert errors == []
    expected = sorted(pid for report in reports for pid in report["submitted"])
    assert len(expected) == PROCESSES * THREADS * PROPOSALS_PER_THREAD
    engine = make_engine(url)
    with engine.connect() as connection:
        done = (
            connection.execute(
                select(ProposalRecord.proposal_id)
                .join(ProposalVersion, ProposalVersion.proposal_ref == ProposalRecord.id)
                .join(CheckRun, CheckRun.proposal_version_id == ProposalVersion.id)
                .where(CheckRun.state == "done")
            )
            .scalars()
            .all()
        )
        outcomes = connection.execute(select(func.count()).select_from(RequestOutcome)).scalar()
    engine.dispose()
    assert sorted(done) == expected  # every proposal stored once, every run done
    assert outcomes == len(expected)  # one request each, stored once


def test_a_read_only_session_may_not_write(tmp_path: Path) -> None:
    from feasibility.store.db import session_scope

    app = _app(f"sqlite:///{tmp_path / 'ro.sqlite'}", create=True)
    with app.app_context():
        # "readonly" is SQLite's message for PRAGMA query_only
        with pytest.raises(OperationalError, match="readonly"), session_scope(read_only=True) as session:
            session.execute(text("DELETE FROM users"))
        with session_scope() as session:  # the same pooled connection writes again afterwards
            session.execute(text("DELETE FROM users"))
    app.extensions["feasibility.db"]["engine"].dispose()


def _app(url: str, *, create: bool = False) -> Flask:
    from feasibility.web import create_app

    return create_app({"DATABASE_URL": url, "CREATE_TABLES": create, "SEED_DEMO": create, "BROKER_URL": None, "EMBEDDED_WORKERS": 0, "SWEEP_INTERVAL_S": 0})


def _hammer(job: tuple[str, int]) -> dict[str, list[str]]:
    """In a child process: threads that each submit proposals and compute and store their runs at once."""
    from feasibility.service import runs, submissions
    from feasibility.store import db

    from .helpers import FakeEngine

    url, process = job
    # Stand-ins for the engine and its version (which would import astropy): this is about the store, not the sky.
    runs.check = FakeEngine()
    submissions.engine_version = lambda: "test"
    db.configure(url)  # the process-wide engine, as the command line uses it; no web app needed
    errors: list[str] = []
    submitted: list[str] = []
    start = threading.Barrier(THREADS)

    def work(thread: int) -> None:
        start.wait()
        try:
            for n in range(PROPOSALS_PER_THREAD):
                proposal_id = f"P{process}-T{thread}-{n}"
                with db.session_scope() as session:  # read (is the proposal known?) then write
                    run_id = submissions.submit(session, proposal(proposal_id), None).run.id
                submitted.append(proposal_id)
                outcome = runs.execute_run(run_id)  # claim, then store result and findings
                if outcome != "done":
                    errors.append(f"{proposal_id}: {outcome}")
        except Exception:  # reported to the parent, which asserts there were none
            errors.append(traceback.format_exc())

    threads = [threading.Thread(target=work, args=(t,)) for t in range(THREADS)]
    for thread in threads:
        thread.start()
    for thread in threads:
        thread.join()
    db.get_engine().dispose()
    return {"errors": errors, "submitted": submitted}

"""Running one check run: the idempotent body of the worker's task.

A run is claimed (queued → running, attempt counted) in one short transaction,
computed outside any transaction, and stored (running → done, with every
request's figures and findings) in another, on condition that the claim is
still ours. So a run executed twice, by a redelivered message or a sweeper's
re-queue, is stored once, and a done run is never recomputed.
"""

from __future__ import annotations

import logging
import traceback
from datetime import timedelta
from typing import Any

from flask import current_app, has_app_context
from sqlalchemy import and_, insert, or_, text, update
from sqlalchemy.exc import OperationalError
from sqlalchemy.orm import defer
from sqlalchemy.orm.attributes import set_committed_value

from feasibility.documents import InstrumentSchedule, Observatory, Proposal, parse_document
from feasibility.results import ProposalResult, RequestResult
from feasibility.service.current import observatory_of, schedule_of
from feasibility.store.db import session_scope
from feasibility.store.models import CheckRun, FindingRow, ObservatoryVersion, RequestOutcome, ScheduleVersion, utcnow

__all__ = ["RUN_TIMEOUT", "check", "execute_run"]

log = logging.getLogger(__name__)

#: A run still "running" after this long is taken to be lost (its worker died) and may be claimed again;
#: the app's ``RUN_TIMEOUT_S`` setting overrides it. Far longer than the longest check (about a minute).
RUN_TIMEOUT = timedelta(minutes=15)


def execute_run(run_id: int) -> str:
    """Compute and store check run ``run_id`` unless it is done or being computed elsewhere.

    Returns what happened: ``done``, ``failed`` (the engine raised; the error is stored),
    ``skipped`` (done already, or claimed by another worker) or ``superseded`` (our claim
    was taken over while computing; the other worker's result stands). Database faults
    (``OperationalError``) propagate so the caller can retry with back-off.
    """
    claimed = _claim(run_id)
    if claimed is None:
        return "skipped"
    attempt, proposal, observatory, schedule = claimed
    try:
        try:
            result = check(proposal, observatory, schedule)
        except Exception as exc:  # an engine fault is stored with the run, not retried forever
            log.exception("check run %s failed", run_id)
            return _store_failure(run_id, attempt, exc)
        return _store_result(run_id, attempt, result)
    except OperationalError:
        _release(run_id, attempt)
        raise


def check(proposal: Proposal, observatory: Observatory, schedule: InstrumentSchedule | None) -> ProposalResult:
    """Call the engine (looked up at call time, so tests may replace ``feasibility.engine.check_proposal``)."""
    from feasibility import engine

    return engine.check_proposal(proposal, observatory, schedule)


def _claim(run_id: int) -> tuple[int, Proposal, Observatory, InstrumentSchedule | None] | None:
    now = utcnow()
    timeout = _run_timeout()
    with session_scope() as session:
        if session.get_bind().dialect.name == "postgresql":
            # A claim lost in a database crash costs only a recomputation (the run is still
            # queued), so it need not wait for the WAL flush; results are committed durably.
            session.execute(text("SET LOCAL synchronous_commit = off"))
        claimed = session.execute(
            update(CheckRun)
            .where(
                CheckRun.id == run_id,
                or_(CheckRun.state == "queued", and_(CheckRun.state == "running", CheckRun.started_at < now - timeout)),
            )
            .values(state="running", started_at=now, attempts=CheckRun.attempts + 1)
            .execution_options(synchronize_session=False)
        ).rowcount
        if not claimed:
            return None
        run = session.get(CheckRun, run_id)
        assert run is not None
        proposal = parse_document(Proposal, run.proposal_version.document, "proposal")
        # Documents are parsed once per process (by content hash): load their JSON only on a cache miss.
        observatory = observatory_of(session.get_one(ObservatoryVersion, run.observatory_version_id, options=[defer(ObservatoryVersion.document)]))
        schedule_row = session.get(ScheduleVersion, run.schedule_version_id, options=[defer(ScheduleVersion.document)]) if run.schedule_version_id else None
        return run.attempts, proposal, observatory, schedule_of(schedule_row)


def _store_result(run_id: int, attempt: int, result: ProposalResult) -> str:
    from feasibility.service.changes import record_changes

    stored = result.model_dump(mode="json")
    with session_scope() as session:
        if not _finish(session, run_id, attempt, state="done", verdict=result.verdict.value, result=stored, error=None):
            return "superseded"
        # The result was just written: hand it to the object as loaded rather than reading its JSON back.
        run = session.get_one(CheckRun, run_id, options=[defer(CheckRun.result)])
        set_committed_value(run, "result", stored)
        # Bulk inserts (one statement per table), not the unit of work: a run has dozens of findings.
        outcome_ids = (
            session.scalars(
                insert(RequestOutcome).returning(RequestOutcome.id, sort_by_parameter_order=True),
                [_outcome_row(run_id, request) for request in result.requests],
            ).all()
            if result.requests
            else []
        )
        findings = [
            {
                "outcome_id": outcome_id,
                "check": f.check,
                "level": f.level.value,
                "message": f.message,
                "suggestion": f.suggestion,
                "method": f.method,
                "figures": dict(f.figures),
            }
            for outcome_id, request in zip(outcome_ids, result.requests)
            for f in request.findings
        ]
        if findings:
            # RETURNING makes SQLAlchemy send one multi-row INSERT ("insertmanyvalues")
            # rather than one statement per row.
            session.scalars(insert(FindingRow).returning(FindingRow.id), findings).all()
        session.flush()
        record_changes(session, run)
    return "done"


def _outcome_row(run_id: int, request: RequestResult) -> dict[str, Any]:
    figures = dict(request.figures)
    return {
        "run_id": run_id,
        "label": request.label,
        "instrument": request.instrument,
        "target": request.target,
        "verdict": request.verdict.value,
        "hours_requested": _number(figures.get("hours_requested")),
        "hours_observable": _number(figures.get("hours_observable")),
        "hours_needed": _number(figures.get("hours_needed")),
        "snr_expected": _number(figures.get("snr_expected")),
        "figures": figures,
    }


def _store_failure(run_id: int, attempt: int, exc: Exception) -> str:
    text = "".join(traceback.format_exception_only(type(exc), exc)).strip()
    with session_scope() as session:
        if not _finish(session, run_id, attempt, state="failed", verdict=None, result=None, error=text[:4000]):
            return "superseded"
    return "failed"


def _finish(session: Any, run_id: int, attempt: int, **values: Any) -> bool:
    """Move our claimed run to its final state; False when the claim is no longer ours."""
    return bool(
        session.execute(
            update(CheckRun)
            .where(CheckRun.id == run_id, CheckRun.state == "running", CheckRun.attempts == attempt)
            .values(finished_at=utcnow(), **values)
            .execution_options(synchronize_session=False)
        ).rowcount
    )


def _release(run_id: int, attempt: int) -> None:
    """Give a claimed run back to the queue after a database fault (best effort; the sweeper is the backstop)."""
    try:
        with session_scope() as session:
            session.execute(
                update(CheckRun)
                .where(CheckRun.id == run_id, CheckRun.state == "running", CheckRun.attempts == attempt)
                .values(state="queued", started_at=None)
                .execution_options(synchronize_session=False)
            )
    except OperationalError:
        log.warning("could not release check run %s; the sweeper will re-queue it", run_id)


def _run_timeout() -> timedelta:
    if has_app_context() and "RUN_TIMEOUT_S" in current_app.config:
        return timedelta(seconds=float(current_app.config["RUN_TIMEOUT_S"]))
    return RUN_TIMEOUT


def _number(value: Any) -> float | None:
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        return None
    return float(value)

"""Running one check run: the idempotent body of the worker's task.

A run is claimed (queued → running, attempt counted) and its inputs read in one
short transaction, computed outside any transaction, and stored (running → done,
with every request's figures and findings) in another, on condition that the
claim is still ours. So a run executed twice, by a redelivered message or a
sweeper's re-queue, is stored once, and a done run is never recomputed. Each
transaction is a few Core statements (the worker's time goes to the engine, not
to round trips): about seven round trips per run in all.
"""

from __future__ import annotations

import logging
import traceback
from datetime import datetime, timedelta
from typing import Any

from flask import current_app, has_app_context
from sqlalchemy import Table, Update, and_, insert, or_, select, text, update
from sqlalchemy.exc import OperationalError
from sqlalchemy.orm import make_transient_to_detached

from feasibility.documents import InstrumentSchedule, Observatory, Proposal, parse_document
from feasibility.results import ProposalResult
from feasibility.service.current import cached_document
from feasibility.store.db import JSONText, session_scope
from feasibility.store.models import CheckRun, FindingRow, ObservatoryVersion, ProposalVersion, RequestOutcome, ScheduleVersion, utcnow

__all__ = ["RUN_TIMEOUT", "check", "execute_run"]

log = logging.getLogger(__name__)

#: A run still "running" after this long is taken to be lost (its worker died) and may be claimed again;
#: the app's ``RUN_TIMEOUT_S`` setting overrides it. Far longer than the longest check (about a minute).
RUN_TIMEOUT = timedelta(minutes=15)

# The tables, for Core statements: the task body writes rows in bulk and needs none of the ORM's bookkeeping.
_RUNS: Table = CheckRun.__table__  # type: ignore[assignment]
_OUTCOMES: Table = RequestOutcome.__table__  # type: ignore[assignment]
_FINDINGS: Table = FindingRow.__table__  # type: ignore[assignment]


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
    """Claim the run (one UPDATE ... RETURNING), fetch its inputs (one SELECT) and parse them (observatory and schedule cached)."""
    now = utcnow()
    timeout = _run_timeout()
    with session_scope() as session:
        if session.get_bind().dialect.name == "postgresql":
            # A claim lost in a database crash costs only a recomputation (the run is still
            # queued), so it need not wait for the WAL flush; results are committed durably.
            session.execute(text("SET LOCAL synchronous_commit = off"))
        claimed = session.execute(
            update(_RUNS)
            .where(
                _RUNS.c.id == run_id,
                or_(_RUNS.c.state == "queued", and_(_RUNS.c.state == "running", _RUNS.c.started_at < now - timeout)),
            )
            .values(state="running", started_at=now, attempts=_RUNS.c.attempts + 1)
            .returning(_RUNS.c.attempts, _RUNS.c.proposal_version_id, _RUNS.c.observatory_version_id, _RUNS.c.schedule_version_id)
        ).first()
        if claimed is None:
            return None
        attempts, proposal_version_id, observatory_id, schedule_id = claimed
        # The proposal's JSON and the other two documents' hashes, in one statement.
        document, observatory_hash, schedule_hash = session.execute(
            select(
                _scalar(ProposalVersion.document, ProposalVersion.id == proposal_version_id),
                _scalar(ObservatoryVersion.content_hash, ObservatoryVersion.id == observatory_id),
                _scalar(ScheduleVersion.content_hash, ScheduleVersion.id == schedule_id),
            )
        ).one()
        proposal = parse_document(Proposal, document, "proposal")
        # Versions never change: a document is parsed once per process (by content hash), its JSON read only then.
        observatory = cached_document(
            Observatory, observatory_hash, lambda: session.scalar(select(ObservatoryVersion.document).where(ObservatoryVersion.id == observatory_id))
        )
        schedule = None
        if schedule_id is not None:
            schedule = cached_document(
                InstrumentSchedule, schedule_hash, lambda: session.scalar(select(ScheduleVersion.document).where(ScheduleVersion.id == schedule_id))
            )
        return attempts, proposal, observatory, schedule


def _store_result(run_id: int, attempt: int, result: ProposalResult) -> str:
    """Store the result, its request outcomes and findings and any verdict change: one transaction, few statements."""
    from feasibility.service.changes import record_changes

    stored = result.model_dump(mode="json")
    finished = utcnow()
    with session_scope() as session:
        # pydantic writes the ~100 KB of JSON itself, several times faster than json.dumps of ``stored``.
        finish = _finish_statement(run_id, attempt, finished, state="done", verdict=result.verdict.value, result=JSONText(result.model_dump_json()), error=None)
        row = session.execute(finish.returning(_RUNS.c.proposal_version_id, _RUNS.c.reason)).first()
        if row is None:
            return "superseded"
        if result.requests:
            # One multi-row INSERT ("insertmanyvalues"); RETURNING in parameter order pairs ids with requests.
            outcome_ids = session.execute(
                insert(_OUTCOMES).returning(_OUTCOMES.c.id, sort_by_parameter_order=True),
                [_outcome_row(run_id, request) for request in stored["requests"]],
            ).scalars().all()
            findings = [
                {
                    "outcome_id": outcome_id,
                    "check": f["check"],
                    "level": f["level"],
                    "message": f["message"],
                    "suggestion": f.get("suggestion"),
                    "method": f.get("method"),
                    "figures": f.get("figures") or {},
                }
                for outcome_id, request in zip(outcome_ids, stored["requests"])
                for f in request["findings"]
            ]
            if findings:
                # executemany of one fixed statement: psycopg pipelines it, and its text (so its parsing) is reused.
                session.execute(insert(_FINDINGS), findings)
        # The run as just written, handed to the session as loaded rather than read back (its result is ~100 KB).
        run = CheckRun(
            id=run_id,
            proposal_version_id=row.proposal_version_id,
            reason=row.reason,
            state="done",
            attempts=attempt,
            verdict=result.verdict.value,
            result=stored,
            error=None,
            finished_at=finished,
        )
        make_transient_to_detached(run)
        session.add(run)
        record_changes(session, run)
    return "done"


def _outcome_row(run_id: int, request: dict[str, Any]) -> dict[str, Any]:
    figures = request["figures"]
    return {
        "run_id": run_id,
        "label": request["label"],
        "instrument": request["instrument"],
        "target": request["target"],
        "verdict": request["verdict"],
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
    return bool(session.execute(_finish_statement(run_id, attempt, utcnow(), **values)).rowcount)


def _finish_statement(run_id: int, attempt: int, finished: datetime, **values: Any) -> Update:
    """The UPDATE that finishes our claimed run: it matches no row when the claim is no longer ours."""
    return (
        update(_RUNS)
        .where(_RUNS.c.id == run_id, _RUNS.c.state == "running", _RUNS.c.attempts == attempt)
        .values(finished_at=finished, **values)
    )


def _scalar(column: Any, condition: Any) -> Any:
    """A scalar subquery: ``column`` of the row meeting ``condition`` (NULL when there is none)."""
    return select(column).where(condition).scalar_subquery()


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

"""Running one check run: the idempotent body of the worker's task.

A run is claimed (queued → running, attempt counted, a lease taken) and its inputs
read in one short transaction, computed outside any transaction while a heartbeat
renews the lease (:mod:`feasibility.service.leases`), and stored (running → done,
with every request's figures and findings) in another, on condition that the
claim is still ours. So a run executed twice, by a redelivered message or the
relay's re-send, is stored once, and a done run is never recomputed.

A message for a run whose lease is live elsewhere is not dropped: :class:`LeaseHeld`
says when to try again (the lease's remaining time), by which time the run is done
(the message is then skipped) or its holder gone (the run is taken over). A claim
whose lease lapsed, or whose holder is a dead process of this host, is taken over
at once.

Faults while storing: a database fault that may pass (not
:func:`~feasibility.service.faults.is_lasting`) gives the claim back, retrying the
release, and propagates for the caller to retry; one that will not change, or any
other error this result raises on its way to the store, makes the run ``failed``
with the reason, so it is never queued again by itself.
"""

from __future__ import annotations

import json
import logging
import time
import traceback
from datetime import datetime, timedelta
from typing import Any

from sqlalchemy import Table, Update, and_, exists, insert, or_, select, text, update
from sqlalchemy.exc import SQLAlchemyError
from sqlalchemy.orm import make_transient_to_detached

from feasibility.documents import InstrumentSchedule, Observatory, Proposal, parse_document
from feasibility.logs import run_context
from feasibility.results import ProposalResult
from feasibility.service.current import cached_document
from feasibility.service.details import compact_result
from feasibility.service.faults import is_lasting, is_passing
from feasibility.service.leases import Heartbeat, holder_is_gone, lease_length, owner_id, working_on
from feasibility.service.runtime import current_settings
from feasibility.store.db import JSONText, session_scope
from feasibility.store.models import CheckRun, FindingRow, ObservatoryVersion, ProposalVersion, RequestOutcome, ScheduleVersion, utcnow

__all__ = ["RUN_TIMEOUT", "LeaseHeld", "check", "execute_run"]

log = logging.getLogger(__name__)

#: The longest a run may compute: its heartbeat stops renewing the lease after this, so a hung
#: check is taken over. The settings' ``run_timeout_s`` decides (this is its default). Far longer than the longest check.
RUN_TIMEOUT = timedelta(minutes=15)

#: Tries, and the pause before each next one, to give a claim back after a database fault.
_RELEASE_PAUSES_S = (0.5, 1.0, 2.0, 4.0)

# The tables, for Core statements: the task body writes rows in bulk and needs none of the ORM's bookkeeping.
_RUNS: Table = CheckRun.__table__  # type: ignore[assignment]
_OUTCOMES: Table = RequestOutcome.__table__  # type: ignore[assignment]
_FINDINGS: Table = FindingRow.__table__  # type: ignore[assignment]


class LeaseHeld(Exception):
    """Another live worker holds the run's lease: try this message again in ``retry_in`` seconds."""

    def __init__(self, run_id: int, retry_in: float) -> None:
        super().__init__(f"check run {run_id} is being computed elsewhere; try again in {retry_in:.1f} s")
        self.run_id = run_id
        self.retry_in = retry_in


def execute_run(run_id: int) -> str:
    """Compute and store check run ``run_id`` unless it is done or being computed elsewhere.

    Returns what happened: ``done``, ``failed`` (the engine raised, the inputs could not
    be read or the result could not be stored for good; the reason is stored),
    ``skipped`` (done or failed already, or no such run) or ``superseded`` (our claim was
    taken over while computing; the other worker's result stands). Raises
    :class:`LeaseHeld` when a live worker holds the run, and passing database faults
    (after giving the claim back) so the caller can retry with back-off.
    """
    with run_context(run_id), working_on(run_id):
        return _execute(run_id)


def _execute(run_id: int) -> str:
    claimed = _claim(run_id)
    if claimed is None:
        return "skipped"
    attempt, inputs = claimed
    with Heartbeat(run_id, attempt, lease_length(), _run_timeout()):
        try:
            try:
                result = check(*_parse_inputs(*inputs))
            except Exception as exc:  # an engine fault (or unreadable inputs) is stored with the run, not retried forever
                if isinstance(exc, SQLAlchemyError) and not is_lasting(exc):
                    raise  # reading the inputs met a store fault: give the claim back and retry
                log.exception("check run %s failed", run_id)
                return _store_failure(run_id, attempt, exc)
            try:
                return _store_result(run_id, attempt, result)
            except Exception as exc:
                if isinstance(exc, SQLAlchemyError) and not is_lasting(exc):
                    raise  # the store, not this result: give the claim back and retry
                log.exception("check run %s: the result cannot be stored", run_id)
                return _store_failure(run_id, attempt, exc, "the result could not be stored: ")
        except SQLAlchemyError:
            _release(run_id, attempt)
            raise


def check(proposal: Proposal, observatory: Observatory, schedule: InstrumentSchedule | None) -> ProposalResult:
    """Call the engine (looked up at call time, so tests may replace ``feasibility.engine.check_proposal``)."""
    from feasibility import engine

    return engine.check_proposal(proposal, observatory, schedule)


def _claim(run_id: int) -> tuple[int, tuple[Any, ...]] | None:
    """Claim the run (one UPDATE ... RETURNING) and fetch its inputs (one SELECT); None when there is nothing to do.

    Claimable: queued, or running under a lapsed lease, or held by a dead process of
    this host. Raises :class:`LeaseHeld` while a live worker holds it.
    """
    now = utcnow()
    lease = lease_length()
    claim = {"state": "running", "started_at": now, "attempts": _RUNS.c.attempts + 1, "lease_expires_at": now + lease, "lease_owner": owner_id()}
    returning = (_RUNS.c.attempts, _RUNS.c.proposal_version_id, _RUNS.c.observatory_version_id, _RUNS.c.schedule_version_id)
    with session_scope() as session:
        if session.get_bind().dialect.name == "postgresql":
            # A claim lost in a database crash costs only a recomputation (the run is still
            # queued), so it need not wait for the WAL flush; results are committed durably.
            session.execute(text("SET LOCAL synchronous_commit = off"))
        lapsed = or_(_RUNS.c.lease_expires_at < now, and_(_RUNS.c.lease_expires_at.is_(None), _RUNS.c.started_at < now - lease))
        claimed = session.execute(
            update(_RUNS)
            .where(_RUNS.c.id == run_id, or_(_RUNS.c.state == "queued", and_(_RUNS.c.state == "running", lapsed)))
            .values(**claim)
            .returning(*returning)
        ).first()
        if claimed is None:
            current = session.execute(
                select(_RUNS.c.state, _RUNS.c.attempts, _RUNS.c.lease_expires_at, _RUNS.c.lease_owner).where(_RUNS.c.id == run_id)
            ).first()
            if current is None or current.state not in ("queued", "running"):
                return None
            if current.state == "running" and holder_is_gone(current.lease_owner, run_id, ours=1):
                log.info("check run %s: its holder %s is gone; taking it over", run_id, current.lease_owner)
                claimed = session.execute(
                    update(_RUNS)
                    .where(_RUNS.c.id == run_id, _RUNS.c.state == "running", _RUNS.c.attempts == current.attempts)
                    .values(**claim)
                    .returning(*returning)
                ).first()
            if claimed is None:
                expires = current.lease_expires_at or now
                raise LeaseHeld(run_id, max((expires - now).total_seconds(), 0.0) + 1.0)
        attempts, proposal_version_id, observatory_id, schedule_id = claimed
        # The proposal's JSON and the other two documents' hashes, in one statement.
        document, observatory_hash, schedule_hash = session.execute(
            select(
                _scalar(ProposalVersion.document, ProposalVersion.id == proposal_version_id),
                _scalar(ObservatoryVersion.content_hash, ObservatoryVersion.id == observatory_id),
                _scalar(ScheduleVersion.content_hash, ScheduleVersion.id == schedule_id),
            )
        ).one()
        return attempts, (document, observatory_id, observatory_hash, schedule_id, schedule_hash)


def _parse_inputs(
    document: Any, observatory_id: int, observatory_hash: str, schedule_id: int | None, schedule_hash: str | None
) -> tuple[Proposal, Observatory, InstrumentSchedule | None]:
    """Parse the claimed run's documents; versions never change, so the observatory and schedule are parsed once per process.

    Outside the claim's transaction: inputs that cannot be read fail the run (stored), they do not undo the claim.
    """
    proposal = parse_document(Proposal, document, "proposal")

    def read(model: Any, row_id: int) -> Any:
        with session_scope(read_only=True) as session:
            return session.scalar(select(model.document).where(model.id == row_id))

    observatory = cached_document(Observatory, observatory_hash, lambda: read(ObservatoryVersion, observatory_id))
    schedule = None
    if schedule_id is not None and schedule_hash is not None:  # the hash comes with the id (same row)
        schedule = cached_document(InstrumentSchedule, schedule_hash, lambda: read(ScheduleVersion, schedule_id))
    return proposal, observatory, schedule


def _store_result(run_id: int, attempt: int, result: ProposalResult) -> str:
    """Store the compact result, its request outcomes and findings and any verdict change: one transaction, few statements.

    The result is stored compact (:func:`feasibility.service.details.compact_result`: no plot
    series, no method texts; pages recompute them on demand). A finding's figures live in the
    result only: its row holds what the lists filter and sort on (check, level) and its words.
    """
    from feasibility.service.changes import record_changes

    stored = compact_result(result)
    finished = utcnow()
    with session_scope() as session:
        finish = _finish_statement(
            run_id,
            attempt,
            finished,
            state="done",
            verdict=result.verdict.value,
            result=JSONText(json.dumps(stored, separators=(",", ":"), ensure_ascii=False)),
            error=None,
        )
        row = session.execute(finish.returning(_RUNS.c.proposal_version_id, _RUNS.c.reason, _finished_before(run_id).label("finished_before"))).first()
        if row is None:
            return "superseded"
        if result.requests:
            # One multi-row INSERT ("insertmanyvalues"); RETURNING in parameter order pairs ids with requests.
            outcome_ids = (
                session.execute(
                    insert(_OUTCOMES).returning(_OUTCOMES.c.id, sort_by_parameter_order=True),
                    [_outcome_row(run_id, request) for request in stored["requests"]],
                )
                .scalars()
                .all()
            )
            findings = [
                {
                    "outcome_id": outcome_id,
                    "check": f["check"],
                    "level": f["level"],
                    "message": f["message"],
                    "suggestion": f.get("suggestion"),
                    "method": None,
                    "figures": {},
                }
                for outcome_id, request in zip(outcome_ids, stored["requests"])
                for f in request["findings"]
            ]
            if findings:
                # executemany of one fixed statement: psycopg pipelines it, and its text (so its parsing) is reused.
                session.execute(insert(_FINDINGS), findings)
        if not row.finished_before:
            return "done"  # the proposal's first finished run: no change to record (record_changes would find no run before it)
        # The run as just written, handed to the session as loaded rather than read back.
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


def _finished_before(run_id: int) -> Any:
    """Whether another run of the same proposal (any version) is done: a scalar subquery for the finishing UPDATE's RETURNING.

    Only then can :func:`~feasibility.service.changes.record_changes` find a run to compare
    with; a proposal's first run (most runs of a submission burst) skips its queries.
    """
    other = _RUNS.alias("other")
    mine = select(ProposalVersion.proposal_ref).where(ProposalVersion.id == _RUNS.c.proposal_version_id).correlate(_RUNS).scalar_subquery()
    versions = select(ProposalVersion.id).where(ProposalVersion.proposal_ref == mine).correlate(_RUNS)
    return exists().where(other.c.proposal_version_id.in_(versions), other.c.state == "done", other.c.id != run_id).correlate(_RUNS)


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


def _store_failure(run_id: int, attempt: int, exc: BaseException, prefix: str = "") -> str:
    """Make our claimed run ``failed`` with the reason (shown with the run); ``superseded`` when the claim is gone."""
    reason = prefix + "".join(traceback.format_exception_only(type(exc), exc)).strip()
    with session_scope() as session:
        if not _finish(session, run_id, attempt, state="failed", verdict=None, result=None, error=reason[:4000]):
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
        .values(finished_at=finished, lease_expires_at=None, lease_owner=None, **values)
    )


def _scalar(column: Any, condition: Any) -> Any:
    """A scalar subquery: ``column`` of the row meeting ``condition`` (NULL when there is none)."""
    return select(column).where(condition).scalar_subquery()


def _release(run_id: int, attempt: int) -> None:
    """Give our claimed run back to the queue after a database fault, trying a few times while the store comes back.

    If the store stays away, the claim's lease lapses (or its holder, this process, is
    seen not to be computing it) and the run is taken over then.
    """
    for pause in (*_RELEASE_PAUSES_S, None):
        try:
            with session_scope() as session:
                session.execute(
                    update(_RUNS)
                    .where(_RUNS.c.id == run_id, _RUNS.c.state == "running", _RUNS.c.attempts == attempt)
                    .values(state="queued", started_at=None, lease_expires_at=None, lease_owner=None)
                )
            return
        except SQLAlchemyError as exc:
            if pause is None or not is_passing(exc):
                break
            time.sleep(pause)
    log.warning("could not release check run %s; it is taken over when its lease lapses", run_id)


def _run_timeout() -> timedelta:
    return timedelta(seconds=float(current_settings().run_timeout_s))


def _number(value: Any) -> float | None:
    if isinstance(value, bool) or not isinstance(value, (int, float)):
        return None
    return float(value)

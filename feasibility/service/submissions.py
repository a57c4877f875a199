"""Storing a submitted proposal and the check run it needs.

A submission is validated (fields, then consistency with the observatory in
force), stored as a new proposal version unless that exact content was stored
before, and given a check run against the observatory and schedule in force.
Identical content gives the existing run back, so re-submitting is harmless.
The caller commits, then enqueues the run (:func:`feasibility.service.dispatch.enqueue`)
when :attr:`Submission.must_send` says so: a new run, and also a run found still
queued — its first message may never have reached the broker, and a second is
harmless (the task is idempotent). A run created here is unsent until then, so the
relay sends it should the caller fail to.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any, TypeVar

from sqlalchemy import insert, select
from sqlalchemy.dialects import postgresql, sqlite
from sqlalchemy.orm import Session

from feasibility.documents import Proposal, parse_document
from feasibility.documents.loading import DocumentError, Problem
from feasibility.documents.proposal_problems import read_proposal
from feasibility.service import access
from feasibility.service.access import NotAllowed
from feasibility.service.current import current_observatory, current_schedule, observatory_of
from feasibility.service.engine_version import engine_version
from feasibility.store.hashing import document_hash
from feasibility.store.models import CheckRun, ObservatoryVersion, ProposalRecord, ProposalVersion, ScheduleVersion, User, utcnow

__all__ = ["NotAllowed", "Submission", "ensure_run", "submit", "submit_proposal"]

#: Priority of a fresh submission; re-checks use higher numbers (run later).
SUBMISSION_PRIORITY = 0

Row = TypeVar("Row")


@dataclass
class Submission:
    """What a submission did: the run to wait for, and whether it is new."""

    run: CheckRun
    created: bool
    proposal: ProposalRecord
    version: ProposalVersion

    @property
    def must_send(self) -> bool:
        """Whether the caller enqueues the run after commit: it is new, or it was found waiting in the queue."""
        return self.created or self.run.state == "queued"


def submit_proposal(session: Session, document: dict[str, Any] | str | bytes, submitted_by: User | None, reason: str = "submitted") -> CheckRun:
    """Validate and store ``document``; the check run for it (existing or new). The caller commits."""
    return submit(session, document, submitted_by, reason=reason).run


def submit(
    session: Session,
    document: dict[str, Any] | str | bytes,
    submitted_by: User | None,
    *,
    reason: str = "submitted",
    owner: User | None = None,
    priority: int = SUBMISSION_PRIORITY,
) -> Submission:
    """Validate and store ``document`` and make sure a check run exists for it.

    ``owner`` is the proposer a portal submits for; a proposer owns what they submit.
    Raises :class:`DocumentError` for bad input and :class:`NotAllowed` when the
    proposal id belongs to another user.
    """
    if submitted_by is not None:
        access.check(submitted_by, access.SUBMIT)
    observatory_row = current_observatory(session)
    if observatory_row is None:
        parse_document(Proposal, document, "proposal")  # a bad document is named first
        raise DocumentError([Problem("", "the service has no observatory description yet")], "proposal")
    # Schema and observatory problems in one answer (documents.problems).
    proposal = read_proposal(document, observatory_of(observatory_row), "proposal")
    owner = access.takes_ownership(submitted_by, owner)

    record, new_record = _proposal_record(session, proposal, owner)
    if not new_record:
        access.check_new_version(session, record, submitted_by, owner)
    if record.semester != proposal.semester:
        record.semester = proposal.semester
    # A row that references a row created in this transaction cannot exist yet: no need to look.
    version, new_version = _proposal_version(session, record, proposal, submitted_by, new=new_record)
    schedule_row = current_schedule(session, proposal.semester)
    run, created = ensure_run(session, version, observatory_row, schedule_row, reason=reason, priority=priority, new=new_version)
    return Submission(run=run, created=created, proposal=record, version=version)


def ensure_run(
    session: Session,
    version: ProposalVersion,
    observatory_row: ObservatoryVersion,
    schedule_row: ScheduleVersion | None,
    *,
    reason: str = "submitted",
    priority: int = SUBMISSION_PRIORITY,
    new: bool = False,
) -> tuple[CheckRun, bool]:
    """The check run of ``version`` against these inputs and the current engine: found, or created queued.

    The unique constraint on the inputs makes this safe when two processes ask at once.
    ``new=True`` says ``version`` was created in this transaction (so no run can exist yet).
    """
    schedule_key = schedule_row.id if schedule_row is not None else 0
    lookup = {
        "proposal_version_id": version.id,
        "observatory_version_id": observatory_row.id,
        "schedule_key": schedule_key,
        "engine_version": engine_version(),
    }
    run, created = _get_or_create(
        session,
        CheckRun,
        lookup,
        {"schedule_version_id": schedule_row.id if schedule_row is not None else None, "reason": reason, "priority": priority, "state": "queued"},
        new=new,
    )
    if not created and run.state == "failed":
        # The engine failed on these inputs before; asking again queues the run again (it must be enqueued).
        run.state, run.error, run.queued_at, run.reason, run.dispatched_at = "queued", None, utcnow(), reason, None
        return run, True
    return run, created


def _proposal_record(session: Session, proposal: Proposal, owner: User | None) -> tuple[ProposalRecord, bool]:
    return _get_or_create(
        session,
        ProposalRecord,
        {"proposal_id": proposal.id},
        {"semester": proposal.semester, "owner_id": owner.id if owner is not None else None},
    )


def _proposal_version(session: Session, record: ProposalRecord, proposal: Proposal, user: User | None, *, new: bool) -> tuple[ProposalVersion, bool]:
    requests = proposal.requests
    document = proposal.model_dump(mode="json", by_alias=True)  # dumped once: stored, and hashed
    return _get_or_create(
        session,
        ProposalVersion,
        {"proposal_ref": record.id, "content_hash": document_hash(document)},
        {
            "document": document,
            "title": proposal.title,
            "pi_name": proposal.pi.name,
            "instruments": ",".join(sorted({r.instrument for r in requests})),
            "targets": "\n".join(r.target.name for r in requests),
            "hours_requested": float(sum(r.hours_requested for r in requests)),
            "submitted_by": user.id if user is not None else None,
        },
        new=new,
    )


def _get_or_create(session: Session, model: type[Row], lookup: dict[str, Any], values: dict[str, Any], *, new: bool = False) -> tuple[Row, bool]:
    """Find the row matching ``lookup`` or insert it; a concurrent insert of the same row is found, not duplicated.

    One ``INSERT ... ON CONFLICT DO NOTHING RETURNING`` (both stores, PostgreSQL and
    SQLite, have it): the inserted row, or none when ``lookup`` names an existing row
    (``lookup`` is a unique constraint), which is then read.
    ``new=True``: the row cannot exist yet (its parent is new in this transaction); a plain insert.
    """
    if new:
        statement = insert(model)
    else:
        statement = _UPSERT[session.get_bind().dialect.name](model).on_conflict_do_nothing(index_elements=list(lookup))
    row = session.scalars(statement.values(**lookup, **values).returning(model)).first()
    if row is not None:
        return row, True
    return session.scalars(select(model).filter_by(**lookup)).one(), False


#: The INSERT constructs with ON CONFLICT, per dialect.
_UPSERT: dict[str, Any] = {"postgresql": postgresql.insert, "sqlite": sqlite.insert}

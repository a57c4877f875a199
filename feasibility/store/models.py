"""The database tables, as SQLAlchemy 2 typed mappings.

Documents are stored as submitted (their JSON text) together with a content hash,
so a verdict can always be traced to the exact proposal, observatory description
and instrument schedule it was computed from. Versions are never overwritten.
"""

from __future__ import annotations

from datetime import UTC, datetime
from typing import Any

from sqlalchemy import JSON, DateTime, Dialect, Float, ForeignKey, Index, Integer, MetaData, String, Text, TypeDecorator, UniqueConstraint, event
from sqlalchemy.orm import DeclarativeBase, Mapped, Session, mapped_column, relationship

from feasibility.documents.times import as_utc

__all__ = [
    "APPEND_ONLY",
    "ApiToken",
    "AppendOnly",
    "Base",
    "CheckRun",
    "FindingRow",
    "ObservatoryVersion",
    "PageSession",
    "ProposalRecord",
    "ProposalVersion",
    "RequestOutcome",
    "ReviewAssignment",
    "ReviewDecision",
    "ReviewNote",
    "ScheduleVersion",
    "SignInFailure",
    "UTCDateTime",
    "Simulation",
    "User",
    "VerdictChange",
    "WebhookDelivery",
    "utcnow",
]

NAMING_CONVENTION = {
    "ix": "ix_%(column_0_label)s",
    "uq": "uq_%(table_name)s_%(column_0_name)s",
    "ck": "ck_%(table_name)s_%(constraint_name)s",
    "fk": "fk_%(table_name)s_%(column_0_name)s_%(referred_table_name)s",
    "pk": "pk_%(table_name)s",
}


def utcnow() -> datetime:
    """Now, timezone-aware in UTC."""
    return datetime.now(UTC)


class UTCDateTime(TypeDecorator[datetime]):
    """A moment in time, stored and read back as timezone-aware UTC on every store.

    SQLite keeps no zone (it gives back naive times, and would drop a non-UTC offset
    silently); PostgreSQL gives ``timestamptz`` back in the session's TimeZone. Here a
    time goes in converted to UTC (a naive one is taken as UTC) and comes out aware in
    UTC, so the rest of the code never meets a naive or local time from the store.
    """

    impl = DateTime(timezone=True)
    cache_ok = True

    def process_bind_param(self, value: datetime | None, dialect: Dialect) -> datetime | None:
        return _as_utc(value)

    def process_result_value(self, value: datetime | None, dialect: Dialect) -> datetime | None:
        return _as_utc(value)


def _as_utc(value: datetime | None) -> datetime | None:
    return None if value is None else as_utc(value)


class Base(DeclarativeBase):
    metadata = MetaData(naming_convention=NAMING_CONVENTION)
    type_annotation_map = {datetime: UTCDateTime(), dict[str, Any]: JSON}


class User(Base):
    """A person or system that signs in or holds API tokens. Roles: reviewer, proposer, portal, admin."""

    __tablename__ = "users"

    id: Mapped[int] = mapped_column(primary_key=True)
    name: Mapped[str] = mapped_column(String(200), unique=True)
    email: Mapped[str | None] = mapped_column(String(320))
    role: Mapped[str] = mapped_column(String(20))
    password_hash: Mapped[str | None] = mapped_column(String(300))
    webhook_url: Mapped[str | None] = mapped_column(String(2000))
    webhook_secret: Mapped[str | None] = mapped_column(String(200))
    created_at: Mapped[datetime] = mapped_column(default=utcnow)


class ApiToken(Base):
    """An API token, stored only as its SHA-256 hash."""

    __tablename__ = "api_tokens"

    id: Mapped[int] = mapped_column(primary_key=True)
    user_id: Mapped[int] = mapped_column(ForeignKey("users.id"))
    token_hash: Mapped[str] = mapped_column(String(64), unique=True)
    label: Mapped[str | None] = mapped_column(String(200))
    created_at: Mapped[datetime] = mapped_column(default=utcnow)
    revoked_at: Mapped[datetime | None]

    user: Mapped[User] = relationship()


class PageSession(Base):
    """A signed-in dashboard session. The browser's cookie holds only a random id; the store keeps its SHA-256.

    Signing out or changing the password revokes the row, so a cookie copied
    earlier stops working; ``password_stamp`` (a digest of the password hash at
    sign-in) also ends it when the hash changes by any other path.
    """

    __tablename__ = "page_sessions"

    id: Mapped[int] = mapped_column(primary_key=True)
    id_hash: Mapped[str] = mapped_column(String(64), unique=True)
    user_id: Mapped[int] = mapped_column(ForeignKey("users.id"), index=True)
    password_stamp: Mapped[str] = mapped_column(String(64))
    address: Mapped[str | None] = mapped_column(String(64), doc="The client address that signed in.")
    created_at: Mapped[datetime] = mapped_column(default=utcnow)
    expires_at: Mapped[datetime] = mapped_column(index=True)
    revoked_at: Mapped[datetime | None]


class SignInFailure(Base):
    """One refused sign-in: the name tried and the client address, kept for the throttle's window only."""

    __tablename__ = "sign_in_failures"
    __table_args__ = (
        Index("ix_sign_in_failures_account_failed_at", "account", "failed_at"),
        Index("ix_sign_in_failures_address_failed_at", "address", "failed_at"),
    )

    id: Mapped[int] = mapped_column(primary_key=True)
    account: Mapped[str] = mapped_column(String(200))
    address: Mapped[str] = mapped_column(String(64))
    failed_at: Mapped[datetime] = mapped_column(default=utcnow, index=True)


class ObservatoryVersion(Base):
    """One uploaded observatory description."""

    __tablename__ = "observatory_versions"

    id: Mapped[int] = mapped_column(primary_key=True)
    name: Mapped[str] = mapped_column(String(200))
    version_label: Mapped[str] = mapped_column(String(40))
    content_hash: Mapped[str] = mapped_column(String(64), index=True)
    document: Mapped[dict[str, Any]]
    uploaded_by: Mapped[int | None] = mapped_column(ForeignKey("users.id"))
    uploaded_at: Mapped[datetime] = mapped_column(default=utcnow)


class ScheduleVersion(Base):
    """One uploaded instrument schedule for one semester."""

    __tablename__ = "schedule_versions"

    id: Mapped[int] = mapped_column(primary_key=True)
    semester: Mapped[str] = mapped_column(String(20), index=True)
    version_label: Mapped[str] = mapped_column(String(40))
    content_hash: Mapped[str] = mapped_column(String(64), index=True)
    document: Mapped[dict[str, Any]]
    uploaded_by: Mapped[int | None] = mapped_column(ForeignKey("users.id"))
    uploaded_at: Mapped[datetime] = mapped_column(default=utcnow)


class ProposalRecord(Base):
    """A proposal, by its id; its content lives in its versions."""

    __tablename__ = "proposals"

    id: Mapped[int] = mapped_column(primary_key=True)
    proposal_id: Mapped[str] = mapped_column(String(64), unique=True)
    semester: Mapped[str] = mapped_column(String(20), index=True)
    owner_id: Mapped[int | None] = mapped_column(ForeignKey("users.id"), index=True)
    created_at: Mapped[datetime] = mapped_column(default=utcnow)

    versions: Mapped[list[ProposalVersion]] = relationship(back_populates="proposal", order_by="ProposalVersion.id")


class ProposalVersion(Base):
    """A proposal as submitted: the document, its content hash, who submitted it and when."""

    __tablename__ = "proposal_versions"
    __table_args__ = (UniqueConstraint("proposal_ref", "content_hash"),)

    id: Mapped[int] = mapped_column(primary_key=True)
    proposal_ref: Mapped[int] = mapped_column(ForeignKey("proposals.id"), index=True)
    content_hash: Mapped[str] = mapped_column(String(64))
    document: Mapped[dict[str, Any]]
    title: Mapped[str] = mapped_column(String(500))
    pi_name: Mapped[str] = mapped_column(String(200))
    instruments: Mapped[str] = mapped_column(String(500), doc="Comma-separated instrument names, for filtering.")
    targets: Mapped[str] = mapped_column(Text, doc="Target names joined by newlines, for search.")
    hours_requested: Mapped[float] = mapped_column(Float)
    submitted_by: Mapped[int | None] = mapped_column(ForeignKey("users.id"))
    submitted_at: Mapped[datetime] = mapped_column(default=utcnow)

    proposal: Mapped[ProposalRecord] = relationship(back_populates="versions")


class CheckRun(Base):
    """One evaluation of one proposal version against one observatory and one schedule version.

    The unique constraint on the three versions and the engine version makes the
    worker's task idempotent: a second run of the same inputs finds the first.
    """

    __tablename__ = "check_runs"
    __table_args__ = (
        UniqueConstraint("proposal_version_id", "observatory_version_id", "schedule_key", "engine_version", name="uq_check_runs_inputs"),
        Index("ix_check_runs_state_queued", "state", "queued_at"),
        Index("ix_check_runs_state_dispatched", "state", "dispatched_at"),
    )

    id: Mapped[int] = mapped_column(primary_key=True)
    proposal_version_id: Mapped[int] = mapped_column(ForeignKey("proposal_versions.id"), index=True)
    observatory_version_id: Mapped[int] = mapped_column(ForeignKey("observatory_versions.id"))
    schedule_version_id: Mapped[int | None] = mapped_column(ForeignKey("schedule_versions.id"))
    schedule_key: Mapped[int] = mapped_column(Integer, default=0, doc="schedule_version_id or 0, so the unique constraint works with no schedule.")
    engine_version: Mapped[str] = mapped_column(String(40))
    state: Mapped[str] = mapped_column(String(10), default="queued", doc="queued, running, done or failed")
    reason: Mapped[str] = mapped_column(String(200), default="submitted", doc="Why the run was queued.")
    priority: Mapped[int] = mapped_column(Integer, default=0, doc="0 for submissions, higher numbers run later.")
    attempts: Mapped[int] = mapped_column(Integer, default=0)
    verdict: Mapped[str | None] = mapped_column(String(12), index=True)
    result: Mapped[dict[str, Any] | None] = mapped_column(
        doc="The ProposalResult as JSON: compact (no plot series nor method texts; feasibility.service.details), or whole for older runs."
    )
    error: Mapped[str | None] = mapped_column(Text)
    queued_at: Mapped[datetime] = mapped_column(default=utcnow)
    started_at: Mapped[datetime | None]
    finished_at: Mapped[datetime | None]
    dispatched_at: Mapped[datetime | None] = mapped_column(
        doc="When the run's message was last sent to the workers; NULL while it still has to be sent (the outbox)."
    )
    lease_expires_at: Mapped[datetime | None] = mapped_column(
        doc="While running: when the worker's claim lapses unless its heartbeat renews it; then anyone may take the run over."
    )
    lease_owner: Mapped[str | None] = mapped_column(String(100), doc="While running: 'host:pid' of the process holding the claim.")

    proposal_version: Mapped[ProposalVersion] = relationship()
    outcomes: Mapped[list[RequestOutcome]] = relationship(back_populates="run", cascade="all, delete-orphan", order_by="RequestOutcome.id")


class RequestOutcome(Base):
    """One observation request's verdict and key figures in one run, queryable; all its figures are in the run's result."""

    __tablename__ = "request_outcomes"

    id: Mapped[int] = mapped_column(primary_key=True)
    run_id: Mapped[int] = mapped_column(ForeignKey("check_runs.id"), index=True)
    label: Mapped[str] = mapped_column(String(80))
    instrument: Mapped[str] = mapped_column(String(100), index=True)
    target: Mapped[str] = mapped_column(String(200))
    verdict: Mapped[str] = mapped_column(String(12), index=True)
    hours_requested: Mapped[float | None] = mapped_column(Float)
    hours_observable: Mapped[float | None] = mapped_column(Float)
    hours_needed: Mapped[float | None] = mapped_column(Float)
    snr_expected: Mapped[float | None] = mapped_column(Float)

    run: Mapped[CheckRun] = relationship(back_populates="outcomes")
    findings: Mapped[list[FindingRow]] = relationship(back_populates="outcome", cascade="all, delete-orphan", order_by="FindingRow.id")


class FindingRow(Base):
    """A finding that is not ``feasible`` of one request in one run: what the lists filter and sort on (check, level).

    Its words and figures live in the run's result only (migration 0007); feasible findings have no row.
    """

    __tablename__ = "findings"

    id: Mapped[int] = mapped_column(primary_key=True)
    outcome_id: Mapped[int] = mapped_column(ForeignKey("request_outcomes.id"), index=True)
    check: Mapped[str] = mapped_column(String(40), index=True)
    level: Mapped[str] = mapped_column(String(12), index=True)

    outcome: Mapped[RequestOutcome] = relationship(back_populates="findings")


class VerdictChange(Base):
    """A re-check that changed a proposal's verdict or a key figure of one of its requests."""

    __tablename__ = "verdict_changes"

    id: Mapped[int] = mapped_column(primary_key=True)
    proposal_ref: Mapped[int] = mapped_column(ForeignKey("proposals.id"), index=True)
    previous_run_id: Mapped[int] = mapped_column(ForeignKey("check_runs.id"))
    run_id: Mapped[int] = mapped_column(ForeignKey("check_runs.id"), unique=True)
    verdict_before: Mapped[str] = mapped_column(String(12))
    verdict_after: Mapped[str] = mapped_column(String(12))
    details: Mapped[dict[str, Any]] = mapped_column(doc="Per request: figures before and after.")
    recorded_at: Mapped[datetime] = mapped_column(default=utcnow, index=True)


class WebhookDelivery(Base):
    """A signed notice of changed verdicts for one portal, and how its delivery went."""

    __tablename__ = "webhook_deliveries"

    id: Mapped[int] = mapped_column(primary_key=True)
    user_id: Mapped[int] = mapped_column(ForeignKey("users.id"), index=True)
    change_id: Mapped[int] = mapped_column(ForeignKey("verdict_changes.id"))
    body: Mapped[str] = mapped_column(Text)
    state: Mapped[str] = mapped_column(String(10), default="pending", doc="pending, sent or failed")
    attempts: Mapped[int] = mapped_column(Integer, default=0)
    last_error: Mapped[str | None] = mapped_column(Text)
    next_attempt_at: Mapped[datetime] = mapped_column(default=utcnow)
    created_at: Mapped[datetime] = mapped_column(default=utcnow)


class ReviewAssignment(Base):
    """One assignment of a technical reviewer to a proposal; the newest row per proposal stands. Never changed."""

    __tablename__ = "review_assignments"

    id: Mapped[int] = mapped_column(primary_key=True)
    proposal_ref: Mapped[int] = mapped_column(ForeignKey("proposals.id"), index=True)
    reviewer_id: Mapped[int] = mapped_column(ForeignKey("users.id"), index=True)
    assigned_by: Mapped[int] = mapped_column(ForeignKey("users.id"))
    assigned_at: Mapped[datetime] = mapped_column(default=utcnow)

    reviewer: Mapped[User] = relationship(foreign_keys=[reviewer_id])
    assigner: Mapped[User] = relationship(foreign_keys=[assigned_by])


class ReviewNote(Base):
    """A reviewer's note on a proposal, or on one of its observation requests (by label). Never changed."""

    __tablename__ = "review_notes"

    id: Mapped[int] = mapped_column(primary_key=True)
    proposal_ref: Mapped[int] = mapped_column(ForeignKey("proposals.id"), index=True)
    request_label: Mapped[str | None] = mapped_column(String(80), doc="The observation request's label; NULL for the whole proposal.")
    author_id: Mapped[int] = mapped_column(ForeignKey("users.id"))
    text: Mapped[str] = mapped_column(Text)
    written_at: Mapped[datetime] = mapped_column(default=utcnow)

    author: Mapped[User] = relationship()


class ReviewDecision(Base):
    """A reviewer's decision on a proposal: the engine's verdict confirmed, or overridden with a reason.

    It records the run and the engine's verdict it was made against, so a later
    run whose verdict differs shows the decision must be looked at again. The
    newest row per proposal stands. Never changed.
    """

    __tablename__ = "review_decisions"

    id: Mapped[int] = mapped_column(primary_key=True)
    proposal_ref: Mapped[int] = mapped_column(ForeignKey("proposals.id"), index=True)
    reviewer_id: Mapped[int] = mapped_column(ForeignKey("users.id"))
    kind: Mapped[str] = mapped_column(String(10), doc="confirm or override")
    verdict: Mapped[str] = mapped_column(String(12), doc="The reviewer's verdict (the engine's, when confirmed).")
    engine_verdict: Mapped[str] = mapped_column(String(12), doc="The engine's verdict when the decision was made.")
    run_id: Mapped[int] = mapped_column(ForeignKey("check_runs.id"), doc="The finished run the decision was made against.")
    reason: Mapped[str | None] = mapped_column(Text, doc="Why; required for an override.")
    decided_at: Mapped[datetime] = mapped_column(default=utcnow)

    reviewer: Mapped[User] = relationship()


class AppendOnly(Exception):
    """Raised on any attempt to change or delete a row of the review's audit trail."""


#: The review's audit trail: rows are added, never changed nor deleted.
APPEND_ONLY: tuple[type[Base], ...] = (ReviewAssignment, ReviewNote, ReviewDecision)


def _refuse(mapper: Any, connection: Any, target: Base) -> None:
    raise AppendOnly(f"{type(target).__tablename__} is an audit trail: its rows are never changed nor deleted")


for _model in APPEND_ONLY:
    event.listen(_model, "before_update", _refuse)
    event.listen(_model, "before_delete", _refuse)


@event.listens_for(Session, "do_orm_execute")
def _refuse_bulk_changes(state: Any) -> None:
    """Bulk ``update()``/``delete()`` statements skip the per-row events: refuse them on the audit trail too."""
    if state.is_update or state.is_delete:
        table = getattr(state.statement, "table", None)
        if table is not None and table.name in {model.__tablename__ for model in APPEND_ONLY}:
            raise AppendOnly(f"{table.name} is an audit trail: its rows are never changed nor deleted")


class Simulation(Base):
    """One semester simulation (the chance of completion): asked for by a reviewer or admin, computed by a worker.

    The result (``feasibility.engine.simulate.simulate_semester``'s mapping) is kept as JSON
    with the settings it was computed with; it names the observatory and schedule versions.
    """

    __tablename__ = "simulations"

    id: Mapped[int] = mapped_column(primary_key=True)
    semester: Mapped[str] = mapped_column(String(20), index=True)
    settings: Mapped[dict[str, Any]] = mapped_column(doc="realisations, seed, hours and ranks, as asked.")
    state: Mapped[str] = mapped_column(String(10), default="queued", doc="queued, running, done or failed")
    result: Mapped[dict[str, Any] | None]
    error: Mapped[str | None] = mapped_column(Text)
    requested_by: Mapped[int | None] = mapped_column(ForeignKey("users.id"))
    queued_at: Mapped[datetime] = mapped_column(default=utcnow)
    started_at: Mapped[datetime | None]
    finished_at: Mapped[datetime | None]

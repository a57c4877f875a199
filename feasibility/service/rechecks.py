"""Deciding which proposals to check again, and uploading the documents that make it necessary.

Each proposal's newest version has a *basis*: its newest check run that did not
fail (queued, running or done). The inputs of that run are compared with the
inputs in force, and a re-check is queued for every reason found:

``schedule``
    the semester's instrument schedule in force differs from the basis run's
    in the nights of an instrument the proposal's requests use (see
    :mod:`feasibility.service.schedule_diff`); a change to other instruments'
    nights leaves the proposal alone;
``observatory``
    the observatory description in force is not the basis run's;
``engine``
    the basis run was made by another engine version;
``stale``
    the basis run finished longer ago than the stale limit.

Comparing with the basis run, rather than with the previous schedule version,
makes planning idempotent: once the re-checks are queued they are the basis,
and a second plan finds nothing to do. Re-checks are queued with
:data:`RECHECK_PRIORITY` (after fresh submissions) and must be enqueued with
:func:`feasibility.service.dispatch.enqueue` (``bulk=True``) only after the
caller commits: :func:`dispatch_plan` does that.
"""

from __future__ import annotations

from collections import Counter
from dataclasses import dataclass, field
from datetime import datetime, timedelta
from typing import Any

from sqlalchemy import func, select
from sqlalchemy.orm import Session

from feasibility.documents import InstrumentSchedule, Observatory, parse_document
from feasibility.documents.consistency import schedule_problems
from feasibility.documents.loading import DocumentError, Problem
from feasibility.service.current import (
    add_observatory_version,
    add_schedule_version,
    current_observatory,
    current_schedule,
    observatory_of,
    schedule_of,
)
from feasibility.service.engine_version import engine_version
from feasibility.service.schedule_diff import ScheduleDiff, schedule_diff
from feasibility.service.submissions import ensure_run
from feasibility.store.models import (
    CheckRun,
    ObservatoryVersion,
    ProposalRecord,
    ProposalVersion,
    ScheduleVersion,
    User,
    utcnow,
)

__all__ = [
    "DEFAULT_STALE_DAYS",
    "RECHECK_PRIORITY",
    "TRIGGERS",
    "RecheckPlan",
    "Upload",
    "dispatch_plan",
    "plan_rechecks",
    "previous_schedule",
    "upload_observatory",
    "upload_schedule",
]

#: Priority of a re-check: after fresh submissions (priority 0).
RECHECK_PRIORITY = 5
#: A result older than this many days is checked again by the nightly re-check (``FEASIBILITY_STALE_DAYS``).
DEFAULT_STALE_DAYS = 30
#: Every reason the planner knows.
TRIGGERS = frozenset({"schedule", "observatory", "engine", "stale"})


@dataclass
class RecheckPlan:
    """The re-checks one planning step queued, and why."""

    run_ids: list[int] = field(default_factory=list)
    already_queued: int = 0
    by_reason: Counter[str] = field(default_factory=Counter)
    by_instrument: Counter[str] = field(default_factory=Counter)
    proposals: list[str] = field(default_factory=list)

    @property
    def queued(self) -> int:
        return len(self.run_ids)


@dataclass
class Upload:
    """What uploading a schedule or an observatory description did."""

    kind: str
    created: bool
    version: ScheduleVersion | ObservatoryVersion
    previous: ScheduleVersion | ObservatoryVersion | None
    diff: ScheduleDiff | None
    plan: RecheckPlan


def upload_schedule(session: Session, data: dict[str, Any] | str | bytes, uploaded_by: User | None = None) -> Upload:
    """Validate and store a new instrument schedule version; plan the re-checks it calls for.

    Raises :class:`DocumentError` (field paths) for a document that does not
    parse or does not fit the observatory in force. Identical content to the
    version in force stores nothing and plans nothing. The caller commits, then
    calls :func:`dispatch_plan`.
    """
    schedule = parse_document(InstrumentSchedule, data, "schedule")
    observatory_row = current_observatory(session)
    if observatory_row is None:
        raise DocumentError([Problem("", "the service has no observatory description yet; upload one first")], "schedule")
    observatory = observatory_of(observatory_row)
    if schedule.observatory != observatory.name:
        raise DocumentError([Problem("observatory", f"is {schedule.observatory!r}, but the observatory in force is {observatory.name!r}")], "schedule")
    problems = schedule_problems(schedule, observatory)
    if problems:
        raise DocumentError(problems, "schedule")
    before = current_schedule(session, schedule.semester)
    version = add_schedule_version(session, schedule, uploaded_by)
    created = before is None or version.id != before.id
    if not created:
        return Upload("schedule", False, version, previous_schedule(session, version), None, RecheckPlan())
    diff = schedule_diff(schedule_of(before), schedule)
    plan = plan_rechecks(session, semester=schedule.semester, triggers={"schedule"})
    return Upload("schedule", True, version, before, diff, plan)


def upload_observatory(session: Session, data: dict[str, Any] | str | bytes, uploaded_by: User | None = None) -> Upload:
    """Validate and store a new observatory description version; plan a re-check of every proposal.

    The schedules in force must still fit the new description (an instrument a
    schedule mounts cannot disappear): upload a new schedule first.
    """
    observatory = parse_document(Observatory, data, "observatory")
    problems: list[Problem] = []
    semesters = session.scalars(select(ScheduleVersion.semester).distinct()).all()
    for semester in sorted(semesters):
        schedule = schedule_of(current_schedule(session, semester))
        if schedule is None:
            continue
        for problem in schedule_problems(schedule, observatory):
            problems.append(Problem(_schedule_field(problem.field), f"the schedule in force for {semester} no longer fits: {problem.field}: {problem.message}"))
    if problems:
        raise DocumentError(problems, "observatory")
    before = current_observatory(session)
    version = add_observatory_version(session, observatory, uploaded_by)
    created = before is None or version.id != before.id
    if not created:
        return Upload("observatory", False, version, _previous_observatory(session, version), None, RecheckPlan())
    plan = plan_rechecks(session, triggers={"observatory"})
    return Upload("observatory", True, version, before, None, plan)


def plan_rechecks(
    session: Session,
    *,
    semester: str | None = None,
    triggers: set[str] | frozenset[str] = TRIGGERS,
    changed_since: datetime | None = None,
    stale_after: timedelta | None = None,
    now: datetime | None = None,
) -> RecheckPlan:
    """Queue a re-check for each proposal whose basis run no longer matches the inputs in force.

    Parameters
    ----------
    session
        Runs are added to it; the caller commits, then calls :func:`dispatch_plan`.
    semester
        Only proposals of this semester (default: all).
    triggers
        Which reasons count (see the module's description).
    changed_since
        When given, a schedule or observatory description counts as changed only
        when the version in force was uploaded at or after this time (for a
        cron job that looks back one day); engine and stale reasons always count.
    stale_after
        Age beyond which a finished result is stale (the ``stale`` trigger needs it).
    now
        The time ages are measured from (default: now).
    """
    unknown = set(triggers) - TRIGGERS
    if unknown:
        raise ValueError(f"unknown re-check triggers: {sorted(unknown)}")
    now = now or utcnow()
    plan = RecheckPlan()
    observatory_row = current_observatory(session)
    if observatory_row is None:
        return plan
    engine_now = engine_version()
    schedules: dict[str, ScheduleVersion | None] = {}
    diffs: dict[tuple[int, int], ScheduleDiff] = {}
    observatory_counts = "observatory" in triggers and _changed(observatory_row.uploaded_at, changed_since)

    for version, record_semester, proposal_id, basis in _latest_versions(session, semester):
        if record_semester not in schedules:
            schedules[record_semester] = current_schedule(session, record_semester)
        schedule_row = schedules[record_semester]
        reasons: list[str] = []
        instruments: set[str] = set()
        if basis is None:
            if observatory_counts:
                reasons.append("observatory")
        else:
            if "engine" in triggers and basis.engine_version != engine_now:
                reasons.append("engine")
            if observatory_counts and basis.observatory_version_id != observatory_row.id:
                reasons.append("observatory")
            schedule_key = schedule_row.id if schedule_row is not None else 0
            if "schedule" in triggers and basis.schedule_key != schedule_key and schedule_row is not None and _changed(schedule_row.uploaded_at, changed_since):
                instruments = _schedule_affects(session, basis, schedule_row, version, diffs)
                if instruments:
                    reasons.append("schedule")
            if (
                "stale" in triggers
                and stale_after is not None
                and basis.state == "done"
                and basis.finished_at is not None
                and basis.finished_at < now - stale_after
            ):
                reasons.append("stale")
        if not reasons:
            continue
        _queue(session, plan, version, proposal_id, observatory_row, schedule_row, reasons, instruments, basis)
    return plan


def dispatch_plan(plan: RecheckPlan) -> None:
    """Hand the plan's runs to the queue (at the lower, bulk priority). Call only after commit."""
    if plan.run_ids:
        from feasibility.service.dispatch import enqueue

        enqueue(plan.run_ids, bulk=True)


def previous_schedule(session: Session, version: ScheduleVersion) -> ScheduleVersion | None:
    """The version of the same semester stored just before ``version``."""
    query = (
        select(ScheduleVersion)
        .where(ScheduleVersion.semester == version.semester, ScheduleVersion.id < version.id)
        .order_by(ScheduleVersion.id.desc())
        .limit(1)
    )
    return session.scalars(query).first()


# --- helpers ---------------------------------------------------------------------------


def _latest_versions(session: Session, semester: str | None) -> list[tuple[ProposalVersion, str, str, CheckRun | None]]:
    """Each proposal's newest version, its semester and id, and its basis run (newest run not failed)."""
    newest = select(func.max(ProposalVersion.id).label("id")).group_by(ProposalVersion.proposal_ref)
    if semester is not None:
        newest = newest.join(ProposalRecord, ProposalRecord.id == ProposalVersion.proposal_ref).where(ProposalRecord.semester == semester)
    newest_ids = newest.subquery()
    basis_ids = (
        select(func.max(CheckRun.id).label("id"), CheckRun.proposal_version_id.label("pv"))
        .where(CheckRun.state != "failed", CheckRun.proposal_version_id.in_(select(newest_ids.c.id)))
        .group_by(CheckRun.proposal_version_id)
        .subquery()
    )
    rows = session.execute(
        select(ProposalVersion, ProposalRecord.semester, ProposalRecord.proposal_id, CheckRun)
        .join(ProposalRecord, ProposalRecord.id == ProposalVersion.proposal_ref)
        .join(newest_ids, newest_ids.c.id == ProposalVersion.id)
        .outerjoin(basis_ids, basis_ids.c.pv == ProposalVersion.id)
        .outerjoin(CheckRun, CheckRun.id == basis_ids.c.id)
        .order_by(ProposalVersion.id)
    ).all()
    return [(row[0], row[1], row[2], row[3]) for row in rows]


def _schedule_affects(
    session: Session,
    basis: CheckRun,
    schedule_row: ScheduleVersion,
    version: ProposalVersion,
    diffs: dict[tuple[int, int], ScheduleDiff],
) -> set[str]:
    """The proposal's instruments whose nights differ between the basis run's schedule and the one in force."""
    key = (basis.schedule_key, schedule_row.id)
    if key not in diffs:
        old_row = session.get(ScheduleVersion, basis.schedule_version_id) if basis.schedule_version_id else None
        diffs[key] = schedule_diff(schedule_of(old_row), schedule_of(schedule_row))  # type: ignore[arg-type]
    instruments = [name for name in version.instruments.split(",") if name]
    return diffs[key].affects(instruments)


def _queue(
    session: Session,
    plan: RecheckPlan,
    version: ProposalVersion,
    proposal_id: str,
    observatory_row: ObservatoryVersion,
    schedule_row: ScheduleVersion | None,
    reasons: list[str],
    instruments: set[str],
    basis: CheckRun | None,
) -> None:
    """Find or create the run with the inputs in force and add it to the plan."""
    text = _reason_text(reasons, instruments, schedule_row)
    run, created = ensure_run(session, version, observatory_row, schedule_row, reason=text, priority=RECHECK_PRIORITY)
    if not created:
        if run.state in ("queued", "running"):
            plan.already_queued += 1
            return
        if basis is None or run.id != basis.id or "stale" not in reasons:
            return  # a finished run with these inputs exists already
        # Stale: the same inputs, so the same run is computed again; its old outcomes
        # go (the worker stores new ones), its verdict stays on show until then.
        run.state, run.reason, run.priority, run.queued_at = "queued", text, RECHECK_PRIORITY, utcnow()
        run.started_at = None
        run.outcomes.clear()
    session.flush()
    plan.run_ids.append(run.id)
    plan.proposals.append(proposal_id)
    plan.by_reason.update(reasons)
    plan.by_instrument.update(instruments)


def _reason_text(reasons: list[str], instruments: set[str], schedule_row: ScheduleVersion | None) -> str:
    parts = []
    for reason in reasons:
        if reason == "schedule" and schedule_row is not None:
            parts.append(f"schedule {schedule_row.semester} {schedule_row.version_label}: {', '.join(sorted(instruments))} nights changed")
        elif reason == "observatory":
            parts.append("observatory description changed")
        elif reason == "engine":
            parts.append(f"engine version {engine_version()}")
        elif reason == "stale":
            parts.append("stale result")
    return ("re-check: " + "; ".join(parts))[:200]


def _changed(uploaded_at: datetime | None, since: datetime | None) -> bool:
    if since is None or uploaded_at is None:
        return True
    return uploaded_at >= since


def _schedule_field(field: str) -> str:
    """Point a schedule problem at the observatory field that causes it."""
    return "instruments" if field.endswith(".instrument") else "semesters"


def _previous_observatory(session: Session, version: ObservatoryVersion) -> ObservatoryVersion | None:
    query = select(ObservatoryVersion).where(ObservatoryVersion.id < version.id).order_by(ObservatoryVersion.id.desc()).limit(1)
    return session.scalars(query).first()

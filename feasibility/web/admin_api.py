"""The API for instrument schedules, observatory descriptions, re-checks and verdict changes (under /api/v1).

Uploading a schedule or an observatory description needs the ``admin`` role;
each upload is validated like any document (422 with field paths), stored as a
new version (never an overwrite), and queues the re-checks it calls for after
the transaction commits. Identical content to the version in force stores
nothing and queues nothing (200 instead of 201). Reading schedules and changes
needs any role; changes are filtered to the proposals the caller may read.
"""

from __future__ import annotations

from datetime import datetime, timedelta
from typing import Any

from flask import Blueprint, abort, current_app, request
from sqlalchemy import select
from sqlalchemy.orm import Session

from feasibility.documents.loading import DocumentError, DocumentTooLarge, Problem
from feasibility.documents.times import as_utc
from feasibility.service import access
from feasibility.service.current import current_observatory, current_schedule, schedule_of
from feasibility.service.recheck_answers import plan_answer, upload_answer, version_answer
from feasibility.service.rechecks import (
    DEFAULT_STALE_DAYS,
    dispatch_plan,
    plan_rechecks,
    previous_schedule,
    upload_observatory,
    upload_schedule,
)
from feasibility.service.schedule_diff import schedule_diff
from feasibility.service.webhooks import webhook_url_problem
from feasibility.store.db import session_scope
from feasibility.store.models import ProposalRecord, ScheduleVersion, User, VerdictChange
from feasibility.web.auth import current_user, require
from feasibility.web.bodies import read_request_data, request_body

__all__ = ["bp", "change_json", "changes_since"]

bp = Blueprint("admin_api", __name__, url_prefix="/api/v1")

#: Most changes returned by one request.
MAX_CHANGES = 1000
#: Longest ``stale_days`` of a re-check request (a century; a larger number overflows a time span).
_MAX_STALE_DAYS = 36_525


@bp.errorhandler(DocumentError)
def _invalid(error: DocumentError) -> tuple[dict[str, Any], int]:
    status = 400 if error.document == "query" else 413 if isinstance(error, DocumentTooLarge) else 422
    return error.as_dict(), status


@bp.post("/schedules")
@require(access.MANAGE_VERSIONS)
def post_schedule() -> tuple[dict[str, Any], int]:
    """Upload an instrument schedule (JSON or YAML). 201 with the new version, its changes and the re-checks queued."""
    return _upload(upload_schedule, "schedule")


@bp.get("/schedules/<semester>")
@require(access.READ_SCHEDULES)
def get_schedule(semester: str) -> dict[str, Any]:
    """The schedule in force for ``semester``, and what changed from the version before it."""
    with session_scope(read_only=True) as session:
        version = current_schedule(session, semester)
        if version is None:
            abort(404, description=f"no instrument schedule for semester {semester!r}")
        previous = previous_schedule(session, version)
        current = schedule_of(version)
        assert current is not None
        return {
            "version": version_answer(version),
            "previous": version_answer(previous) if previous is not None else None,
            "changes": schedule_diff(schedule_of(previous), current).as_dict(),
            "document": version.document,
        }


@bp.get("/schedules/<semester>/versions")
@require(access.READ_SCHEDULES)
def list_schedule_versions(semester: str) -> dict[str, Any]:
    """Every stored version of the semester's schedule, newest first."""
    with session_scope(read_only=True) as session:
        rows = session.scalars(select(ScheduleVersion).where(ScheduleVersion.semester == semester).order_by(ScheduleVersion.id.desc())).all()
        if not rows:
            abort(404, description=f"no instrument schedule for semester {semester!r}")
        return {"semester": semester, "items": [version_answer(v) for v in rows]}


@bp.get("/schedules/<semester>/changes")
@require(access.READ_SCHEDULES)
def compare_schedule_versions(semester: str) -> dict[str, Any]:
    """The night-by-night differences between two stored versions (``?from=ID&to=ID``; default: the last two)."""
    with session_scope(read_only=True) as session:
        after = _schedule_version(session, semester, "to") or current_schedule(session, semester)
        if after is None:
            abort(404, description=f"no instrument schedule for semester {semester!r}")
        before = _schedule_version(session, semester, "from") if "from" in request.args else previous_schedule(session, after)
        current = schedule_of(after)
        assert current is not None
        return {
            "from": version_answer(before) if before is not None else None,
            "to": version_answer(after),
            "changes": schedule_diff(schedule_of(before), current).as_dict(),
        }


@bp.post("/observatory")
@require(access.MANAGE_VERSIONS)
def post_observatory() -> tuple[dict[str, Any], int]:
    """Upload an observatory description. 201 with the new version and the re-checks of every proposal queued."""
    return _upload(upload_observatory, "observatory")


@bp.get("/observatory")
@require(access.READ_SCHEDULES)
def get_observatory() -> dict[str, Any]:
    """The observatory description in force."""
    with session_scope(read_only=True) as session:
        version = current_observatory(session)
        if version is None:
            abort(404, description="no observatory description stored yet")
        return {"version": version_answer(version), "document": version.document}


@bp.post("/rechecks")
@require(access.RECHECK)
def post_rechecks() -> dict[str, Any]:
    """Queue what the schedules, the observatory, the engine version and old results call for (the nightly re-check, now).

    Optional JSON body: ``{"changed_since": ISO time, "stale_days": N}``.
    """
    body = _small_json() or {}
    if not isinstance(body, dict):
        raise DocumentError([Problem("", "must be a JSON object")], "query")
    since = _parse_time(body.get("changed_since"), "changed_since")
    stale_days = body.get("stale_days", current_app.config.get("STALE_DAYS", DEFAULT_STALE_DAYS))
    if isinstance(stale_days, bool) or not isinstance(stale_days, (int, float)) or not 0 < stale_days <= _MAX_STALE_DAYS:
        raise DocumentError([Problem("stale_days", f"must be a positive number of days, at most {_MAX_STALE_DAYS}")], "query")
    with session_scope() as session:
        plan = plan_rechecks(session, changed_since=since, stale_after=timedelta(days=float(stale_days)))
    dispatch_plan(plan)
    return plan_answer(plan)


@bp.get("/changes")
@require(access.SEE_CHANGES)
def list_changes() -> dict[str, Any]:
    """Verdict and key-figure changes recorded since ``?since=ISO time`` (oldest first), for proposals the caller may read."""
    since = _parse_time(request.args.get("since"), "since")
    raw_limit = request.args.get("limit", "100")
    if not raw_limit.isdigit() or not 1 <= int(raw_limit) <= MAX_CHANGES:
        raise DocumentError([Problem("limit", f"must be a whole number from 1 to {MAX_CHANGES}")], "query")
    with session_scope(read_only=True) as session:
        items = changes_since(session, current_user(), since, limit=int(raw_limit))
    return {"since": since.isoformat() if since else None, "count": len(items), "items": items}


@bp.put("/users/<name>/webhook")
@require(access.MANAGE_WEBHOOKS)
def put_webhook(name: str) -> dict[str, Any]:
    """Set a portal user's webhook address and shared secret: ``{"url": ..., "secret": ...}``."""
    body = _small_json()
    if not isinstance(body, dict):
        raise DocumentError([Problem("", "send a JSON object with 'url' and 'secret'")], "webhook")
    problems = []
    url, secret = body.get("url"), body.get("secret")
    allow_private = bool(current_app.config.get("WEBHOOK_ALLOW_PRIVATE"))
    if not isinstance(url, str) or (reason := webhook_url_problem(url, allow_private=allow_private)) is not None:
        problems.append(Problem("url", "is required" if not isinstance(url, str) else reason or ""))
    if not isinstance(secret, str) or len(secret) < 16 or len(secret) > 200:
        problems.append(Problem("secret", "must be text of 16 to 200 characters"))
    if problems:
        raise DocumentError(problems, "webhook")
    with session_scope() as session:
        user = _user(session, name)
        user.webhook_url, user.webhook_secret = url, secret
        return {"name": user.name, "role": user.role, "webhook_url": user.webhook_url}


@bp.delete("/users/<name>/webhook")
@require(access.MANAGE_WEBHOOKS)
def delete_webhook(name: str) -> dict[str, Any]:
    """Stop sending notices to a user."""
    with session_scope() as session:
        user = _user(session, name)
        user.webhook_url = user.webhook_secret = None
        return {"name": user.name, "role": user.role, "webhook_url": None}


def changes_since(
    session: Session, user: User | None, since: datetime | None, *, limit: int = 100, semester: str | None = None, newest_first: bool = False
) -> list[dict[str, Any]]:
    """The recorded changes ``user`` may read, recorded at or after ``since``, oldest first (the dashboard calls this too)."""
    query = (
        select(VerdictChange, ProposalRecord)
        .join(ProposalRecord, ProposalRecord.id == VerdictChange.proposal_ref)
        .where(access.visible_to(user))
        .order_by(*((VerdictChange.recorded_at.desc(), VerdictChange.id.desc()) if newest_first else (VerdictChange.recorded_at, VerdictChange.id)))
        .limit(limit)
    )
    if semester is not None:
        query = query.where(ProposalRecord.semester == semester)
    if since is not None:
        query = query.where(VerdictChange.recorded_at >= since)
    return [change_json(change, record) for change, record in session.execute(query)]


def change_json(change: VerdictChange, record: ProposalRecord) -> dict[str, Any]:
    """One change as the API shows it."""
    return {
        "id": change.id,
        "proposal_id": record.proposal_id,
        "semester": record.semester,
        "run_id": change.run_id,
        "previous_run_id": change.previous_run_id,
        "verdict_before": change.verdict_before,
        "verdict_after": change.verdict_after,
        "recorded_at": change.recorded_at.isoformat(),
        "reason": (change.details or {}).get("reason"),
        "requests": (change.details or {}).get("requests", []),
        "links": {"run": f"/api/v1/runs/{change.run_id}", "proposal": f"/api/v1/proposals/{record.proposal_id}"},
    }


def _upload(action: Any, document: str) -> tuple[dict[str, Any], int]:
    """Validate and store the uploaded document; queue its re-checks once committed."""
    data = request_body(document)  # over MAX_CONTENT_LENGTH: a 413 in the documents' error shape
    user = current_user()
    with session_scope() as session:
        outcome = action(session, data, session.merge(user, load=False) if user is not None else None)
        answer = upload_answer(outcome)
    dispatch_plan(outcome.plan)  # only now: the runs are committed
    return answer, 201 if outcome.created else 200


def _small_json() -> Any:
    """A small JSON or YAML body read safely (bounded depth and numbers), or None when absent or unreadable."""
    try:
        data = request_body("query")
        return read_request_data(data, "query") if data.strip() else None
    except DocumentError:
        return None


def _parse_time(raw: Any, field: str) -> datetime | None:
    """An ISO 8601 time (naive means UTC), in UTC; None when absent."""
    if raw is None or raw == "":
        return None
    try:
        moment = datetime.fromisoformat(str(raw).replace(" ", "+") if "T" in str(raw) else str(raw))
    except ValueError:
        raise DocumentError([Problem(field, "must be an ISO 8601 time, e.g. 2027-05-01T00:00:00Z")], "query") from None
    try:
        return as_utc(moment)
    except ValueError as exc:
        raise DocumentError([Problem(field, str(exc))], "query") from None


def _schedule_version(session: Session, semester: str, arg: str) -> ScheduleVersion | None:
    raw = request.args.get(arg)
    if raw is None:
        return None
    if not raw.isdigit():
        raise DocumentError([Problem(arg, "must be a schedule version id")], "query")
    version = session.get(ScheduleVersion, int(raw))
    if version is None or version.semester != semester:
        abort(404, description=f"no schedule version {raw} for semester {semester!r}")
    return version


def _user(session: Session, name: str) -> User:
    user = session.scalar(select(User).where(User.name == name))
    if user is None:
        abort(404, description=f"no user named {name!r}")
    return user

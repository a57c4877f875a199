"""The admins' schedule pages: upload a schedule with a dry-run preview before it is stored, and the semester's calendar.

The preview runs the real upload (:func:`feasibility.service.rechecks.upload_schedule`)
in a transaction that is rolled back, so it shows exactly what confirming will do:
the open nights each instrument gains and loses, and the proposals that would be
checked again. Confirming sends the same document back (with its digest, so what is
stored is what was previewed) and stores it; the re-checks are queued after commit.
"""

from __future__ import annotations

import hashlib
from collections import defaultdict
from datetime import date, timedelta
from typing import Any

from flask import abort, flash, redirect, render_template, request, url_for

from feasibility.documents.loading import DocumentError, Problem
from feasibility.service import access
from feasibility.service.current import current_schedule, schedule_of
from feasibility.service.rechecks import dispatch_plan, upload_schedule
from feasibility.store.db import session_factory, session_scope
from feasibility.store.models import User
from feasibility.web.auth_pages import current_user, db, sign_in_required
from feasibility.web.dashboard import bp

__all__: list[str] = []


@bp.route("/admin/schedule", methods=["GET", "POST"])
@sign_in_required(access.MANAGE_VERSIONS)
def schedule_upload() -> Any:
    """The upload form; a file gives a preview; the preview's button stores the document."""
    if request.method == "GET":
        return render_template("dashboard/schedule_upload.html", preview=None, problems=None)
    user = current_user()
    assert user is not None
    if request.form.get("action") == "confirm":
        return _confirm(user)
    upload_file = request.files.get("document")
    if upload_file is None or not upload_file.filename:
        problems = DocumentError([Problem("document", "choose a schedule file (JSON or YAML) to upload")], "upload")
        return render_template("dashboard/schedule_upload.html", preview=None, problems=problems), 400
    content = upload_file.read()
    try:
        text = content.decode("utf-8")
    except UnicodeDecodeError:
        problems = DocumentError([Problem("document", "is not UTF-8 text")], "upload")
        return render_template("dashboard/schedule_upload.html", preview=None, problems=problems), 422
    try:
        preview = _dry_run(text, user.id)
    except DocumentError as error:
        return render_template("dashboard/schedule_upload.html", preview=None, problems=error, filename=upload_file.filename), 422
    return render_template("dashboard/schedule_upload.html", preview=preview, problems=None, document=text, digest=_digest(text), filename=upload_file.filename)


@bp.get("/semesters/<semester>/calendar")
@sign_in_required(access.SEE_SEMESTER)
def schedule_calendar(semester: str) -> Any:
    """The schedule in force as a calendar: each night's instrument and status, with its note; months as rows of weeks."""
    version = current_schedule(db(), semester)
    if version is None:
        abort(404, description=f"There is no instrument schedule for semester {semester}.")
    schedule = schedule_of(version)
    assert schedule is not None
    nights = {entry.night: entry for entry in schedule.nights}
    dates = sorted(nights)
    months: dict[tuple[int, int], list[list[Any]]] = defaultdict(list)
    if dates:
        day = dates[0].replace(day=1)
        while day <= dates[-1]:
            weeks = months[(day.year, day.month)]
            if not weeks or day.weekday() == 0:
                weeks.append([None] * 7)
            weeks[-1][day.weekday()] = (day, nights.get(day))
            day += timedelta(days=1)
    instruments = sorted({(entry.instrument or "").upper() for entry in schedule.nights if entry.instrument})
    return render_template("dashboard/calendar.html", semester=semester, version=version, months=dict(months), instruments=instruments, month_name=_month_name)


def _dry_run(text: str, user_id: int) -> dict[str, Any]:
    """What storing ``text`` would do, from the real upload in a transaction that is then rolled back."""
    session = session_factory()
    try:
        user = session.get_one(User, user_id)
        upload = upload_schedule(session, text, user)
        return {
            "created": upload.created,
            "semester": upload.version.semester,  # type: ignore[union-attr]
            "version": upload.version.version_label,
            "previous": upload.previous.version_label if upload.previous is not None else None,
            "diff": upload.diff,
            "proposals": sorted(upload.plan.proposals),
            "by_instrument": dict(sorted(upload.plan.by_instrument.items())),
        }
    finally:
        session.rollback()
        session.close()


def _confirm(user: User) -> Any:
    text = request.form.get("document", "")
    if not text or request.form.get("digest") != _digest(text):
        problems = DocumentError([Problem("document", "the previewed document did not come back unchanged; upload it again")], "upload")
        return render_template("dashboard/schedule_upload.html", preview=None, problems=problems), 400
    try:
        with session_scope() as session:
            upload = upload_schedule(session, text, session.get_one(User, user.id))
            semester, label, created, plan = upload.version.semester, upload.version.version_label, upload.created, upload.plan  # type: ignore[union-attr]
    except DocumentError as error:
        return render_template("dashboard/schedule_upload.html", preview=None, problems=error), 422
    dispatch_plan(plan)  # only after the commit
    if created:
        flash(f"Schedule {semester} version {label} stored; {plan.queued} re-check{'s' if plan.queued != 1 else ''} queued.")
    else:
        flash(f"Schedule {semester} version {label} is already in force (same content): nothing stored.")
    return redirect(url_for("dashboard.schedule_changes", semester=semester), code=303)


def _digest(text: str) -> str:
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


def _month_name(year: int, month: int) -> str:
    return date(year, month, 1).strftime("%B %Y")

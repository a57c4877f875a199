"""The dashboard's page of a semester's instrument schedule: what changed, and whose verdicts moved.

Added by the re-check work (feasibility/service/schedule_diff.py, rechecks.py);
it reads stored schedule versions and recorded verdict changes only.
"""

from __future__ import annotations

from datetime import datetime
from typing import Any

from flask import abort, render_template

from feasibility.service import access
from feasibility.service.current import current_schedule, schedule_of
from feasibility.service.recheck_answers import version_answer
from feasibility.service.rechecks import previous_schedule
from feasibility.service.schedule_diff import schedule_diff, schedule_summary
from feasibility.web.admin_api import changes_since
from feasibility.web.auth_pages import current_user, db, sign_in_required
from feasibility.web.dashboard import bp

__all__: list[str] = []

#: Most verdict changes listed on the page.
CHANGES_SHOWN = 50


@bp.get("/semesters/<semester>/schedule")
@sign_in_required(access.READ_SCHEDULES)
def schedule_changes(semester: str) -> Any:
    """The schedule in force, its night-by-night changes from the version before, and the verdicts they moved."""
    session = db()
    version = current_schedule(session, semester)
    if version is None:
        abort(404, description=f"There is no instrument schedule for semester {semester}.")
    previous = previous_schedule(session, version)
    current = schedule_of(version)
    assert current is not None
    diff = schedule_diff(schedule_of(previous), current)
    changes = [c for c in changes_since(session, current_user(), None, limit=CHANGES_SHOWN, semester=semester, newest_first=True) if _moved(c)]
    for change in changes:
        change["recorded"] = datetime.fromisoformat(change["recorded_at"]) if change.get("recorded_at") else None
        change["requests"] = [r for r in change["requests"] if r.get("changed_figures") or r.get("verdict_before") != r.get("verdict_after")]
    return render_template(
        "dashboard/schedule_changes.html",
        semester=semester,
        version=version_answer(version),
        uploaded_at=version.uploaded_at,
        summary=schedule_summary(current),
        previous=version_answer(previous) if previous is not None else None,
        diff=diff,
        changes=changes,
    )


def _moved(change: dict[str, Any]) -> bool:
    """Whether a recorded change moved a verdict or a key figure (a row saying only "feasible → feasible" is noise)."""
    if change.get("verdict_before") != change.get("verdict_after"):
        return True
    return any(r.get("changed_figures") or r.get("verdict_before") != r.get("verdict_after") for r in change.get("requests", []))

"""The dashboard's page of a semester's instrument schedule: what changed, and whose verdicts moved.

Added by the re-check work (feasibility/service/schedule_diff.py, rechecks.py);
it reads stored schedule versions and recorded verdict changes only.
"""

from __future__ import annotations

from typing import Any

from flask import abort, render_template

from feasibility.service.current import current_schedule, schedule_of
from feasibility.service.rechecks import previous_schedule, version_dict
from feasibility.service.schedule_diff import schedule_diff
from feasibility.web.admin_api import changes_since
from feasibility.web.auth_pages import current_user, db, sign_in_required
from feasibility.web.dashboard import bp

__all__: list[str] = []

#: Most verdict changes listed on the page.
CHANGES_SHOWN = 50


@bp.get("/semesters/<semester>/schedule")
@sign_in_required()
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
    changes = changes_since(session, current_user(), None, limit=CHANGES_SHOWN, semester=semester, newest_first=True)
    return render_template(
        "dashboard/schedule_changes.html",
        semester=semester,
        version=version_dict(version),
        previous=version_dict(previous) if previous is not None else None,
        diff=diff,
        changes=changes,
    )

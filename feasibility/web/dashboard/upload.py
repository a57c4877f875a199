"""The proposers' upload page and the page that follows a check run until its verdict is in.

An uploaded file goes through the same submission as the API
(:func:`feasibility.service.submissions.submit`), so a malformed file gets the same
problems (field path and what is wrong); the new run is queued only after the
submission has committed. The run page polls ``status.json`` with a small script
of our own; without scripts it refreshes itself.
"""

from __future__ import annotations

from typing import Any

from flask import abort, current_app, redirect, render_template, request, url_for
from werkzeug.exceptions import RequestEntityTooLarge

from feasibility.documents.loading import DocumentError, DocumentTooLarge, Problem
from feasibility.service import access
from feasibility.service.dispatch import enqueue
from feasibility.service.submissions import NotAllowed, submit
from feasibility.store.db import session_scope
from feasibility.store.models import CheckRun, User
from feasibility.web.auth_pages import current_user, db, sign_in_required
from feasibility.web.dashboard import bp

__all__: list[str] = []


@bp.route("/upload", methods=["GET", "POST"])
@sign_in_required(access.SUBMIT)
def upload() -> Any:
    """The upload form; a valid file becomes a check run and the browser goes to its page."""
    if request.method == "GET":
        return render_template("dashboard/upload.html", problems=None)
    user = current_user()
    assert user is not None
    try:
        upload_file = request.files.get("document")
    except RequestEntityTooLarge:
        too_large = DocumentTooLarge(int(current_app.config["MAX_CONTENT_LENGTH"]), "upload")
        return render_template("dashboard/upload.html", problems=too_large, filename=None), 413
    if upload_file is None or not upload_file.filename:
        problems = DocumentError([Problem("document", "choose a proposal file (JSON or YAML) to upload")], "upload")
        return render_template("dashboard/upload.html", problems=problems, filename=None), 400
    content = upload_file.read()
    try:
        run_id, created = _submit(content, user.id)
    except DocumentError as error:
        status = 413 if isinstance(error, DocumentTooLarge) else 422
        return render_template("dashboard/upload.html", problems=error, filename=upload_file.filename), status
    except NotAllowed as error:
        return render_template("dashboard/upload.html", problems=None, forbidden=str(error), filename=upload_file.filename), 403
    if created:
        enqueue([run_id])  # only after the submission committed
    return redirect(url_for("dashboard.run_page", run_id=run_id), code=303)


@bp.get("/runs/<int:run_id>")
@sign_in_required(access.SEE_PROPOSAL)
def run_page(run_id: int) -> Any:
    """A check run's progress; its verdict when done."""
    run = _visible_run(run_id)
    return render_template("dashboard/run.html", run=run, status=_status(run))


@bp.get("/runs/<int:run_id>/status.json")
@sign_in_required(access.SEE_PROPOSAL)
def run_status(run_id: int) -> dict[str, Any]:
    """The run's state for the polling script."""
    return _status(_visible_run(run_id))


def _submit(content: bytes, user_id: int) -> tuple[int, bool]:
    """Store the submission in its own transaction (the store's write sessions wait for a busy database)."""
    with session_scope() as session:
        user = session.get_one(User, user_id)
        submission = submit(session, content, user)
        session.flush()
        return submission.run.id, submission.created


def _visible_run(run_id: int) -> CheckRun:
    user = current_user()
    assert user is not None
    run = db().get(CheckRun, run_id)
    if run is None or not access.may_see(db(), user, run.proposal_version.proposal):
        abort(404, description="There is no check run with that number that you may see.")
    return run


def _status(run: CheckRun) -> dict[str, Any]:
    proposal_id = run.proposal_version.proposal.proposal_id
    return {
        "run_id": run.id,
        "proposal_id": proposal_id,
        "state": run.state,
        "verdict": run.verdict,
        "finished": run.state in ("done", "failed"),
        "error": "The check could not be completed; the service's staff have the details." if run.state == "failed" else None,
        "requests": [{"label": o.label, "target": o.target, "verdict": o.verdict} for o in run.outcomes],
        "proposal_url": url_for("dashboard.proposal_page", proposal_id=proposal_id, run=run.id),
    }

"""The technical review on the pages: the block on a proposal's page and its forms.

The rules are :mod:`feasibility.service.review`'s, who may do what :mod:`feasibility.service.access`'s; here
forms are read, the service is called, and the answer is a redirect back to the
proposal's page (with the problems named, field by field, when a form is refused).
"""

from __future__ import annotations

from typing import Any

from flask import abort, current_app, flash, redirect, url_for
from flask import request as http_request
from sqlalchemy import select
from werkzeug.wrappers import Response

from feasibility.documents.loading import DocumentError
from feasibility.service import access, review
from feasibility.store.db import session_scope
from feasibility.store.models import ProposalRecord, User
from feasibility.web.auth_pages import current_user, db, sign_in_required
from feasibility.web.dashboard import bp

__all__ = ["page_review", "reviewer_names"]


def page_review(record: ProposalRecord) -> dict[str, Any]:
    """What the proposal page's review block shows the signed-in user (see ``review_block.html``)."""
    user = current_user()
    state = review.review_of(db(), record)
    full = access.may(user, access.READ_REVIEW)
    shown = access.shows_notes(user, observatory_shows=bool(current_app.config.get("REVIEW_NOTES_TO_PROPOSERS")))
    return {
        "state": state,
        "full": full,
        "public": None if full else review.for_proposer(state, show_notes=shown),
        "may_assign": access.may(user, access.ASSIGN),
        "may_note": access.may(user, access.WRITE_NOTE),
        "may_decide": access.may(user, access.DECIDE) and state.engine_verdict is not None,
        "reviewers": reviewer_names() if access.may(user, access.ASSIGN) else [],
        "levels": review.LEVELS,
        "labels": [str(item.get("label")) for item in (record.versions[-1].document or {}).get("requests") or [] if isinstance(item, dict)],
    }


def reviewer_names() -> list[str]:
    """The users who may be assigned as technical reviewers, by name."""
    return list(db().scalars(select(User.name).where(User.role.in_(sorted(access.roles_for(access.BE_REVIEWER)))).order_by(User.name)))


@bp.post("/proposals/<proposal_id>/review/assignment")
@sign_in_required(access.ASSIGN)
def review_assign(proposal_id: str) -> Response:
    """Assign the proposal's technical reviewer (admins)."""
    return _act(proposal_id, lambda s, u, r: review.assign(s, u, r, http_request.form.get("reviewer")), "Reviewer assigned.")


@bp.post("/proposals/<proposal_id>/review/notes")
@sign_in_required(access.WRITE_NOTE)
def review_note(proposal_id: str) -> Response:
    """Add a note to the proposal or one of its requests (reviewers, admins)."""
    form = http_request.form
    return _act(proposal_id, lambda s, u, r: review.add_note(s, u, r, form.get("text"), form.get("request") or None), "Note added.")


@bp.post("/proposals/<proposal_id>/review/decision")
@sign_in_required(access.DECIDE)
def review_decide(proposal_id: str) -> Response:
    """Confirm or override the engine's verdict (reviewers, admins)."""
    form = http_request.form
    verdict = form.get("verdict") or None
    return _act(
        proposal_id,
        lambda s, u, r: review.decide(s, u, r, form.get("decision"), verdict, form.get("reason")),
        "Decision recorded.",
    )


def _act(proposal_id: str, do: Any, done: str) -> Response:
    """Take a review action (allowed by the view's ``sign_in_required``) on a proposal the user may see."""
    user = current_user()
    assert user is not None
    record = db().scalars(select(ProposalRecord).where(ProposalRecord.proposal_id == proposal_id)).first()
    if record is None or not access.may_see(db(), user, record):
        abort(404, description="There is no proposal with that id that you may see.")
    try:
        with session_scope() as session:
            do(session, session.get_one(User, user.id), session.get_one(ProposalRecord, record.id))
    except DocumentError as error:
        for problem in error.problems:
            flash(f"Not recorded: {problem.field + ' ' if problem.field else ''}{problem.message}.")
    else:
        flash(done)
    return redirect(url_for("dashboard.proposal_page", proposal_id=proposal_id) + "#review-heading")

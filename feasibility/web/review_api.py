"""The technical review's API (under /api/v1): assignments, notes, decisions and the audit trail.

The rules live in :mod:`feasibility.service.review`, who may do what in :mod:`feasibility.service.access`;
this module only reads requests and writes answers. Reviewers and admins see the
whole review; a proposer (or a portal) who may read the proposal sees the verdict
that stands and, when ``REVIEW_NOTES_TO_PROPOSERS`` is on, the reviewers' notes.
There are no paths that change or delete anything already written.
"""

from __future__ import annotations

from typing import Any

from flask import Blueprint, abort, current_app, request
from sqlalchemy import select
from sqlalchemy.orm import Session

from feasibility.documents.loading import DocumentError, Problem
from feasibility.service import access, review
from feasibility.store.db import session_scope
from feasibility.store.models import ProposalRecord, User
from feasibility.web.api import _may_read, _readable_proposal
from feasibility.web.auth import current_user, require
from feasibility.web.bodies import problem_status

__all__ = ["bp", "review_json"]

bp = Blueprint("review_api", __name__, url_prefix="/api/v1")


@bp.errorhandler(DocumentError)
def _invalid(error: DocumentError) -> tuple[dict[str, Any], int]:
    return error.as_dict(), problem_status(error)


@bp.errorhandler(access.NotAllowed)
def _forbidden(error: access.NotAllowed) -> tuple[dict[str, Any], int]:
    return {"error": "forbidden", "message": str(error)}, 403


@bp.get("/proposals/<proposal_id>/review")
@require(access.READ_FINAL)
def get_review(proposal_id: str) -> dict[str, Any]:
    """The review: everything for reviewers and admins; the verdict that stands for a proposer who may read the proposal."""
    user = current_user()
    with session_scope(read_only=True) as session:
        record = _readable_proposal(session, proposal_id)
        state = review.review_of(session, record)
        if access.may(user, access.READ_REVIEW):
            return review_json(state)
        shown = access.shows_notes(user, observatory_shows=bool(current_app.config.get("REVIEW_NOTES_TO_PROPOSERS")))
        return review.for_proposer(state, show_notes=shown)


@bp.post("/proposals/<proposal_id>/review/assignment")
@require(access.ASSIGN)
def post_assignment(proposal_id: str) -> dict[str, Any]:
    """Assign a technical reviewer: ``{"reviewer": NAME}`` (admin)."""
    body = _json_body("assignment")
    with session_scope() as session:
        actor, record = _actor_and_record(session, proposal_id)
        review.assign(session, actor, record, body.get("reviewer"))
        return review_json(review.review_of(session, record))


@bp.post("/reviews/assignments")
@require(access.ASSIGN)
def post_bulk_assignment() -> dict[str, Any]:
    """Assign one reviewer to every proposal of a semester using an instrument: ``{"semester", "instrument", "reviewer"}`` (admin)."""
    body = _json_body("assignment")
    with session_scope() as session:
        actor = _actor(session)
        records = review.assign_by_instrument(session, actor, body.get("semester"), body.get("instrument"), body.get("reviewer"))
        return {"reviewer": str(body.get("reviewer")).strip(), "assigned": sorted(r.proposal_id for r in records), "count": len(records)}


@bp.post("/proposals/<proposal_id>/review/notes")
@require(access.WRITE_NOTE)
def post_note(proposal_id: str) -> tuple[dict[str, Any], int]:
    """Add a note: ``{"text": ..., "request": LABEL}`` (``request`` optional; reviewers and admins)."""
    body = _json_body("note")
    with session_scope() as session:
        actor, record = _actor_and_record(session, proposal_id)
        review.add_note(session, actor, record, body.get("text"), body.get("request"))
        return review_json(review.review_of(session, record)), 201


@bp.post("/proposals/<proposal_id>/review/decision")
@require(access.DECIDE)
def post_decision(proposal_id: str) -> tuple[dict[str, Any], int]:
    """Confirm or override the engine's verdict: ``{"decision": "confirm"}`` or ``{"decision": "override", "verdict", "reason"}``."""
    body = _json_body("decision")
    with session_scope() as session:
        actor, record = _actor_and_record(session, proposal_id)
        review.decide(session, actor, record, body.get("decision"), body.get("verdict"), body.get("reason"))
        return review_json(review.review_of(session, record)), 201


def review_json(state: review.Review) -> dict[str, Any]:
    """The whole review as reviewers see it: both verdicts side by side, the decision, notes and trail."""
    decision = state.decision
    return {
        "proposal_id": state.proposal_id,
        "engine_verdict": state.engine_verdict,
        "run_id": state.run_id,
        "reviewer": state.reviewer,
        "final_verdict": state.final_verdict,
        "decided_by": state.decided_by,
        "to_review_again": state.to_review_again,
        "decision": None
        if decision is None
        else {
            "kind": decision.kind,
            "verdict": decision.verdict,
            "engine_verdict": decision.engine_verdict,
            "run_id": decision.run_id,
            "reason": decision.reason,
            "by": decision.reviewer.name,
            "at": _iso(decision.decided_at),
        },
        "notes": [{"request": n.request_label, "text": n.text, "by": n.author.name, "at": _iso(n.written_at)} for n in state.notes],
        "trail": [{"what": t.what, "by": t.who, "at": t.when.isoformat(), "text": t.text, "request": t.request_label} for t in state.trail],
    }


def _json_body(document: str) -> dict[str, Any]:
    body = request.get_json(silent=True)
    if not isinstance(body, dict):
        raise DocumentError([Problem("", "send a JSON object")], document)
    return body


def _actor(session: Session) -> User:
    """The caller (allowed by the view's ``require``), loaded in ``session``; the service checks the action again."""
    user = current_user()
    assert user is not None
    return session.get_one(User, user.id)


def _actor_and_record(session: Session, proposal_id: str) -> tuple[User, ProposalRecord]:
    actor = _actor(session)
    record = session.scalar(select(ProposalRecord).where(ProposalRecord.proposal_id == proposal_id))
    if record is None or not _may_read(session, record):
        abort(404, description=f"no proposal {proposal_id!r}")
    return actor, record


def _iso(moment: Any) -> str:
    return str(moment.isoformat())

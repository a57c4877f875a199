"""Technical review: who reviews a proposal, their notes, and their decision beside the engine's verdict.

The one place for the review's rules; the API and the pages both call it.

- An admin assigns a technical reviewer to a proposal, or to every proposal of a
  semester that uses an instrument. The newest assignment stands.
- Reviewers (and admins) write notes on a proposal or on one observation request.
- A reviewer confirms the engine's verdict or overrides it with a verdict of
  their own and a reason, which is required. The newest decision stands.
- The engine's verdict is always kept beside the reviewer's. A decision records
  the run and engine verdict it was made against; when a later check run gives
  a different verdict, the decision is marked "to review again". An override
  keeps its verdict through re-checks; a confirmation follows the engine.
- Nothing is ever changed or deleted: assignments, notes and decisions are an
  append-only trail of who did what and when (enforced in the store, see
  :data:`feasibility.store.models.APPEND_ONLY`).

Who may do what is decided by :mod:`feasibility.service.access` alone (its table's review actions).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from datetime import datetime
from typing import Any

from sqlalchemy import select
from sqlalchemy.orm import Session

from feasibility.documents.loading import DocumentError, Problem
from feasibility.service import access
from feasibility.store import queries
from feasibility.store.models import ProposalRecord, ReviewAssignment, ReviewDecision, ReviewNote, User
from feasibility.store.standing import standing_run

__all__ = [
    "LEVELS",
    "NOTE_MAX_CHARS",
    "Review",
    "TrailEntry",
    "add_note",
    "assign",
    "assign_by_instrument",
    "decide",
    "for_proposer",
    "review_of",
]

LEVELS = ("feasible", "marginal", "unchecked", "infeasible")
#: The longest note or reason kept, in characters.
NOTE_MAX_CHARS = 5000


@dataclass
class TrailEntry:
    """One line of the audit trail: what was done, by whom, when, and its text."""

    what: str
    who: str
    when: datetime
    text: str
    request_label: str | None = None


@dataclass
class Review:
    """A proposal's review as it stands, with the engine's verdict beside it and the whole trail."""

    proposal_id: str
    engine_verdict: str | None
    run_id: int | None
    reviewer: str | None
    decision: ReviewDecision | None
    notes: list[ReviewNote] = field(default_factory=list)
    trail: list[TrailEntry] = field(default_factory=list)

    @property
    def to_review_again(self) -> bool:
        """The decision was made against an engine verdict that a later check run changed."""
        return self.decision is not None and self.engine_verdict is not None and self.decision.engine_verdict != self.engine_verdict

    @property
    def final_verdict(self) -> str | None:
        """The verdict that stands: an override's verdict, else the engine's."""
        if self.decision is not None and self.decision.kind == "override":
            return self.decision.verdict
        return self.engine_verdict

    @property
    def decided_by(self) -> str:
        """Who made the verdict that stands: the reviewer (override) or the engine."""
        return "reviewer" if self.decision is not None and self.decision.kind == "override" else "engine"


def review_of(session: Session, record: ProposalRecord) -> Review:
    """The proposal's review as it stands now (engine verdict from its standing run, feasibility.store.standing)."""
    run = standing_run(session, record)
    assignments = list(session.scalars(select(ReviewAssignment).where(ReviewAssignment.proposal_ref == record.id).order_by(ReviewAssignment.id)))
    notes = list(session.scalars(select(ReviewNote).where(ReviewNote.proposal_ref == record.id).order_by(ReviewNote.id)))
    decisions = list(session.scalars(select(ReviewDecision).where(ReviewDecision.proposal_ref == record.id).order_by(ReviewDecision.id)))
    trail = [TrailEntry("assigned", a.assigner.name, a.assigned_at, f"reviewer: {a.reviewer.name}") for a in assignments]
    trail += [TrailEntry("note", n.author.name, n.written_at, n.text, n.request_label) for n in notes]
    trail += [
        TrailEntry(
            "confirmed" if d.kind == "confirm" else "overridden",
            d.reviewer.name,
            d.decided_at,
            (f"engine {d.engine_verdict} (run #{d.run_id}) → {d.verdict}" + (f": {d.reason}" if d.reason else "")),
        )
        for d in decisions
    ]
    trail.sort(key=lambda entry: entry.when)
    return Review(
        proposal_id=record.proposal_id,
        engine_verdict=run.verdict if run is not None else None,
        run_id=run.id if run is not None else None,
        reviewer=assignments[-1].reviewer.name if assignments else None,
        decision=decisions[-1] if decisions else None,
        notes=notes,
        trail=trail,
    )


def assign(session: Session, actor: User, record: ProposalRecord, reviewer_name: Any) -> ReviewAssignment:
    """Make ``reviewer_name`` the proposal's technical reviewer (a new row; the earlier ones stay)."""
    access.check(actor, access.ASSIGN)
    reviewer = _reviewer(session, reviewer_name)
    row = ReviewAssignment(proposal_ref=record.id, reviewer_id=reviewer.id, assigned_by=actor.id)
    session.add(row)
    session.flush()
    return row


def assign_by_instrument(session: Session, actor: User, semester: Any, instrument: Any, reviewer_name: Any) -> list[ProposalRecord]:
    """Assign ``reviewer_name`` to every proposal of ``semester`` whose latest version uses ``instrument``; those proposals."""
    access.check(actor, access.ASSIGN)
    problems = []
    if not isinstance(semester, str) or not semester.strip():
        problems.append(Problem("semester", "is required (text, e.g. 2027A)"))
    if not isinstance(instrument, str) or not instrument.strip():
        problems.append(Problem("instrument", "is required (an instrument's name)"))
    reviewer, reviewer_problem = _find_reviewer(session, reviewer_name)
    if reviewer_problem:
        problems.append(reviewer_problem)
    if problems:
        raise DocumentError(problems, "assignment")
    assert reviewer is not None
    records: list[ProposalRecord] = []
    offset = 0
    while True:
        rows, _ = queries.list_proposals(session, semester=semester, instrument=instrument.strip(), offset=offset, limit=200)
        records += [row.proposal for row in rows]
        if len(rows) < 200:
            break
        offset += 200
    for record in records:
        session.add(ReviewAssignment(proposal_ref=record.id, reviewer_id=reviewer.id, assigned_by=actor.id))
    session.flush()
    return records


def add_note(session: Session, actor: User, record: ProposalRecord, text: Any, request_label: Any = None) -> ReviewNote:
    """Add a note to the proposal, or to its observation request ``request_label`` (a label of its latest version)."""
    access.check(actor, access.WRITE_NOTE)
    problems: list[Problem] = []
    clean = _text(text, "text", problems, required=True)
    label = None
    if request_label not in (None, ""):
        labels = _request_labels(session, record)
        if not isinstance(request_label, str) or request_label not in labels:
            problems.append(Problem("request", f"must be the label of one of the proposal's observation requests ({', '.join(labels) or 'none'})"))
        else:
            label = request_label
    if problems:
        raise DocumentError(problems, "note")
    note = ReviewNote(proposal_ref=record.id, request_label=label, author_id=actor.id, text=clean)
    session.add(note)
    session.flush()
    return note


def decide(session: Session, actor: User, record: ProposalRecord, decision: Any, verdict: Any = None, reason: Any = None) -> ReviewDecision:
    """Confirm the engine's verdict (``decision="confirm"``) or override it (``"override"`` with a verdict and a reason)."""
    access.check(actor, access.DECIDE)
    problems: list[Problem] = []
    run = standing_run(session, record)
    if run is None or run.verdict is None:
        problems.append(Problem("", "the proposal has no finished check run yet: there is no engine verdict to confirm or override"))
    if decision not in ("confirm", "override"):
        problems.append(Problem("decision", "must be 'confirm' or 'override'"))
    clean_reason = _text(reason, "reason", problems, required=decision == "override")
    if decision == "override":
        if verdict not in LEVELS:
            problems.append(Problem("verdict", f"must be one of {', '.join(LEVELS)}"))
        elif run is not None and verdict == run.verdict:
            problems.append(Problem("verdict", f"is the engine's verdict already ({verdict}); confirm it instead"))
    elif decision == "confirm" and verdict not in (None, "") and run is not None and verdict != run.verdict:
        problems.append(Problem("verdict", f"differs from the engine's verdict ({run.verdict}); override it instead"))
    if problems:
        raise DocumentError(problems, "decision")
    assert run is not None and run.verdict is not None
    row = ReviewDecision(
        proposal_ref=record.id,
        reviewer_id=actor.id,
        kind=decision,
        verdict=verdict if decision == "override" else run.verdict,
        engine_verdict=run.verdict,
        run_id=run.id,
        reason=clean_reason,
    )
    session.add(row)
    session.flush()
    return row


def for_proposer(review: Review, *, show_notes: bool) -> dict[str, Any]:
    """What a proposer (or their portal) is told: the verdict that stands and, when the observatory chooses, the notes."""
    answer: dict[str, Any] = {
        "proposal_id": review.proposal_id,
        "verdict": review.final_verdict,
        "reviewed": review.decision is not None,
    }
    if show_notes:
        answer["notes"] = [{"request": n.request_label, "text": n.text, "written_at": n.written_at.isoformat()} for n in review.notes]
    return answer


# --- helpers -------------------------------------------------------------------------------


def _reviewer(session: Session, name: Any) -> User:
    reviewer, problem = _find_reviewer(session, name)
    if problem is not None:
        raise DocumentError([problem], "assignment")
    assert reviewer is not None
    return reviewer


def _find_reviewer(session: Session, name: Any) -> tuple[User | None, Problem | None]:
    if not isinstance(name, str) or not name.strip():
        return None, Problem("reviewer", "is required (a reviewer's user name)")
    user = session.scalar(select(User).where(User.name == name.strip()))
    if user is None:
        return None, Problem("reviewer", f"no user named {name.strip()!r}")
    if not access.may(user, access.BE_REVIEWER):
        return None, Problem("reviewer", f"{user.name!r} is a {user.role}; only {access.roles_text(access.BE_REVIEWER)} can review")
    return user, None


def _text(value: Any, name: str, problems: list[Problem], *, required: bool) -> str | None:
    if value is None or (isinstance(value, str) and not value.strip()):
        if required:
            problems.append(Problem(name, "is required (some text)"))
        return None
    if not isinstance(value, str):
        problems.append(Problem(name, "must be text"))
        return None
    if len(value) > NOTE_MAX_CHARS:
        problems.append(Problem(name, f"is {len(value)} characters long; at most {NOTE_MAX_CHARS}"))
        return None
    return value.strip()


def _request_labels(session: Session, record: ProposalRecord) -> list[str]:
    document = queries.latest_version(session, record).document or {}
    return [str(item.get("label")) for item in document.get("requests") or [] if isinstance(item, dict) and item.get("label") is not None]

"""Who may do what: the one table of roles and actions, and the one rule of which proposals a user sees.

Every face asks here: the API (:func:`feasibility.web.auth.require`), the pages
(:func:`feasibility.web.auth_pages.sign_in_required`), the exports, the technical
review, submissions and the webhook notices. Nothing else names a role.

:data:`TABLE` says which roles may take each action. Actions on one proposal
(see it, its runs, results and findings, its review) also need the proposal to be
visible to the user (:func:`visible_to`): every proposal for the roles of
:data:`SEE_EVERY_PROPOSAL`; for the others only their own — proposals they own
(:data:`OWN_PROPOSALS`) or proposals they submitted a version of
(:data:`SEE_SUBMITTED`). A proposal not visible is answered as if it did not exist,
so nothing leaks about it.

A technical reviewer is an assignment (:mod:`feasibility.service.review`), not a
role: any user of a :data:`BE_REVIEWER` role may be assigned, and the assignment
adds no rights beyond the role's.
"""

from __future__ import annotations

from collections.abc import Sequence

from sqlalchemy import ColumnElement, exists, false, or_, select, true
from sqlalchemy.orm import Session, aliased

from feasibility.store.models import ProposalRecord, ProposalVersion, User

__all__ = [
    "ACTIONS",
    "ASK_SIMULATION",
    "ASSIGN",
    "BE_REVIEWER",
    "DECIDE",
    "MANAGE_ACCESS",
    "MANAGE_VERSIONS",
    "MANAGE_WEBHOOKS",
    "NotAllowed",
    "OWN_PROPOSALS",
    "READ_FINAL",
    "READ_NOTES_IF_SHOWN",
    "READ_REVIEW",
    "READ_SCHEDULES",
    "RECEIVE_NOTICES",
    "RECHECK",
    "REVIEW_ACTIONS",
    "ROLES",
    "SEE_CHANGES",
    "SEE_EVERY_PROPOSAL",
    "SEE_PROPOSAL",
    "SEE_SEMESTER",
    "SEE_SUBMITTED",
    "SUBMIT",
    "SUBMIT_ON_BEHALF",
    "SUBMIT_TO_ANY",
    "TABLE",
    "USE_PAGES",
    "WRITE_NOTE",
    "check",
    "check_new_version",
    "may",
    "may_see",
    "new_version_refusals",
    "notice_recipients",
    "refusal",
    "roles_for",
    "roles_text",
    "shows_notes",
    "takes_ownership",
    "visible_to",
]

ROLES = ("reviewer", "proposer", "portal", "admin")

USE_PAGES = "use_pages"
SEE_PROPOSAL = "see_proposal"
SEE_EVERY_PROPOSAL = "see_every_proposal"
OWN_PROPOSALS = "own_proposals"
SEE_SUBMITTED = "see_submitted"
SUBMIT = "submit"
SUBMIT_ON_BEHALF = "submit_on_behalf"
SUBMIT_TO_ANY = "submit_to_any"
SEE_CHANGES = "see_changes"
READ_SCHEDULES = "read_schedules"
SEE_SEMESTER = "see_semester"
ASK_SIMULATION = "ask_simulation"
MANAGE_VERSIONS = "manage_versions"
RECHECK = "recheck"
MANAGE_ACCESS = "manage_access"
MANAGE_WEBHOOKS = "manage_webhooks"
RECEIVE_NOTICES = "receive_notices"
ASSIGN = "assign"
BE_REVIEWER = "be_reviewer"
WRITE_NOTE = "write_note"
DECIDE = "decide"
READ_REVIEW = "read_review"
READ_FINAL = "read_final"
READ_NOTES_IF_SHOWN = "read_notes_if_shown"

_ALL = frozenset(ROLES)
_STAFF = frozenset({"reviewer", "admin"})
_ADMIN = frozenset({"admin"})

#: Who may do what: action -> the roles allowed. The one table of the service's access rules.
TABLE: dict[str, frozenset[str]] = {
    USE_PAGES: frozenset({"reviewer", "proposer", "admin"}),  # sign in to the pages (portals use API tokens only)
    SEE_PROPOSAL: _ALL,  # a proposal visible to them: versions, runs, results, findings, plots, report (page, PDF)
    SEE_EVERY_PROPOSAL: _STAFF,  # every proposal, not only their own: lists, exports (CSV, JSON) and changes
    OWN_PROPOSALS: frozenset({"proposer"}),  # own what they (or a portal for them) submit; see those
    SEE_SUBMITTED: frozenset({"portal"}),  # see the proposals they submitted a version of
    SUBMIT: frozenset({"proposer", "portal", "admin"}),  # submit proposals and new versions (API, upload page)
    SUBMIT_ON_BEHALF: frozenset({"portal", "admin"}),  # name the proposer a submission is for (?on_behalf_of)
    SUBMIT_TO_ANY: _ADMIN,  # add a version to any proposal, not only their own
    SEE_CHANGES: _ALL,  # recorded verdict changes (of the proposals visible to them)
    READ_SCHEDULES: _ALL,  # the instrument schedules, their versions and changes, the observatory description
    SEE_SEMESTER: _STAFF,  # the semester overview, its tables and plots, the calendar, the packet PDF, simulations
    ASK_SIMULATION: _STAFF,  # ask for a semester simulation (chance of completion)
    MANAGE_VERSIONS: _ADMIN,  # upload instrument schedules and observatory descriptions
    RECHECK: _ADMIN,  # queue the re-checks now
    MANAGE_ACCESS: _ADMIN,  # list and revoke tokens, set passwords
    MANAGE_WEBHOOKS: _ADMIN,  # set or remove a user's webhook
    RECEIVE_NOTICES: frozenset({"proposer", "portal", "admin"}),  # webhook notices of their own proposals' changes
    ASSIGN: _ADMIN,  # name a proposal's technical reviewer
    BE_REVIEWER: _STAFF,  # be assigned as a technical reviewer
    WRITE_NOTE: _STAFF,  # add a note to a proposal or an observation request
    DECIDE: _STAFF,  # confirm or override the engine's verdict
    READ_REVIEW: _STAFF,  # the whole review: decision, reason, notes, trail
    READ_FINAL: _ALL,  # the verdict that stands (of a proposal visible to them)
    READ_NOTES_IF_SHOWN: frozenset({"proposer", "portal"}),  # the reviewers' notes, when the observatory shows them
}
ACTIONS = tuple(TABLE)
#: The technical review's actions (feasibility.service.review).
REVIEW_ACTIONS = (ASSIGN, WRITE_NOTE, DECIDE, READ_REVIEW, READ_FINAL)


class NotAllowed(PermissionError):
    """The user may not take this action (or not on this proposal)."""


def roles_for(action: str) -> frozenset[str]:
    """The roles allowed to take ``action``."""
    return TABLE[action]


def may(user: User | str | None, action: str) -> bool:
    """Whether ``user`` (or a role by name) may take ``action``; nobody may do anything."""
    role = user.role if isinstance(user, User) else user
    return role is not None and role in TABLE[action]


def roles_text(action: str) -> str:
    """The roles allowed to take ``action``, in words: "a reviewer or an admin"."""
    return " or ".join(f"{'an' if role[0] in 'aeiou' else 'a'} {role}" for role in ROLES if role in TABLE[action])


def refusal(user: User | None, action: str) -> str:
    """Why ``user`` may not take ``action``, in one sentence."""
    role = user.role if user is not None else "nobody"
    return f"the role {role!r} may not {action.replace('_', ' ')} (only {roles_text(action)} may)"


def check(user: User | None, action: str) -> None:
    """Raise :class:`NotAllowed` unless ``user`` may take ``action``."""
    if not may(user, action):
        raise NotAllowed(refusal(user, action))


def visible_to(user: User | None) -> ColumnElement[bool]:
    """The SQL condition on ``ProposalRecord`` for the proposals ``user`` may see (none for nobody)."""
    if user is None or not may(user, SEE_PROPOSAL):
        return false()
    if may(user, SEE_EVERY_PROPOSAL):
        return true()
    own: list[ColumnElement[bool]] = []
    if may(user, OWN_PROPOSALS):
        own.append(ProposalRecord.owner_id == user.id)
    if may(user, SEE_SUBMITTED):
        # An alias of its own: a list that selects ProposalVersion too would otherwise correlate
        # it away and leave the EXISTS with no FROM at all.
        submitted = aliased(ProposalVersion, name="submitted_version")
        own.append(exists().where(submitted.proposal_ref == ProposalRecord.id, submitted.submitted_by == user.id).correlate(ProposalRecord))
    return or_(*own) if own else false()


def may_see(session: Session, user: User | None, record: ProposalRecord) -> bool:
    """Whether ``user`` may see the proposal ``record`` (:func:`visible_to` asked of one row)."""
    if user is None:
        return False
    if may(user, SEE_EVERY_PROPOSAL):
        return may(user, SEE_PROPOSAL)
    return session.scalar(select(ProposalRecord.id).where(ProposalRecord.id == record.id, visible_to(user))) is not None


def takes_ownership(submitted_by: User | None, on_behalf_of: User | None) -> User | None:
    """The owner a new proposal gets: the proposer named for it, else its submitter when their role owns proposals."""
    if on_behalf_of is None and submitted_by is not None and may(submitted_by, OWN_PROPOSALS):
        return submitted_by
    return on_behalf_of


def check_new_version(session: Session, record: ProposalRecord, user: User | None, owner: User | None) -> None:
    """Raise :class:`NotAllowed` unless ``user`` may add a version to the existing proposal ``record`` (see :func:`new_version_refusals`)."""
    refusal = new_version_refusals(session, [record], user, owner).get(record.id)
    if refusal is not None:
        raise refusal


def new_version_refusals(session: Session, records: Sequence[ProposalRecord], user: User | None, owner: User | None) -> dict[int, NotAllowed]:
    """Why ``user`` may not add a version to each of the existing proposals ``records`` that it may not, by record id.

    The service itself (no user: the command line, re-checks) and :data:`SUBMIT_TO_ANY`
    roles add to any proposal; an owning role only to proposals it owns; a portal only to
    proposals it alone submitted — and the proposer it names must be the owner (an unowned
    proposal is given to them here). One query for any number of records (who submitted their versions).
    """
    if user is None or may(user, SUBMIT_TO_ANY) or not records:
        return {}
    by_others: set[int] = set()
    if may(user, SUBMIT) and not may(user, OWN_PROPOSALS) and may(user, SEE_SUBMITTED):
        others = or_(ProposalVersion.submitted_by.is_(None), ProposalVersion.submitted_by != user.id)
        query = select(ProposalVersion.proposal_ref).where(ProposalVersion.proposal_ref.in_([r.id for r in records]), others).distinct()
        by_others = set(session.scalars(query))
    refusals: dict[int, NotAllowed] = {}
    for record in records:
        try:
            _check_new_version(record, user, owner, submitted_by_others=record.id in by_others)
        except NotAllowed as refusal:
            refusals[record.id] = refusal
    return refusals


def _check_new_version(record: ProposalRecord, user: User, owner: User | None, *, submitted_by_others: bool) -> None:
    check(user, SUBMIT)
    if may(user, OWN_PROPOSALS):
        if record.owner_id != user.id:
            raise NotAllowed(f"proposal {record.proposal_id!r} belongs to another user")
    elif may(user, SEE_SUBMITTED):
        if submitted_by_others:
            raise NotAllowed(f"proposal {record.proposal_id!r} was submitted by another user")
        if owner is not None:
            if record.owner_id is None:
                record.owner_id = owner.id
            elif record.owner_id != owner.id:
                raise NotAllowed(f"proposal {record.proposal_id!r} belongs to another proposer")
    else:
        raise NotAllowed(f"proposal {record.proposal_id!r} is not yours to change")


def notice_recipients(proposal_ref: int) -> ColumnElement[bool]:
    """The SQL condition on ``User`` for who is told of a change to the proposal: its owner and its submitters, by role."""
    submitters = select(ProposalVersion.submitted_by).where(ProposalVersion.proposal_ref == proposal_ref)
    owner = select(ProposalRecord.owner_id).where(ProposalRecord.id == proposal_ref)
    return User.role.in_(sorted(TABLE[RECEIVE_NOTICES])) & (User.id.in_(submitters) | User.id.in_(owner))


def shows_notes(user: User | None, *, observatory_shows: bool) -> bool:
    """Whether ``user`` sees the reviewers' notes: the whole review's readers always, others when the observatory chooses."""
    return may(user, READ_REVIEW) or (observatory_shows and may(user, READ_NOTES_IF_SHOWN))

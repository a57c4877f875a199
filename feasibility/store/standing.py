"""Which check run's verdict stands for a proposal, and which run it is compared with: the one rule.

The standing run of a proposal is, among its finished runs (state ``done``):

1. those of its **newest version that has a finished run** (the highest proposal
   version id): a reviewer judges the version the proposer submitted last. While
   that version's own run is still queued or running (or failed), the previous
   version's verdict stands; the pages mark the proposal as pending meanwhile;
2. among those, the run **queued last** (the highest run id). A run is made with
   the observatory description, schedule and engine in force when it is queued,
   and each upload of those is a new row with a higher id, so the run queued last
   was checked against the newest inputs.

Finishing time plays no part: a re-check of an old version queued before a new
version was submitted may finish after the new version's run (the new submission
runs first, at a higher priority), and must not take its place.

Known limit: submitting again a document identical to an older version finds that
older version (the content hash is unique per proposal), so the "newest version"
is the newest *different* document, as in every proposal list.

Runs are ordered by :data:`ORDER` (newest first): the standing run is the first
finished one, and "the run before" a finished run (for the list's "changed"
column, the run history and the change notices) is the next finished one.
"""

from __future__ import annotations

from typing import Any

from sqlalchemy import and_, exists, or_, select
from sqlalchemy.orm import Session

from feasibility.store.models import CheckRun, ProposalRecord, ProposalVersion

__all__ = ["ORDER", "is_standing", "run_before", "sort_key", "standing_run", "standing_run_id", "unindexed"]

#: Newest first: the proposal version, then the run queued last.
ORDER = (CheckRun.proposal_version_id.desc(), CheckRun.id.desc())


def sort_key(run: CheckRun) -> tuple[int, int]:
    """The same order in Python, oldest first: ``max(done_runs, key=sort_key)`` is the standing run."""
    return (run.proposal_version_id, run.id)


def standing_run_id(position: int = 0) -> Any:
    """A scalar subquery correlated to ``ProposalRecord``: the id of its standing run (``position`` 0) or the one before (1).

    It walks the indexes (the proposal's versions, then their runs), so a list
    page costs a few index look-ups per proposal; NULL when there is no such run.
    """
    return (
        select(CheckRun.id)
        .join(ProposalVersion, ProposalVersion.id == CheckRun.proposal_version_id)
        .where(ProposalVersion.proposal_ref == ProposalRecord.id, unindexed(CheckRun.state) == "done")
        .order_by(*ORDER)
        .limit(1)
        .offset(position)
        .correlate(ProposalRecord)
        .scalar_subquery()
    )


def standing_run(session: Session, proposal: ProposalRecord) -> CheckRun | None:
    """The proposal's standing run (its verdict is the proposal's), or None before any run finished."""
    query = _done_runs_of(ProposalVersion.proposal_ref == proposal.id).order_by(*ORDER).limit(1)
    return session.scalars(query).first()


def is_standing(session: Session, run: CheckRun) -> bool:
    """Whether finished ``run`` is its proposal's standing run (no finished run of the proposal comes after it)."""
    later = _done_runs_of(ProposalVersion.proposal_ref == _proposal_of(run)).where(_after(run))
    return not session.scalar(select(exists(later)))


def run_before(session: Session, run: CheckRun) -> CheckRun | None:
    """The proposal's finished run just before ``run`` in the standing order, or None."""
    query = _done_runs_of(ProposalVersion.proposal_ref == _proposal_of(run)).where(CheckRun.id != run.id, ~_after(run)).order_by(*ORDER).limit(1)
    return session.scalars(query).first()


def unindexed(column: Any) -> Any:
    """``column || ''``: the same value, but SQLite will not pick the column's own index for the term.

    Without table statistics SQLite takes an equality on an indexed column (``state = 'done'``,
    ``check = 'moon'``) as the best way in, and so scans every finished run or every finding
    of a check once per proposal. Hiding those terms from the planner (the SQLite query
    optimizer overview, "disqualifying WHERE clause terms") makes it follow the proposal's
    versions, runs and outcomes through their foreign-key indexes instead.
    """
    return column.concat("")


def _done_runs_of(condition: Any) -> Any:
    return select(CheckRun).join(ProposalVersion, ProposalVersion.id == CheckRun.proposal_version_id).where(condition, CheckRun.state == "done")


def _proposal_of(run: CheckRun) -> Any:
    return select(ProposalVersion.proposal_ref).where(ProposalVersion.id == run.proposal_version_id).scalar_subquery()


def _after(run: CheckRun) -> Any:
    """Runs later than ``run`` in the standing order."""
    return or_(
        CheckRun.proposal_version_id > run.proposal_version_id,
        and_(CheckRun.proposal_version_id == run.proposal_version_id, CheckRun.id > run.id),
    )

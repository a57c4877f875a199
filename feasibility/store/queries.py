"""The queries the API and dashboard need: proposals by semester, verdict, instrument and check.

A proposal's verdict is that of its standing run (:mod:`feasibility.store.standing`,
the one rule); its status is that of its latest run.
"""

from __future__ import annotations

from dataclasses import dataclass

from sqlalchemy import ColumnElement, Select, Subquery, exists, func, select
from sqlalchemy.orm import Session

from feasibility.store.models import CheckRun, FindingRow, ProposalRecord, ProposalVersion, RequestOutcome
from feasibility.store.standing import standing_run_id

__all__ = [
    "ProposalRow",
    "latest_run",
    "latest_version",
    "list_proposals",
    "runs_of",
]


@dataclass
class ProposalRow:
    """One line of a proposal list: the proposal, its latest version and its standing run (if any)."""

    proposal: ProposalRecord
    version: ProposalVersion
    run: CheckRun | None


def list_proposals(
    session: Session,
    *,
    visible: ColumnElement[bool] | None = None,
    semester: str | None = None,
    verdict: str | None = None,
    instrument: str | None = None,
    failed_check: str | None = None,
    offset: int = 0,
    limit: int = 50,
) -> tuple[list[ProposalRow], int]:
    """A page of proposals matching the filters, newest first, and how many match in all.

    ``failed_check`` keeps proposals whose standing verdict has a finding of that
    check worse than feasible; ``instrument`` those whose latest version uses it.
    ``visible`` is who-sees-what's condition (:func:`feasibility.service.access.visible_to`);
    without it every proposal is listed (the service's own use).
    """
    newest = _latest_versions()
    query: Select = (
        select(ProposalRecord, ProposalVersion, CheckRun)
        .join(newest, newest.c.proposal_ref == ProposalRecord.id)
        .join(ProposalVersion, ProposalVersion.id == newest.c.version_id)
        .outerjoin(CheckRun, CheckRun.id == standing_run_id())
    )
    if visible is not None:
        query = query.where(visible)
    if semester:
        query = query.where(ProposalRecord.semester == semester)
    if verdict:
        query = query.where(CheckRun.verdict == verdict)
    if instrument:
        # instruments are stored comma-separated, sorted; match a whole name
        joined = "," + ProposalVersion.instruments + ","
        query = query.where(joined.contains(f",{instrument},"))
    if failed_check:
        query = query.where(
            exists()
            .where(RequestOutcome.run_id == CheckRun.id, FindingRow.outcome_id == RequestOutcome.id)
            .where(FindingRow.check == failed_check, FindingRow.level != "feasible")
        )
    total = session.scalar(select(func.count()).select_from(query.order_by(None).subquery())) or 0
    rows = session.execute(query.order_by(ProposalRecord.id.desc()).offset(offset).limit(limit)).all()
    return [ProposalRow(p, v, r) for p, v, r in rows], int(total)


def latest_version(session: Session, proposal: ProposalRecord) -> ProposalVersion:
    """The proposal's newest version."""
    query = select(ProposalVersion).where(ProposalVersion.proposal_ref == proposal.id).order_by(ProposalVersion.id.desc())
    return session.scalars(query.limit(1)).one()


def latest_run(session: Session, proposal: ProposalRecord) -> CheckRun | None:
    """The proposal's most recent check run, in any state."""
    return session.scalars(_runs(proposal).order_by(CheckRun.id.desc()).limit(1)).first()


def runs_of(session: Session, proposal: ProposalRecord, *, offset: int = 0, limit: int = 100) -> list[CheckRun]:
    """The proposal's check runs, newest first."""
    return list(session.scalars(_runs(proposal).order_by(CheckRun.id.desc()).offset(offset).limit(limit)))


def _runs(proposal: ProposalRecord) -> Select:
    return select(CheckRun).join(ProposalVersion, CheckRun.proposal_version_id == ProposalVersion.id).where(ProposalVersion.proposal_ref == proposal.id)


def _latest_versions() -> Subquery:
    return (
        select(ProposalVersion.proposal_ref.label("proposal_ref"), func.max(ProposalVersion.id).label("version_id"))
        .group_by(ProposalVersion.proposal_ref)
        .subquery("latest_version")
    )

"""The proposal list as one SQL query: standing check per proposal, filters, search, sorting and paging.

Everything is done by the database (correlated subqueries for the standing run and
the run before it, ``LIMIT``/``OFFSET`` for pages), so a semester of thousands
of proposals costs one page of rows in Python. Only stored results are read.
"""

from __future__ import annotations

from collections.abc import Generator
from dataclasses import dataclass, field
from datetime import datetime
from typing import Any

from sqlalchemy import Select, and_, case, exists, func, literal, or_, select
from sqlalchemy.orm import Session, aliased

from feasibility.service.access import visible_to
from feasibility.store.models import CheckRun, FindingRow, ProposalRecord, ProposalVersion, RequestOutcome, User
from feasibility.store.standing import standing_run_id, unindexed

__all__ = [
    "CHECK_NAMES",
    "LEVELS",
    "ListQuery",
    "ProposalRow",
    "SORT_KEYS",
    "count_rows",
    "iter_rows",
    "list_rows",
    "semesters",
]

#: Verdict levels, best to worst (feasibility.results.Level order).
LEVELS = ("feasible", "marginal", "unchecked", "infeasible")
#: The checks named in the project's vocabulary, offered in the "check with a problem" filter.
CHECK_NAMES = ("visibility", "moon", "sensitivity", "instrument", "schedule", "sun-safety", "atmosphere", "image-quality", "motion")
#: Sortable columns, in the list's order: URL name -> label.
SORT_KEYS = {
    "id": "Proposal",
    "verdict": "Verdict",
    "title": "Title",
    "pi": "Principal investigator",
    "instruments": "Instruments",
    "hours": "Hours requested",
    "checked": "Last checked",
    "changed": "Changed",
    "failing": "First failing check",
    "pressure": "Needed ÷ requested",
}
MAX_PER_PAGE = 200


@dataclass(frozen=True)
class ListQuery:
    """What the reviewer asked for: semester, filters, search, sort and page."""

    semester: str
    verdict: str | None = None
    instrument: str | None = None
    check: str | None = None
    search: str | None = None
    sort: str = "id"
    descending: bool = False
    page: int = 1
    per_page: int = 50

    @classmethod
    def from_args(cls, args: Any, semester: str) -> ListQuery:
        """Read (and clamp) the list's query-string arguments; unknown values are ignored, not errors."""
        verdict = args.get("verdict") or None
        if verdict not in (*LEVELS, "none", None):
            verdict = None
        check = args.get("check") or None
        if check not in (*CHECK_NAMES, None):
            check = None
        sort = args.get("sort", "id")
        if sort not in SORT_KEYS:
            sort = "id"
        return cls(
            semester=semester,
            verdict=verdict,
            instrument=(args.get("instrument") or "").strip()[:100] or None,
            check=check,
            search=(args.get("q") or "").strip()[:200] or None,
            sort=sort,
            descending=args.get("dir") == "desc",
            page=max(_int(args.get("page"), 1), 1),
            per_page=min(max(_int(args.get("per_page"), 50), 1), MAX_PER_PAGE),
        )

    def args(self, **changes: Any) -> dict[str, Any]:
        """The query-string arguments that give this list again, with ``changes`` applied (for links)."""
        values = {
            "semester": self.semester,
            "verdict": self.verdict,
            "instrument": self.instrument,
            "check": self.check,
            "q": self.search,
            "sort": self.sort,
            "dir": "desc" if self.descending else "asc",
            "page": self.page,
            "per_page": self.per_page,
        }
        values.update(changes)
        return {key: value for key, value in values.items() if value not in (None, "")}


@dataclass
class ProposalRow:
    """One line of the list."""

    proposal_id: str
    semester: str
    title: str
    pi_name: str
    instruments: list[str]
    hours_requested: float
    verdict: str | None
    checked_at: datetime | None
    previous_verdict: str | None
    run_id: int | None
    pending: bool = False
    targets: list[str] = field(default_factory=list)
    failing_check: str | None = None
    needed_ratio: float | None = None
    """Hours needed over hours requested, summed over the standing run's requests (None when a goal cannot be reached)."""

    @property
    def changed(self) -> bool:
        """Whether the standing verdict differs from that of the finished run before it (feasibility.store.standing)."""
        return self.previous_verdict is not None and self.verdict is not None and self.previous_verdict != self.verdict

    def as_dict(self) -> dict[str, Any]:
        """The row for the JSON export."""
        return {
            "proposal_id": self.proposal_id,
            "semester": self.semester,
            "title": self.title,
            "principal_investigator": self.pi_name,
            "instruments": self.instruments,
            "hours_requested": self.hours_requested,
            "verdict": self.verdict,
            "last_checked": self.checked_at.isoformat() if self.checked_at else None,
            "previous_verdict": self.previous_verdict,
            "verdict_changed": self.changed,
            "run_id": self.run_id,
            "first_failing_check": self.failing_check,
            "hours_needed_over_requested": None if self.needed_ratio is None else round(self.needed_ratio, 3),
        }


def list_rows(session: Session, user: User, query: ListQuery) -> list[ProposalRow]:
    """One page of the list."""
    statement = _ordered(query).limit(query.per_page).offset((query.page - 1) * query.per_page)
    return [_row(values) for values in session.execute(_filtered(user, query, statement))]


def iter_rows(session: Session, user: User, query: ListQuery) -> Generator[ProposalRow]:
    """Every row of the filtered list, in order (for the exports), fetched in batches.

    Close the iterator when stopping early (``contextlib.closing``): that closes the
    batch cursor (a server-side cursor on PostgreSQL) at once.
    """
    statement = _filtered(user, query, _ordered(query)).execution_options(yield_per=500)
    with session.execute(statement) as result:
        for values in result:
            yield _row(values)


def count_rows(session: Session, user: User, query: ListQuery) -> int:
    """How many proposals the filters leave."""
    inner = _filtered(user, query, _base()).subquery()
    return int(session.scalar(select(func.count()).select_from(inner)) or 0)


def semesters(session: Session, user: User) -> list[str]:
    """The semesters that have proposals ``user`` may see, newest name first."""
    statement = select(ProposalRecord.semester).where(visible_to(user)).distinct()
    return sorted(session.scalars(statement), reverse=True)


# --- building the statement -----------------------------------------------------------------
#
# Each proposal's standing run and the finished run before it (feasibility.store.standing, the
# one rule) are found by correlated subqueries that walk the indexes (proposal -> its versions
# -> their runs), so a page costs a few index look-ups per proposal rather than a scan of every
# run per proposal.

_version = aliased(ProposalVersion, name="shown_version")
_latest_version = (
    select(ProposalVersion.proposal_ref, func.max(ProposalVersion.id).label("version_id")).group_by(ProposalVersion.proposal_ref).subquery("latest_versions")
)


_standing = aliased(CheckRun, name="standing_run")
_previous = aliased(CheckRun, name="previous_run")

_pending = (
    exists()
    .where(
        CheckRun.proposal_version_id == ProposalVersion.id,
        ProposalVersion.proposal_ref == ProposalRecord.id,
        CheckRun.state.in_(("queued", "running")),
    )
    .correlate(ProposalRecord)
)

_verdict_rank = case(
    {level: rank for rank, level in enumerate(LEVELS)},
    value=_standing.verdict,
    else_=-1,
)
_changed = case(
    (and_(_previous.verdict.is_not(None), _previous.verdict != _standing.verdict), 1),
    else_=0,
)
#: The worst finding of the standing run that is not feasible (worst level first, then in the engine's order): its check.
_failing_check = (
    select(FindingRow.check)
    .join(RequestOutcome, RequestOutcome.id == FindingRow.outcome_id)
    .where(RequestOutcome.run_id == _standing.id, FindingRow.level != "feasible")
    .order_by(case({"infeasible": 0, "unchecked": 1, "marginal": 2}, value=FindingRow.level, else_=3), RequestOutcome.id, FindingRow.id)
    .limit(1)
    .correlate(_standing)
    .scalar_subquery()
)
#: Hours needed over hours requested in the standing run; NULL when some request's goal cannot be reached (no hours needed).
_needed_ratio = (
    select(
        case(
            (
                func.count(RequestOutcome.hours_needed) == func.count(),
                func.sum(RequestOutcome.hours_needed) / func.nullif(func.sum(RequestOutcome.hours_requested), 0.0),
            ),
            else_=None,
        )
    )
    .where(RequestOutcome.run_id == _standing.id)
    .correlate(_standing)
    .scalar_subquery()
)
_SORT_COLUMNS: dict[str, Any] = {
    "id": ProposalRecord.proposal_id,
    "title": _version.title,
    "pi": _version.pi_name,
    "instruments": _version.instruments,
    "hours": _version.hours_requested,
    "verdict": _verdict_rank,
    "checked": _standing.finished_at,
    "changed": _changed,
    "failing": _failing_check,
    "pressure": _needed_ratio,
}
#: Columns that can be empty: sorted with the empty ones last in either direction, the same on every database.
_NULLS_LAST = frozenset({"failing", "pressure"})


def _base() -> Select:
    return (
        select(
            ProposalRecord.proposal_id,
            ProposalRecord.semester,
            _version.title,
            _version.pi_name,
            _version.instruments,
            _version.hours_requested,
            _version.targets,
            _standing.id.label("run_id"),
            _standing.verdict.label("verdict"),
            _standing.finished_at.label("checked_at"),
            _previous.verdict.label("previous_verdict"),
            _pending.label("pending"),
            _failing_check.label("failing_check"),
            _needed_ratio.label("needed_ratio"),
        )
        .join(_latest_version, _latest_version.c.proposal_ref == ProposalRecord.id)
        .join(_version, _version.id == _latest_version.c.version_id)
        .outerjoin(_standing, _standing.id == standing_run_id(0))
        .outerjoin(_previous, _previous.id == standing_run_id(1))
    )


def _ordered(query: ListQuery) -> Select[Any]:
    column = _SORT_COLUMNS[query.sort]
    primary = column.desc() if query.descending else column.asc()
    tie = ProposalRecord.proposal_id.desc() if query.descending else ProposalRecord.proposal_id.asc()
    if query.sort in _NULLS_LAST:
        return _base().order_by(case((column.is_(None), 1), else_=0), primary, tie)
    return _base().order_by(primary, tie)


def _filtered(user: User, query: ListQuery, statement: Select[Any]) -> Select[Any]:
    statement = statement.where(visible_to(user), ProposalRecord.semester == query.semester)
    if query.verdict == "none":
        statement = statement.where(_standing.verdict.is_(None))
    elif query.verdict:
        statement = statement.where(_standing.verdict == query.verdict)
    if query.instrument:
        listed = literal(",") + func.replace(_version.instruments, " ", "") + literal(",")
        statement = statement.where(func.lower(listed).like(f"%,{_like_escape(query.instrument.lower())},%", escape="\\"))
    if query.check:
        statement = statement.where(
            exists().where(
                RequestOutcome.run_id == _standing.id,
                FindingRow.outcome_id == RequestOutcome.id,
                unindexed(FindingRow.check) == query.check,
                FindingRow.level != "feasible",
            )
        )
    if query.search:
        pattern = f"%{_like_escape(query.search.lower())}%"
        statement = statement.where(
            or_(
                func.lower(ProposalRecord.proposal_id).like(pattern, escape="\\"),
                func.lower(_version.title).like(pattern, escape="\\"),
                func.lower(_version.targets).like(pattern, escape="\\"),
            )
        )
    return statement


def _row(values: Any) -> ProposalRow:
    return ProposalRow(
        proposal_id=values.proposal_id,
        semester=values.semester,
        title=values.title,
        pi_name=values.pi_name,
        instruments=[name for name in (values.instruments or "").replace(" ", "").split(",") if name],
        hours_requested=float(values.hours_requested or 0.0),
        verdict=values.verdict,
        checked_at=values.checked_at,
        previous_verdict=values.previous_verdict,
        run_id=values.run_id,
        pending=bool(values.pending),
        targets=[name for name in (values.targets or "").split("\n") if name],
        failing_check=values.failing_check,
        needed_ratio=float(values.needed_ratio) if values.needed_ratio is not None else None,
    )


def _like_escape(text: str) -> str:
    return text.replace("\\", "\\\\").replace("%", "\\%").replace("_", "\\_")


def _int(value: Any, default: int) -> int:
    try:
        return int(value)
    except (TypeError, ValueError):
        return default

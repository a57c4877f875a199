"""A proposal's check runs, newest first, each with what changed since the finished run before it.

"Before" is in the standing order of :mod:`feasibility.store.standing` (proposal
version, then the run queued last), the order that says whose verdict stands, and
a key figure counts as changed by :func:`feasibility.service.changes.figure_changed`,
the rule the change notices use. Changes are read from stored rows only: the run's verdict, which inputs differ
(proposal version, observatory description, instrument schedule, engine), and per
observation request its verdict and key figures (``RequestOutcome`` columns).
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

from sqlalchemy import select
from sqlalchemy.orm import Session, selectinload

from feasibility.service.changes import figure_changed
from feasibility.store.models import CheckRun, ProposalRecord, ProposalVersion, RequestOutcome
from feasibility.store.standing import sort_key

__all__ = ["KEY_FIGURES", "Change", "RunEntry", "run_history"]

#: The figures whose change a reviewer is shown: column name -> label and unit.
KEY_FIGURES: dict[str, tuple[str, str]] = {
    "hours_requested": ("hours requested", "h"),
    "hours_observable": ("hours observable", "h"),
    "hours_needed": ("hours needed", "h"),
    "snr_expected": ("expected S/N", ""),
}


@dataclass
class Change:
    """One thing that differs from the previous finished run."""

    subject: str
    before: str
    after: str


@dataclass
class RunEntry:
    """One check run in the history."""

    run: CheckRun
    version_number: int
    changes: list[Change] = field(default_factory=list)
    compared_with: int | None = None


def run_history(session: Session, record: ProposalRecord) -> list[RunEntry]:
    """Every run of every version of ``record``, newest first, each finished run compared with the one before."""
    runs = list(
        session.scalars(
            select(CheckRun)
            .join(ProposalVersion, ProposalVersion.id == CheckRun.proposal_version_id)
            .where(ProposalVersion.proposal_ref == record.id)
            .options(selectinload(CheckRun.outcomes))
            .order_by(CheckRun.id)
        )
    )
    version_ids = sorted({run.proposal_version_id for run in runs})
    numbers = {version_id: position + 1 for position, version_id in enumerate(version_ids)}
    finished = sorted((r for r in runs if r.state == "done"), key=sort_key)
    entries = {run.id: RunEntry(run=run, version_number=numbers[run.proposal_version_id]) for run in runs}
    for before, after in zip(finished, finished[1:]):
        entry = entries[after.id]
        entry.compared_with = before.id
        entry.changes = _compare(before, after, numbers)
    return sorted(entries.values(), key=lambda e: e.run.id, reverse=True)


def _compare(before: CheckRun, after: CheckRun, numbers: dict[int, int]) -> list[Change]:
    changes: list[Change] = []
    if before.verdict != after.verdict:
        changes.append(Change("verdict", before.verdict or "—", after.verdict or "—"))
    if before.proposal_version_id != after.proposal_version_id:
        changes.append(Change("proposal", f"version {numbers[before.proposal_version_id]}", f"version {numbers[after.proposal_version_id]}"))
    if before.observatory_version_id != after.observatory_version_id:
        changes.append(Change("observatory description", _label(before, "observatory"), _label(after, "observatory")))
    if before.schedule_version_id != after.schedule_version_id:
        changes.append(Change("instrument schedule", _label(before, "schedule"), _label(after, "schedule")))
    if before.engine_version != after.engine_version:
        changes.append(Change("engine", before.engine_version, after.engine_version))
    old = {o.label: o for o in before.outcomes}
    new = {o.label: o for o in after.outcomes}
    for label in sorted(old.keys() | new.keys()):
        if label not in old:
            changes.append(Change(f"request {label}", "absent", f"added, {new[label].verdict}"))
            continue
        if label not in new:
            changes.append(Change(f"request {label}", old[label].verdict, "removed"))
            continue
        changes.extend(_compare_outcomes(label, old[label], new[label]))
    return changes


def _compare_outcomes(label: str, old: RequestOutcome, new: RequestOutcome) -> list[Change]:
    changes: list[Change] = []
    if old.verdict != new.verdict:
        changes.append(Change(f"request {label}: verdict", old.verdict, new.verdict))
    for column, (name, unit) in KEY_FIGURES.items():
        a, b = getattr(old, column), getattr(new, column)
        if figure_changed(column, a, b):
            changes.append(Change(f"request {label}: {name}", _figure(a, unit), _figure(b, unit)))
    return changes


def _figure(value: float | None, unit: str) -> str:
    if value is None:
        return "—"
    return f"{value:.3g} {unit}".strip()


def _label(run: CheckRun, what: str) -> str:
    result: dict[str, Any] = run.result or {}
    if what == "observatory":
        return str(result.get("observatory_version") or f"#{run.observatory_version_id}")
    return str(result.get("schedule_version") or (f"#{run.schedule_version_id}" if run.schedule_version_id else "none"))

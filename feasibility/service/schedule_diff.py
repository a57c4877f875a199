"""What changed between two versions of an instrument schedule, night by night.

A night missing from a schedule is closed, so a night can be *added* (listed now,
not before), *removed* (listed before, not now), or stay listed with its
*instrument* or its *status* changed. Which instruments are *affected* is decided
on what an observer gets: the instrument mounted on an open night. A night whose
note alone changed, or an engineering night that now names a different
instrument, affects nobody.

The dashboard and the API show :meth:`ScheduleDiff.as_dict`; the re-check
planner (:mod:`feasibility.service.rechecks`) uses :attr:`ScheduleDiff.affected_instruments`.
"""

from __future__ import annotations

from collections import Counter
from dataclasses import dataclass, field
from datetime import date
from typing import Any, Literal, overload

from feasibility.documents.schedule import InstrumentSchedule, ScheduledNight

__all__ = ["NightChange", "ScheduleDiff", "available_instrument", "schedule_diff", "schedule_summary"]

ChangeKind = Literal["added", "removed", "instrument", "status"]


@dataclass(frozen=True)
class NightChange:
    """One night that differs: its entry before and after (None when not listed)."""

    night: date
    kind: ChangeKind
    before: ScheduledNight | None
    after: ScheduledNight | None

    @property
    def available_before(self) -> str | None:
        """The instrument an observer had on this night before the change (None: closed)."""
        return available_instrument(self.before)

    @property
    def available_after(self) -> str | None:
        """The instrument an observer has on this night now (None: closed)."""
        return available_instrument(self.after)

    def as_dict(self) -> dict[str, Any]:
        return {
            "night": self.night.isoformat(),
            "kind": self.kind,
            "before": _entry(self.before),
            "after": _entry(self.after),
        }


@dataclass(frozen=True)
class ScheduleDiff:
    """The differences between two schedule versions of one semester."""

    semester: str
    previous_version: str | None
    current_version: str
    changes: list[NightChange] = field(default_factory=list)

    @property
    def nights_added(self) -> list[NightChange]:
        return [c for c in self.changes if c.kind == "added"]

    @property
    def nights_removed(self) -> list[NightChange]:
        return [c for c in self.changes if c.kind == "removed"]

    @property
    def instrument_changed(self) -> list[NightChange]:
        return [c for c in self.changes if c.kind == "instrument"]

    @property
    def status_changed(self) -> list[NightChange]:
        return [c for c in self.changes if c.kind == "status"]

    @property
    def nights_affected(self) -> Counter[str]:
        """Per instrument (upper case), how many nights it gained or lost."""
        counts: Counter[str] = Counter()
        for change in self.changes:
            before, after = change.available_before, change.available_after
            if _key(before) == _key(after):
                continue
            for name in (before, after):
                if name is not None:
                    counts[_key(name)] += 1
        return counts

    @property
    def gained_and_lost(self) -> dict[str, tuple[int, int]]:
        """Per instrument (upper case), the open nights it gained and the open nights it lost, in name order."""
        gained: Counter[str] = Counter()
        lost: Counter[str] = Counter()
        for change in self.changes:
            before, after = _key(change.available_before), _key(change.available_after)
            if before == after:
                continue
            if after is not None:
                gained[after] += 1
            if before is not None:
                lost[before] += 1
        return {name: (gained[name], lost[name]) for name in sorted(gained.keys() | lost.keys())}

    @property
    def affected_instruments(self) -> frozenset[str]:
        """Instruments (upper case) whose available nights changed: their requests need a re-check."""
        return frozenset(self.nights_affected)

    def affects(self, instruments: set[str] | frozenset[str] | list[str]) -> set[str]:
        """Which of ``instruments`` (any case) this change affects, upper case."""
        return {_key(name) for name in instruments} & self.affected_instruments

    def as_dict(self) -> dict[str, Any]:
        """The JSON form the API and the dashboard show."""
        return {
            "semester": self.semester,
            "previous_version": self.previous_version,
            "current_version": self.current_version,
            "nights_added": [c.as_dict() for c in self.nights_added],
            "nights_removed": [c.as_dict() for c in self.nights_removed],
            "instrument_changed": [c.as_dict() for c in self.instrument_changed],
            "status_changed": [c.as_dict() for c in self.status_changed],
            "affected_instruments": dict(sorted(self.nights_affected.items())),
            "gained_and_lost": {name: {"gained": gained, "lost": lost} for name, (gained, lost) in self.gained_and_lost.items()},
        }


def schedule_diff(previous: InstrumentSchedule | None, current: InstrumentSchedule) -> ScheduleDiff:
    """Compare two versions of a semester's schedule night by night.

    Parameters
    ----------
    previous
        The version before, or None when ``current`` is the semester's first.
    current
        The new version.

    Returns
    -------
    ScheduleDiff
        Every night listed in one version only, or listed in both with another
        status or instrument, in date order. A night whose status changed is
        reported as a status change even when its instrument changed too.
    """
    old = {entry.night: entry for entry in previous.nights} if previous is not None else {}
    new = {entry.night: entry for entry in current.nights}
    changes: list[NightChange] = []
    for night in sorted(old.keys() | new.keys()):
        before, after = old.get(night), new.get(night)
        if before is None:
            changes.append(NightChange(night, "added", None, after))
        elif after is None:
            changes.append(NightChange(night, "removed", before, None))
        elif before.status != after.status:
            changes.append(NightChange(night, "status", before, after))
        elif _key(before.instrument) != _key(after.instrument):
            changes.append(NightChange(night, "instrument", before, after))
    return ScheduleDiff(
        semester=current.semester,
        previous_version=previous.version if previous is not None else None,
        current_version=current.version,
        changes=changes,
    )


def schedule_summary(schedule: InstrumentSchedule) -> dict[str, Any]:
    """A version at a glance: nights listed, open nights per instrument (upper case), and nights by status."""
    open_nights: Counter[str] = Counter()
    statuses: Counter[str] = Counter()
    for entry in schedule.nights:
        statuses[entry.status] += 1
        name = available_instrument(entry)
        if name is not None:
            open_nights[_key(name) or name] += 1
    dates = sorted(entry.night for entry in schedule.nights)
    return {
        "nights": len(schedule.nights),
        "first_night": dates[0].isoformat() if dates else None,
        "last_night": dates[-1].isoformat() if dates else None,
        "open_nights": dict(sorted(open_nights.items())),
        "by_status": dict(sorted(statuses.items())),
    }


def available_instrument(entry: ScheduledNight | None) -> str | None:
    """The instrument an observer can use on a night: the mounted one when open, else None."""
    if entry is None or entry.status != "open":
        return None
    return entry.instrument


@overload
def _key(name: str) -> str: ...


@overload
def _key(name: None) -> None: ...


def _key(name: str | None) -> str | None:
    """Instrument names compare without regard to case, as the observatory description does."""
    return name.upper() if name is not None else None


def _entry(entry: ScheduledNight | None) -> dict[str, Any] | None:
    if entry is None:
        return None
    return {"instrument": entry.instrument, "status": entry.status, "note": entry.note}

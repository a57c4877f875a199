"""The committee's semester overview: counts by verdict, hours per instrument and demand by right ascension.

Demand comes from stored rows (each proposal's standing run, as
:mod:`feasibility.store.standing` defines it, and its request outcomes; the target's right ascension from the stored proposal
version); supply from :mod:`feasibility.web.dashboard.offer`, cached per
observatory version and semester.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from datetime import date
from typing import Any

from pydantic import TypeAdapter, ValidationError
from sqlalchemy import case, func, select
from sqlalchemy.orm import Session

from feasibility.documents import Observatory
from feasibility.documents.angles import parse_right_ascension
from feasibility.documents.moving_targets import target_kind
from feasibility.documents.proposal import SKY_ILLUMINATION, AnyTarget
from feasibility.engine.tracks import geocentric_ra_deg
from feasibility.results import COMPETING_LEVELS
from feasibility.service.current import current_observatory, current_schedule, observatory_of, schedule_of
from feasibility.store.models import CheckRun, ProposalRecord, ProposalVersion, RequestOutcome
from feasibility.store.standing import standing_run_id
from feasibility.web.dashboard.offer import LUNAR_TIMES, instrument_hours_offered, lunar_offer, semester_offer
from feasibility.web.dashboard.queries import LEVELS

__all__ = ["InstrumentLine", "LunarLine", "Overview", "lunar_time", "semester_overview"]


@dataclass
class InstrumentLine:
    """One instrument's demand and supply in the semester."""

    instrument: str
    requests: int
    """Every request on the instrument in the standing checks, infeasible ones included."""
    hours_requested: float
    """Hours requested by the feasible and marginal requests (an infeasible request will not be scheduled)."""
    hours_needed: float | None
    """Hours the engine found the feasible and marginal requests need."""
    hours_observable: float | None
    hours_offered: float | None
    needed_unknown: int = 0
    """Feasible or marginal requests without hours needed stored; not in ``hours_needed``."""
    not_counted: int = 0
    """Infeasible or unchecked requests: counted in ``requests`` only."""

    @property
    def pressure(self) -> float | None:
        """Feasible and marginal hours requested over hours offered (the oversubscription), when both are known."""
        if not self.hours_offered:
            return None
        return self.hours_requested / self.hours_offered


@dataclass
class LunarLine:
    """One instrument in one lunar time: feasible and marginal requested hours against the hours offered."""

    instrument: str
    lunar_time: str
    requests: int
    hours_requested: float
    hours_offered: float | None
    ra_requested: list[float]
    ra_offered: list[float] | None

    @property
    def pressure(self) -> float | None:
        """Requested over offered hours, when hours are offered."""
        if not self.hours_offered:
            return None
        return self.hours_requested / self.hours_offered


@dataclass
class Overview:
    """Everything the overview page shows."""

    semester: str
    proposals: int
    unchecked_yet: int
    counts: dict[str, int]
    instruments: list[InstrumentLine]
    ra_requested: list[float]
    ra_night_offered: list[float] | None
    ra_dark_offered: list[float] | None
    schedule_label: str | None
    observatory_label: str | None
    notes: list[str] = field(default_factory=list)
    lunar: list[LunarLine] = field(default_factory=list)

    def lunar_line(self, instrument: str, time: str) -> LunarLine | None:
        """The line of ``instrument`` (any case) in lunar time ``time``."""
        for line in self.lunar:
            if line.instrument.upper() == instrument.upper() and line.lunar_time == time:
                return line
        return None


def lunar_time(constraints: Any) -> str:
    """The lunar time a request asks for: its ``sky``, else the one its largest Moon illumination allows, else bright.

    The one rule the overview uses for every request (Constraints in feasibility.documents.proposal).
    """
    if not isinstance(constraints, dict):
        return "bright"
    sky = constraints.get("sky")
    if sky in SKY_ILLUMINATION:
        return str(sky)
    illumination = constraints.get("max_moon_illumination")
    if isinstance(illumination, (int, float)):
        for time in LUNAR_TIMES:
            if illumination <= SKY_ILLUMINATION[time]:
                return time
    return "bright"


def semester_overview(session: Session, semester: str) -> Overview:
    """Sum the semester's standing verdicts and request outcomes, and set them against what the sky offers."""
    standing = select(standing_run_id().label("run_id")).select_from(ProposalRecord).where(ProposalRecord.semester == semester).subquery("standing_ids")
    in_semester = select(CheckRun.id.label("run_id"), CheckRun.verdict).join(standing, CheckRun.id == standing.c.run_id).subquery("semester_runs")
    counts = {level: 0 for level in LEVELS}
    for verdict, number in session.execute(select(in_semester.c.verdict, func.count()).group_by(in_semester.c.verdict)):
        if verdict in counts:
            counts[verdict] = int(number)
    proposals = int(session.scalar(select(func.count()).select_from(ProposalRecord).where(ProposalRecord.semester == semester)) or 0)

    counted = RequestOutcome.verdict.in_(COMPETING_LEVELS)
    per_instrument = session.execute(
        select(
            RequestOutcome.instrument,
            func.count(),
            func.sum(case((counted, RequestOutcome.hours_requested), else_=0.0)),
            func.sum(case((counted, RequestOutcome.hours_needed), else_=None)),
            func.sum(case((counted, RequestOutcome.hours_observable), else_=None)),
            func.sum(case((counted & RequestOutcome.hours_needed.is_(None), 1), else_=0)),
            func.sum(case((counted, 0), else_=1)),
        )
        .where(RequestOutcome.run_id.in_(select(in_semester.c.run_id)))
        .group_by(RequestOutcome.instrument)
        .order_by(RequestOutcome.instrument)
    ).all()

    notes: list[str] = []
    observatory_row = current_observatory(session)
    schedule_row = current_schedule(session, semester)
    offered: dict[str, float] = {}
    by_moon: dict[str, dict[str, dict[str, Any]]] = {}
    offer = None
    if observatory_row is not None:
        observatory = observatory_of(observatory_row)
        offer = semester_offer(observatory, semester, observatory_row.content_hash)
        if offer is None:
            notes.append(f"The observatory description in force has no semester {semester}; no hours offered are shown.")
        else:
            offered = instrument_hours_offered(offer, observatory, schedule_of(schedule_row))
            by_moon = lunar_offer(offer, observatory, schedule_of(schedule_row))
            if schedule_row is None:
                notes.append("No instrument schedule is stored for this semester, so no hours per instrument are offered yet.")
    else:
        notes.append("No observatory description is stored; no hours offered are shown.")

    lines = [
        InstrumentLine(
            instrument=name,
            requests=int(number),
            hours_requested=float(requested or 0.0),
            hours_needed=_maybe(needed),
            hours_observable=_maybe(observable),
            hours_offered=offered.get(name),
            needed_unknown=int(unknown or 0),
            not_counted=int(not_counted or 0),
        )
        for name, number, requested, needed, observable, unknown, not_counted in per_instrument
    ]
    seen = {line.instrument for line in lines}
    lines += [InstrumentLine(name, 0, 0.0, None, None, hours) for name, hours in sorted(offered.items()) if name not in seen]

    return Overview(
        semester=semester,
        proposals=proposals,
        unchecked_yet=max(proposals - sum(counts.values()), 0),
        counts=counts,
        instruments=lines,
        ra_requested=_ra_demand(session, in_semester, _middle_midnight_mjd(observatory_of(observatory_row), semester) if observatory_row is not None else None),
        ra_night_offered=offer["ra_night_hours"] if offer else None,
        ra_dark_offered=offer["ra_dark_hours"] if offer else None,
        schedule_label=schedule_row.version_label if schedule_row is not None else None,
        observatory_label=f"{observatory_row.name} {observatory_row.version_label}" if observatory_row is not None else None,
        notes=notes,
        lunar=_lunar_lines(session, in_semester, by_moon, [line.instrument for line in lines]),
    )


def _lunar_lines(session: Session, in_semester: Any, offered: dict[str, dict[str, dict[str, Any]]], names: list[str]) -> list[LunarLine]:
    """Feasible and marginal requested hours by instrument and lunar time (and right ascension), against the offer."""
    counted = {
        (run_id, label): instrument
        for run_id, label, instrument in session.execute(
            select(RequestOutcome.run_id, RequestOutcome.label, RequestOutcome.instrument).where(
                RequestOutcome.run_id.in_(select(in_semester.c.run_id)), RequestOutcome.verdict.in_(COMPETING_LEVELS)
            )
        )
    }
    demand: dict[tuple[str, str], list[float]] = {}
    number: dict[tuple[str, str], int] = {}
    statement = (
        select(CheckRun.id, ProposalVersion.document)
        .join(CheckRun, CheckRun.proposal_version_id == ProposalVersion.id)
        .where(CheckRun.id.in_(select(in_semester.c.run_id)))
        .execution_options(yield_per=200)
    )
    for run_id, document in session.execute(statement):
        for request in (document or {}).get("requests", []):
            instrument = counted.get((run_id, request.get("label")))
            if instrument is None:
                continue
            try:
                ra_deg = parse_right_ascension(request["target"]["ra"])
                hours = float(request["hours_requested"])
            except (KeyError, TypeError, ValueError):
                continue
            key = (instrument.upper(), lunar_time(request.get("constraints")))
            bins = demand.setdefault(key, [0.0] * 24)
            bins[int(ra_deg / 15.0 + 1e-9) % 24] += hours
            number[key] = number.get(key, 0) + 1
    by_name = {name.upper(): name for name in [*names, *offered]}
    lines = []
    for upper in sorted(by_name):
        name = by_name[upper]
        supply = next((value for key, value in offered.items() if key.upper() == upper), None)
        for time in LUNAR_TIMES:
            bins = demand.get((upper, time), [0.0] * 24)
            lines.append(
                LunarLine(
                    instrument=name,
                    lunar_time=time,
                    requests=number.get((upper, time), 0),
                    hours_requested=sum(bins),
                    hours_offered=supply[time]["hours"] if supply else None,
                    ra_requested=bins,
                    ra_offered=supply[time]["ra"] if supply else None,
                )
            )
    return lines


def _ra_demand(session: Session, in_semester: Any, middle_mjd: float | None) -> list[float]:
    """Requested hours per hour of right ascension, from each latest run's proposal version.

    Streams the stored documents in batches. A moving target counts at its geocentric right ascension at
    ``middle_mjd`` (the semester's middle night, from the engine's ephemeris); it is skipped when there is no such
    night or its ephemeris table does not cover it, as is a target whose right ascension cannot be read (it passed
    validation, so this should not happen).
    """
    bins = [0.0] * 24
    statement = (
        select(ProposalVersion.document)
        .join(CheckRun, CheckRun.proposal_version_id == ProposalVersion.id)
        .where(CheckRun.id.in_(select(in_semester.c.run_id)))
        .execution_options(yield_per=200)
    )
    for document in session.scalars(statement):
        for request in (document or {}).get("requests", []):
            try:
                ra_deg = _right_ascension(request["target"], middle_mjd)
                hours = float(request["hours_requested"])
            except (KeyError, TypeError, ValueError):
                continue
            if ra_deg is not None:
                bins[int(ra_deg / 15.0 + 1e-9) % 24] += hours  # 1e-9 h: 06:00:00 parsed as 89.99999999999999° is 6h
    return bins


_TARGETS: TypeAdapter[Any] = TypeAdapter(AnyTarget)


def _right_ascension(target: dict[str, Any], middle_mjd: float | None) -> float | None:
    """A fixed target's right ascension, or a moving one's at ``middle_mjd`` (None when unknown there)."""
    if target_kind(target) in (None, "fixed"):
        return parse_right_ascension(target["ra"])
    if middle_mjd is None:
        return None
    try:
        moving = _TARGETS.validate_python(target)
    except ValidationError as error:
        raise ValueError(str(error)) from error
    return geocentric_ra_deg(moving, middle_mjd)


def _middle_midnight_mjd(observatory: Observatory, semester: str) -> float | None:
    """The UTC MJD of local midnight (by the site's longitude) in the semester's middle night, or None."""
    found = observatory.semester_named(semester)
    if found is None:
        return None
    middle = found.first_night + (found.last_night - found.first_night) / 2
    return (middle - date(1858, 11, 17)).days + 1.0 - observatory.site.longitude_deg / 360.0


def _maybe(value: Any) -> float | None:
    if value is None:
        return None
    number = float(value)
    return None if math.isnan(number) else number

"""Checks that a proposal fits an observatory: its semester, instruments and setups exist.

These are input errors (the proposal names something the observatory does not
have), reported like validation errors with the field path.
"""

from __future__ import annotations

from datetime import UTC, datetime, time, timedelta

from feasibility.documents.loading import DocumentError, Problem
from feasibility.documents.observatory import Observatory, Semester
from feasibility.documents.proposal import SKY_ILLUMINATION, Constraints, Proposal, Setup, TimeWindow
from feasibility.documents.schedule import InstrumentSchedule

__all__ = [
    "constraint_problems",
    "proposal_problems",
    "request_problems",
    "require_consistent",
    "schedule_problems",
    "semester_span_utc",
    "window_problems",
]


def proposal_problems(proposal: Proposal, observatory: Observatory) -> list[Problem]:
    """Every place where ``proposal`` names a semester, instrument or setup that ``observatory`` lacks."""
    problems: list[Problem] = []
    if observatory.semester_named(proposal.semester) is None:
        known = ", ".join(s.name for s in observatory.semesters)
        problems.append(Problem("semester", f"{proposal.semester!r} is not a semester of {observatory.name} (known: {known})"))
    for i, request in enumerate(proposal.requests):
        where = f"requests[{i}]"
        problems.extend(request_problems(where, request.instrument, request.setup, request.brightness.band, observatory))
        problems.extend(constraint_problems(f"{where}.constraints", request.constraints))
    semester = observatory.semester_named(proposal.semester)
    if semester is not None:
        for i, request in enumerate(proposal.requests):
            problems.extend(window_problems(f"requests[{i}].windows", request.windows, observatory, semester))
    return problems


def request_problems(where: str, instrument_name: str, setup: Setup | None, band: str, observatory: Observatory) -> list[Problem]:
    """What one request names that ``observatory`` lacks: its instrument, the setup's filter, grating or slit, its band.

    ``setup`` is None when the request's setup itself did not validate (its problems are reported already).
    """
    problems: list[Problem] = []
    if band not in observatory.climate.bands:
        known = ", ".join(observatory.climate.bands)
        problems.append(Problem(f"{where}.brightness.band", f"unknown band {band!r} (known: {known})"))
    instrument = observatory.instrument_named(instrument_name)
    if instrument is None:
        known = ", ".join(x.name for x in observatory.instruments)
        problems.append(Problem(f"{where}.instrument", f"unknown instrument {instrument_name!r} (known: {known})"))
        return problems
    if setup is not None:
        if instrument.kind == "imager":
            if setup.filter is None:
                problems.append(Problem(f"{where}.setup.filter", f"is required for the imager {instrument.name}"))
            elif instrument.filter_named(setup.filter) is None:
                known = ", ".join(f.name for f in instrument.filters)
                problems.append(Problem(f"{where}.setup.filter", f"{instrument.name} has no filter {setup.filter!r} (known: {known})"))
        else:
            if setup.grating is None:
                problems.append(Problem(f"{where}.setup.grating", f"is required for the spectrograph {instrument.name}"))
            elif instrument.grating_named(setup.grating) is None:
                known = ", ".join(g.name for g in instrument.gratings)
                problems.append(Problem(f"{where}.setup.grating", f"{instrument.name} has no grating {setup.grating!r} (known: {known})"))
            if setup.slit_arcsec is None:
                problems.append(Problem(f"{where}.setup.slit_arcsec", f"is required for the spectrograph {instrument.name}"))
            elif not any(abs(w - setup.slit_arcsec) < 1e-6 for w in instrument.slits_arcsec):
                known = ", ".join(f"{w:g}" for w in instrument.slits_arcsec)
                problems.append(Problem(f"{where}.setup.slit_arcsec", f"{instrument.name} has no {setup.slit_arcsec:g} arcsec slit (known: {known})"))
            if setup.central_wavelength_nm is None:
                problems.append(Problem(f"{where}.setup.central_wavelength_nm", f"is required for the spectrograph {instrument.name}"))
    return problems


def constraint_problems(where: str, constraints: Constraints) -> list[Problem]:
    """Constraints that contradict each other: a ``sky`` (lunar time) and a larger ``max_moon_illumination``.

    Rather than silently use the stricter of the two, the proposer is asked to give one or make them agree.
    """
    if constraints.sky is None or constraints.max_moon_illumination is None:
        return []
    allowed = SKY_ILLUMINATION[constraints.sky]
    if constraints.max_moon_illumination <= allowed:
        return []
    return [
        Problem(
            f"{where}.max_moon_illumination",
            f"{constraints.max_moon_illumination:g} contradicts sky {constraints.sky!r}, which allows the Moon at most "
            f"{allowed:g} illuminated while up: give only one of them, or a max_moon_illumination of at most {allowed:g}",
        )
    ]


def semester_span_utc(observatory: Observatory, semester: Semester) -> tuple[datetime, datetime]:
    """The semester's nights as UTC times: local mean noon before the first night to local mean noon after the last.

    Nights are named by the local date on which they begin; local mean time is
    taken from the site's longitude, as the sky grid does.
    """
    offset = timedelta(hours=observatory.site.longitude_deg / 15.0)
    start = datetime.combine(semester.first_night, time(12), tzinfo=UTC) - offset
    end = datetime.combine(semester.last_night + timedelta(days=1), time(12), tzinfo=UTC) - offset
    return start, end


def window_problems(where: str, windows: list[TimeWindow], observatory: Observatory, semester: Semester) -> list[Problem]:
    """Every time window that reaches outside the semester's nights (a window there could never be scheduled)."""
    start, end = semester_span_utc(observatory, semester)
    nights = f"semester {semester.name} runs from the night of {semester.first_night.isoformat()} to the night of {semester.last_night.isoformat()}"
    problems = []
    for j, window in enumerate(windows):
        shown = f"{_utc(window.start)} to {_utc(window.end)}"
        if window.end <= start or window.start >= end:
            problems.append(Problem(f"{where}[{j}]", f"the window {shown} lies outside the semester: {nights}"))
        elif window.start < start or window.end > end:
            problems.append(Problem(f"{where}[{j}]", f"the window {shown} reaches outside the semester: {nights}"))
    return problems


def _utc(moment: datetime) -> str:
    return moment.astimezone(UTC).strftime("%Y-%m-%d %H:%M UTC")


def schedule_problems(schedule: InstrumentSchedule, observatory: Observatory) -> list[Problem]:
    """Every night of ``schedule`` outside its semester or naming an unknown instrument."""
    problems: list[Problem] = []
    semester = observatory.semester_named(schedule.semester)
    if semester is None:
        problems.append(Problem("semester", f"{schedule.semester!r} is not a semester of {observatory.name}"))
    for i, entry in enumerate(schedule.nights):
        if semester is not None and not semester.first_night <= entry.night <= semester.last_night:
            problems.append(Problem(f"nights[{i}].night", f"{entry.night.isoformat()} is outside semester {semester.name}"))
        if entry.instrument is not None and observatory.instrument_named(entry.instrument) is None:
            problems.append(Problem(f"nights[{i}].instrument", f"unknown instrument {entry.instrument!r}"))
    return problems


def require_consistent(proposal: Proposal, observatory: Observatory, schedule: InstrumentSchedule | None = None) -> None:
    """Raise :class:`DocumentError` when the proposal (or schedule) does not fit the observatory."""
    problems = proposal_problems(proposal, observatory)
    if problems:
        raise DocumentError(problems, "proposal")
    if schedule is not None:
        problems = schedule_problems(schedule, observatory)
        if problems:
            raise DocumentError(problems, "schedule")

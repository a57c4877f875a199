"""Reading the observatory description and the instrument schedule for the proposers' commands (check, simulate).

Each reader appends what is wrong to the caller's list of errors instead of raising,
so a command can name every problem of every file in one answer. Without a file the
packaged demo documents are used: the observatory always, the schedule of the
proposals' semester when one is packaged for that observatory.
"""

from __future__ import annotations

from importlib.resources import files
from importlib.resources.abc import Traversable
from pathlib import Path

from feasibility.documents import DocumentError, InstrumentSchedule, Observatory, load_document, parse_document
from feasibility.documents.consistency import schedule_problems
from feasibility.documents.loading import Problem

__all__ = ["packaged", "read_observatory", "read_schedule"]


def read_observatory(path: Path | None, errors: list[DocumentError]) -> Observatory | None:
    """The observatory description at ``path`` (the packaged one without), or None with its problems in ``errors``."""
    try:
        if path is None:
            return parse_document(Observatory, packaged("observatory.yaml").read_bytes(), "packaged observatory")
        return load_document(Observatory, path)
    except DocumentError as error:
        errors.append(error)
        return None


def read_schedule(
    path: Path | None, semester: str | None, observatory: Observatory | None, errors: list[DocumentError], *, whose: str
) -> InstrumentSchedule | None:
    """The schedule at ``path`` (or the packaged one of ``semester``), checked against the observatory and semester.

    ``whose`` names the semester's owner in a problem ("the proposal's", "the proposals'").
    Returns None, with its problems in ``errors``, when it cannot be used.
    """
    schedule: InstrumentSchedule | None = None
    name = str(path)
    try:
        if path is not None:
            schedule = load_document(InstrumentSchedule, path)
        elif semester is not None and observatory is not None:
            name = f"packaged schedule-{semester}.yaml"
            document = packaged(f"schedule-{semester}.yaml")
            if document.is_file():
                schedule = parse_document(InstrumentSchedule, document.read_bytes(), name)
                if schedule.observatory != observatory.name:
                    schedule = None
    except DocumentError as error:
        errors.append(error)
    if schedule is not None and observatory is not None:
        problems = schedule_problems(schedule, observatory)
        if schedule.observatory != observatory.name:
            problems.append(Problem("observatory", f"{schedule.observatory!r} is not the observatory {observatory.name!r}"))
        if semester is not None and schedule.semester != semester:
            problems.append(Problem("semester", f"{schedule.semester!r} is not {whose} semester {semester!r}"))
        if problems:
            errors.append(DocumentError(problems, name))
    return schedule


def packaged(name: str = "") -> Traversable:
    """A file of the packaged demo data (``feasibility/data``), or with no name the folder itself."""
    folder = files("feasibility") / "data"
    return folder / name if name else folder

"""Every problem of a proposal in one answer: its schema, and its fit to the observatory, together.

Validation alone stops at the schema: a proposal with a declination of 95° and
an unknown filter would report only the declination, then the filter on the
next try. :func:`read_proposal` validates the document and, whatever the schema
says, checks against the observatory every part that did validate on its own
(the semester, each request's instrument, setup, band, constraints and time
windows), so one answer names every problem.
"""

from __future__ import annotations

from typing import Any

from pydantic import BaseModel, ValidationError

from feasibility.documents.consistency import constraint_problems, proposal_problems, request_problems, window_problems
from feasibility.documents.loading import DocumentError, Problem, parse_document, read_mapping
from feasibility.documents.observatory import Observatory
from feasibility.documents.proposal import Constraints, Proposal, Setup, TimeWindow

__all__ = ["proposal_document_problems", "read_proposal"]


def read_proposal(data: dict[str, Any] | str | bytes, observatory: Observatory, document: str = "proposal") -> Proposal:
    """The proposal in ``data``, or :class:`DocumentError` naming every problem: schema and observatory alike."""
    if not isinstance(data, dict):
        data = read_mapping(data, document)
    try:
        proposal = parse_document(Proposal, data, document)
    except DocumentError as error:
        problems = error.problems + _raw_problems(data, observatory, {p.field for p in error.problems})
        raise DocumentError(problems, document) from None
    problems = proposal_problems(proposal, observatory)
    if problems:
        raise DocumentError(problems, document)
    return proposal


def proposal_document_problems(data: dict[str, Any], observatory: Observatory) -> list[Problem]:
    """Every problem of the proposal document ``data`` (empty when it is good to check)."""
    try:
        read_proposal(data, observatory)
    except DocumentError as error:
        return error.problems
    return []


def _raw_problems(data: dict[str, Any], observatory: Observatory, reported: set[str]) -> list[Problem]:
    """The observatory checks on the parts of a proposal that failed validation elsewhere."""
    problems: list[Problem] = []
    name = data.get("semester")
    semester = observatory.semester_named(name) if isinstance(name, str) else None
    if isinstance(name, str) and semester is None:
        known = ", ".join(s.name for s in observatory.semesters)
        problems.append(Problem("semester", f"{name!r} is not a semester of {observatory.name} (known: {known})"))
    requests = data.get("requests")
    if not isinstance(requests, list):
        return problems
    for i, raw in enumerate(requests):
        if not isinstance(raw, dict):
            continue
        where = f"requests[{i}]"
        instrument, brightness = raw.get("instrument"), raw.get("brightness")
        band = brightness.get("band") if isinstance(brightness, dict) else None
        if isinstance(instrument, str) and instrument.strip() and isinstance(band, str) and band.strip():
            setup = _part(Setup, raw.get("setup", {}))
            problems.extend(request_problems(where, instrument.strip(), setup, band.strip(), observatory))
        constraints = _part(Constraints, raw.get("constraints", {}))
        if constraints is not None:
            problems.extend(constraint_problems(f"{where}.constraints", constraints))
        windows = raw.get("windows")
        if semester is not None and isinstance(windows, list):
            parts = [_part(TimeWindow, item) for item in windows]
            if all(part is not None for part in parts):
                problems.extend(window_problems(f"{where}.windows", parts, observatory, semester))
    return [p for p in problems if p.field not in reported]


def _part(model: type[BaseModel], data: object) -> Any:
    """``data`` validated as ``model``, or None when it does not validate (its problems are reported already)."""
    try:
        return model.model_validate(data)
    except ValidationError:
        return None

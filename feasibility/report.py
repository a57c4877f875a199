"""A plain-text report of a check run, for the terminal: one block per observation request.

Every verdict is shown with a word and a symbol, so the report reads the same
without colour and with a screen reader.
"""

from __future__ import annotations

import math
from collections.abc import Callable

from feasibility.engine import wording
from feasibility.results import Finding, Level, ProposalResult, RequestResult

__all__ = ["SYMBOLS", "render_report", "verdict_label"]

#: One symbol per level, always shown beside the level's word.
SYMBOLS: dict[Level, str] = {
    Level.FEASIBLE: "✓",
    Level.MARGINAL: "!",
    Level.UNCHECKED: "?",
    Level.INFEASIBLE: "✗",
}

# (figure, label, format) shown in each request's summary line, when present; numbers as the findings write them.
_KEY_FIGURES: list[tuple[str, str, Callable[[float], str]]] = [
    ("hours_requested", "requested", wording.hours),
    ("hours_observable", "observable", wording.hours),
    ("hours_usable", "usable", wording.hours),
    ("hours_needed", "needed", wording.hours),
    ("snr_expected", "S/N expected", lambda value: _bare_snr(value)),
    ("airmass_median", "median airmass", wording.airmass),
    ("seeing_arcsec", "seeing", wording.arcsec),
]


def verdict_label(level: Level) -> str:
    """A level as symbol and word, e.g. ``✓ feasible``."""
    return f"{SYMBOLS[level]} {level.value}"


def render_report(result: ProposalResult, notes: list[str] | None = None) -> str:
    """The whole report: the proposal's verdict, any notes (e.g. no schedule), then one block per request."""
    lines = [
        f"Proposal {result.proposal_id} (semester {result.semester}): {verdict_label(result.verdict)}",
        f"Observatory: {result.observatory}, version {result.observatory_version}; "
        f"schedule: {result.schedule_version or 'none'}; checked {result.computed_at} (engine {result.engine_version})",
    ]
    lines.extend(f"Note: {note}" for note in notes or [])
    for number, request in enumerate(result.requests, start=1):
        lines.append("")
        lines.extend(_request_block(number, request))
    return "\n".join(lines) + "\n"


def _request_block(number: int, request: RequestResult) -> list[str]:
    lines = [f"[{number}] {request.label}: {request.target} with {request.instrument}: {verdict_label(request.verdict)}"]
    summary = _summary(request)
    if summary:
        lines.append(f"    {summary}")
    caused: dict[str, list[str]] = {}
    for finding in request.findings:
        if finding.see:
            caused.setdefault(finding.see, []).append(finding.check)
    ordered = sorted(request.findings, key=lambda f: (-f.level.rank, not f.cause, f.see is not None))
    lines.extend(line for finding in ordered for line in _finding_lines(finding, caused.get(finding.check, [])))
    return lines


def _summary(request: RequestResult) -> str:
    figures = request.figures
    parts = []
    for key, label, shown in _KEY_FIGURES:
        value = figures.get(key)
        if isinstance(value, (int, float)) and not isinstance(value, bool) and math.isfinite(value):
            parts.append(f"{label} {shown(value)}")
    goal = figures.get("snr_goal")
    if isinstance(goal, (int, float)) and not isinstance(goal, bool):
        parts.append(f"S/N goal {_bare_snr(goal)}")
    return "; ".join(parts)


def _bare_snr(value: float) -> str:
    """A signal-to-noise as :func:`wording.snr` writes it, without its "S/N" (the label says it)."""
    return wording.snr(value).removeprefix("S/N ")


def _finding_lines(finding: Finding, causes: list[str]) -> list[str]:
    """A finding's lines; a cause says which findings it causes, a consequence which finding it follows from."""
    tag = finding.level.value
    if causes:
        tag += f"; the cause of {', '.join(causes)}"
    elif finding.see:
        tag += f"; follows from {finding.see}"
    lines = [f"    {SYMBOLS[finding.level]} {finding.check} ({tag}): {finding.message}"]
    if finding.suggestion:
        lines.append(f"        suggestion: {finding.suggestion}")
    return lines

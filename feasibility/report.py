"""A plain-text report of a check run, for the terminal: one block per observation request.

Every verdict is shown with a word and a symbol, so the report reads the same
without colour and with a screen reader.
"""

from __future__ import annotations

import math

from feasibility.results import Finding, Level, ProposalResult, RequestResult

__all__ = ["SYMBOLS", "render_report", "verdict_label"]

#: One symbol per level, always shown beside the level's word.
SYMBOLS: dict[Level, str] = {
    Level.FEASIBLE: "✓",
    Level.MARGINAL: "!",
    Level.UNCHECKED: "?",
    Level.INFEASIBLE: "✗",
}

# (figure, label, unit) shown in each request's summary line, when present.
_KEY_FIGURES: list[tuple[str, str, str]] = [
    ("hours_requested", "requested", " h"),
    ("hours_observable", "observable", " h"),
    ("hours_usable", "usable", " h"),
    ("hours_needed", "needed", " h"),
    ("snr_expected", "S/N expected", ""),
    ("airmass_median", "median airmass", ""),
    ("seeing_arcsec", "seeing", "\""),
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
    ordered = sorted(request.findings, key=lambda f: -f.level.rank)
    lines.extend(line for finding in ordered for line in _finding_lines(finding))
    return lines


def _summary(request: RequestResult) -> str:
    figures = request.figures
    parts = []
    for key, label, unit in _KEY_FIGURES:
        value = figures.get(key)
        if isinstance(value, (int, float)) and not isinstance(value, bool) and math.isfinite(value):
            parts.append(f"{label} {value:.3g}{unit}")
    goal = figures.get("snr_goal")
    if isinstance(goal, (int, float)) and not isinstance(goal, bool):
        parts.append(f"S/N goal {goal:g}")
    return "; ".join(parts)


def _finding_lines(finding: Finding) -> list[str]:
    lines = [f"    {SYMBOLS[finding.level]} {finding.check} ({finding.level.value}): {finding.message}"]
    if finding.suggestion:
        lines.append(f"        suggestion: {finding.suggestion}")
    return lines

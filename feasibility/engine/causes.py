"""One cause, one finding: when one problem makes several checks fail, mark it and point the others to it.

The sky stages form a chain (visible ⊇ observable ⊇ usable) and the schedule
finding also compares with the hours the goal needs, so a single cause can fail
several findings: a target that never rises fails visibility, moon and schedule;
an S/N goal that needs 47,250 h fails sensitivity, schedule and the instrument's
"too faint" problem. The rules, in one place:

- moon follows from visibility when, without the Moon constraints, the visible
  hours alone would be as bad (the Moon is not what fails);
- schedule follows from sensitivity when, compared with the requested hours
  instead of the hours the goal needs, it would be better; else it follows from
  the stage before it (moon, or visibility) when, without the schedule, the
  observable hours would be as bad;
- instrument follows from sensitivity when its only problem is the time the goal
  needs (no wavelength problem, no saturation).

Chains are followed to their root, which gets ``cause=True``; each dependent
gets ``see=<root check>``, a sentence saying so, and the root's suggestion when
it has none of its own.
"""

from __future__ import annotations

from typing import TYPE_CHECKING

from feasibility.documents import Instrument, ObservationRequest
from feasibility.engine.exposure_checks import instrument_setup_problems
from feasibility.engine.sky_findings import level_for_hours
from feasibility.results import Finding, Level

if TYPE_CHECKING:
    from feasibility.engine.sky_checks import SkyMeasure

__all__ = ["link_causes"]

_FAILING = (Level.MARGINAL, Level.INFEASIBLE)


def link_causes(
    findings: list[Finding],
    sky: SkyMeasure,
    hours_needed: float | None,
    request: ObservationRequest,
    instrument: Instrument,
    wavelength_nm: float | None,
) -> None:
    """Mark the cause among ``findings`` and point the findings it causes to it (in place)."""
    by_check = {f.check: f for f in findings}
    follows = _follows(by_check, sky, hours_needed, request, instrument, wavelength_nm)
    for check, upstream in follows.items():
        root = upstream
        seen = {check}
        while root in follows and root not in seen:
            seen.add(root)
            root = follows[root]
        dependent, cause = by_check[check], by_check[root]
        cause.cause = True
        dependent.see = root
        dependent.message += f" This follows from the {root} finding, the cause: see it first."
        if not dependent.suggestion and cause.suggestion:
            dependent.suggestion = f"See {root}: {cause.suggestion[0].lower()}{cause.suggestion[1:]}"


def _failing(finding: Finding | None) -> bool:
    return finding is not None and finding.level in _FAILING


def _follows(
    by_check: dict[str, Finding],
    sky: SkyMeasure,
    hours_needed: float | None,
    request: ObservationRequest,
    instrument: Instrument,
    wavelength_nm: float | None,
) -> dict[str, str]:
    """Which failing finding follows from which (the rules of the module docstring)."""
    requested, windows = sky.hours_requested, sky.has_windows
    visibility, moon, schedule = by_check.get("visibility"), by_check.get("moon"), by_check.get("schedule")
    sensitivity, instrument_finding = by_check.get("sensitivity"), by_check.get("instrument")
    follows: dict[str, str] = {}
    if _failing(moon) and _failing(visibility):
        without_moon = level_for_hours(sky.clear_visible, sky.total_visible, requested, windows)
        if without_moon.rank >= moon.level.rank:  # type: ignore[union-attr]
            follows["moon"] = "visibility"
    goal_larger = hours_needed is not None and hours_needed > requested
    if _failing(schedule):
        assert schedule is not None
        as_requested = level_for_hours(sky.clear_usable, sky.total_usable, requested, windows)
        need = max(requested, hours_needed) if goal_larger and hours_needed is not None else requested
        without_schedule = level_for_hours(sky.clear_observable, sky.total_observable, need, windows)
        if goal_larger and _failing(sensitivity) and as_requested.rank < schedule.level.rank:
            follows["schedule"] = "sensitivity"
        elif without_schedule.rank >= schedule.level.rank:
            upstream = "moon" if _failing(moon) else "visibility" if _failing(visibility) else None
            if upstream:
                follows["schedule"] = upstream
    if _failing(instrument_finding) and _failing(sensitivity) and goal_larger and wavelength_nm is not None:
        assert instrument_finding is not None
        saturation = instrument_finding.figures.get("saturation_time_s")
        saturates = isinstance(saturation, (int, float)) and saturation < instrument.min_exposure_s
        if not saturates and not instrument_setup_problems(request, instrument, wavelength_nm):
            follows["instrument"] = "sensitivity"
    return follows

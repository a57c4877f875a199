"""The engine's orchestrator: every check on every observation request of a proposal.

For each request: if the proposal names a semester, instrument, setup or band
the observatory lacks, the request gets an ``unchecked`` finding naming the field.
Otherwise the sky checks (:mod:`feasibility.engine.sky_checks`) run over the
semester's sky grid, hand their :class:`~feasibility.engine.conditions.Conditions`
to the exposure checks (:func:`feasibility.engine.sensitivity.assess_exposure`),
and the schedule finding compares the usable hours with the hours the goal needs.
A request's verdict is the worst of its findings, the proposal's the worst of its
requests'.
"""

from __future__ import annotations

import logging
import math
import re
import threading
from collections import OrderedDict
from datetime import UTC, datetime
from typing import Any

import numpy as np
from numpy.typing import NDArray

import feasibility
from feasibility.documents import Instrument, InstrumentSchedule, ObservationRequest, Observatory, Proposal
from feasibility.documents.consistency import proposal_problems
from feasibility.documents.loading import Problem
from feasibility.engine.causes import link_causes
from feasibility.engine.explain import explain_conditions
from feasibility.engine.moving import MotionOutcome, assess_motion
from feasibility.engine.sensitivity import assess_exposure
from feasibility.engine.sky_checks import (
    SkyMeasure,
    measure_sky,
    moon_finding,
    night_availability,
    schedule_finding,
    sun_safety_finding,
    visibility_finding,
)
from feasibility.engine.skygrid import DEFAULT_STEP_MINUTES, SkyGrid, sky_grid
from feasibility.results import Finding, Level, ProposalResult, RequestResult, worst

__all__ = ["check_proposal", "check_request"]

log = logging.getLogger(__name__)

_REQUEST_FIELD = re.compile(r"^requests\[(\d+)\]")

#: Figures copied from the exposure assessment into a request's figures when present.
_EXPOSURE_FIGURES = ("hours_needed", "snr_expected", "source_rate_e_s", "sky_rate_e_s_pix", "exposure_time_s", "exposures", "seeing_arcsec")


def check_proposal(
    proposal: Proposal,
    observatory: Observatory,
    schedule: InstrumentSchedule | None = None,
    *,
    step_minutes: float = DEFAULT_STEP_MINUTES,
    series: bool = True,
) -> ProposalResult:
    """Check every observation request of ``proposal`` at ``observatory`` (and its instrument ``schedule``).

    Never raises for a request that names something the observatory lacks: that
    request gets an ``unchecked`` finding. A schedule for another semester than
    the proposal's is ignored (every night assumed available), and the schedule
    finding says so.

    With ``series=False`` the per-night plot series, the night curve and the S/N
    curve are not computed (each request result's ``series`` is empty); verdicts,
    findings and figures are the same. That is what a stored run keeps (plots are
    recomputed on demand with the full call), at a fraction of the cost.
    """
    problems = proposal_problems(proposal, observatory)
    general = [p for p in problems if not _REQUEST_FIELD.match(p.field)]
    by_request: dict[int, list[Problem]] = {}
    for problem in problems:
        match = _REQUEST_FIELD.match(problem.field)
        if match:
            by_request.setdefault(int(match.group(1)), []).append(problem)

    semester = observatory.semester_named(proposal.semester)
    if schedule is not None and schedule.semester != proposal.semester:
        log.info("ignoring schedule for semester %s: proposal is for %s", schedule.semester, proposal.semester)
        schedule = None
    context = None
    if semester is not None:
        site = observatory.site
        grid = sky_grid(site.latitude_deg, site.longitude_deg, site.elevation_m, semester.first_night, semester.last_night, step_minutes)
        context = _SemesterContext(grid, observatory, schedule)

    results = []
    for i, request in enumerate(proposal.requests):
        request_problems = general + by_request.get(i, [])
        instrument = observatory.instrument_named(request.instrument)
        if request_problems or context is None or instrument is None:
            results.append(_unchecked(request, request_problems))
            continue
        results.append(check_request(request, observatory, instrument, context, series=series))

    return ProposalResult(
        proposal_id=proposal.id,
        semester=proposal.semester,
        verdict=worst([r.verdict for r in results]),
        requests=results,
        engine_version=feasibility.__version__,
        observatory=observatory.name,
        observatory_version=observatory.version,
        schedule_version=schedule.version if schedule is not None else None,
        computed_at=datetime.now(UTC).isoformat(timespec="seconds"),
    )


class _SemesterContext:
    """What every request of one proposal shares: the grid, per-night weather, schedule availability, series."""

    def __init__(self, grid: SkyGrid, observatory: Observatory, schedule: InstrumentSchedule | None) -> None:
        self.grid = grid
        self.schedule = schedule
        by_month = np.ones(13)
        for month, fraction in observatory.climate.usable_night_fraction.items():
            by_month[month] = fraction
        self.weather: NDArray[np.float64] = by_month[grid.night_months]
        self.night_names = grid.night_names
        self.moon_illumination = grid.moon_illumination_series
        self._clear_fraction: list[float] | None = None
        self._night_hours: dict[str, list[float]] = {}

    @property
    def clear_fraction(self) -> list[float]:
        """The per-night weather rounded for the series: the same for every request, rounded once per proposal."""
        if self._clear_fraction is None:
            self._clear_fraction = np.round(self.weather, 3).tolist()
        return self._clear_fraction

    def rounded_night_hours(self, twilight: str, hours: NDArray[np.float64]) -> list[float]:
        """Each night's hours for ``twilight`` (``hours``, shared by every request with it) rounded for the series, once."""
        rounded = self._night_hours.get(twilight)
        if rounded is None:
            rounded = self._night_hours[twilight] = np.round(hours, 3).tolist()
        return rounded

    def available(self, instrument: str) -> NDArray[np.bool_]:
        """Nights ``instrument`` is mounted and open; remembered for the same schedule object across proposals."""
        key = (id(self.grid), id(self.schedule), instrument.lower())
        cached = _AVAILABILITY.get(key)
        if cached is None or cached[0] is not self.schedule or cached[1] is not self.grid:
            cached = (self.schedule, self.grid, night_availability(self.grid, instrument, self.schedule))
            with _AVAILABILITY_LOCK:  # web workers run checks in threads
                _AVAILABILITY[key] = cached
                while len(_AVAILABILITY) > _AVAILABILITY_SIZE:
                    _AVAILABILITY.popitem(last=False)
        return cached[2]


#: Per-night availability by (grid, schedule object, instrument); identity-checked, a few dozen entries.
_AVAILABILITY: OrderedDict[tuple[int, int, str], tuple[InstrumentSchedule | None, SkyGrid, NDArray[np.bool_]]] = OrderedDict()
_AVAILABILITY_SIZE = 64
_AVAILABILITY_LOCK = threading.Lock()


def check_request(
    request: ObservationRequest, observatory: Observatory, instrument: Instrument, context: _SemesterContext, *, series: bool = True
) -> RequestResult:
    """All checks of one request already known to fit the observatory; ``series=False`` leaves out the plot series."""
    try:
        sky = measure_sky(
            request,
            observatory,
            instrument,
            context.grid,
            context.available(instrument.name),
            context.weather,
            context.schedule is not None,
            night_curve=series,
        )
        motion: MotionOutcome | None = None
        if sky.track is not None:  # a solar-system body: its magnitude on the usable nights, its rate, trailing
            motion = assess_motion(request, observatory, instrument, sky)
        exposure = assess_exposure(
            motion.request if motion else request, observatory, motion.instrument if motion else instrument, sky.conditions, series=series
        )
    except Exception as exc:  # one request's failure must not lose the others' results
        log.exception("request %r could not be evaluated", request.label)
        return _unchecked(request, [], f"could not be evaluated ({type(exc).__name__}: {exc})")

    hours_needed = _number(exposure.figures.get("hours_needed"))
    findings: list[Finding] = [
        visibility_finding(sky),
        moon_finding(sky),
        schedule_finding(sky, hours_needed, context.schedule),
        sun_safety_finding(sky),
        *([motion.finding] if motion else []),
        *exposure.findings,
    ]
    explain_conditions(findings, sky.conditions.hours_usable)
    wavelength = _number(exposure.figures.get("wavelength_nm"))
    link_causes(findings, sky, hours_needed, request, instrument, wavelength)
    conditions = sky.conditions
    figures: dict[str, Any] = {
        "hours_requested": request.hours_requested,
        "hours_visible": round(sky.total_visible, 2),
        "hours_visible_clear": round(sky.clear_visible, 2),
        "hours_observable": round(conditions.hours_observable, 2),
        "hours_observable_clear": round(sky.clear_observable, 2),
        "hours_usable": round(conditions.hours_usable, 2),
        "hours_usable_clear": round(sky.clear_usable, 2),
        "airmass_median": round(conditions.airmass_median, 3),
        "airmass_min": round(conditions.airmass_min, 3),
        "sky_mag_arcsec2": round(conditions.sky_mag_arcsec2, 2),
        "sky_band": conditions.sky_band,
        "sun_separation_min_deg": round(sky.sun_separation_min_deg, 2) if math.isfinite(sky.sun_separation_min_deg) else None,
    }
    for name in _EXPOSURE_FIGURES:
        figures[name] = exposure.figures.get(name)
    for name, value in exposure.figures.items():
        figures.setdefault(name, value)

    return RequestResult(
        label=request.label,
        instrument=instrument.name,
        target=request.target.name,
        verdict=worst([f.level for f in findings]),
        findings=findings,
        figures=figures,
        series=_series(sky, exposure.series, motion, context) if series else {},
    )


def _series(sky: SkyMeasure, exposure_series: dict[str, Any], motion: MotionOutcome | None, context: _SemesterContext) -> dict[str, Any]:
    """The request's plot series: hours per night at each stage, the night's length, weather, Moon, curves."""
    visible, usable, observable = sky.hours_series()
    return {
        "nights": list(context.night_names),
        "hours_visible": visible,
        "hours_usable": usable,
        "hours_observable": observable,
        "hours_night": list(context.rounded_night_hours(sky.twilight, sky.hours_night)),
        "clear_fraction": list(context.clear_fraction),
        "moon_illumination": list(context.moon_illumination),
        "night_curve": sky.night_curve,
        **exposure_series,
        **(motion.series if motion else {}),
    }


def _unchecked(request: ObservationRequest, problems: list[Problem], reason: str | None = None) -> RequestResult:
    """A request that could not be evaluated: one ``unchecked`` finding naming why."""
    if reason is None:
        reason = "; ".join(f"{p.field}: {p.message}" for p in problems) or "the observatory lacks what the request names"
    finding = Finding(
        check=_check_for(problems),
        level=Level.UNCHECKED,
        message=f"Not checked: {reason}.",
        figures={"problems": [f"{p.field}: {p.message}" for p in problems]},
        suggestion="Correct the proposal so that it names a semester, instrument and setup the observatory has.",
        method="documents.consistency.proposal_problems",
    )
    return RequestResult(
        label=request.label,
        instrument=request.instrument,
        target=request.target.name,
        verdict=Level.UNCHECKED,
        findings=[finding],
        figures={"hours_requested": request.hours_requested},
    )


def _check_for(problems: list[Problem]) -> str:
    """The check an input problem stops: the semester's nights, the instrument, or the brightness."""
    for problem in problems:
        if problem.field.endswith(".brightness.band"):
            return "sensitivity"
        if ".constraints.max_moon_illumination" in problem.field:
            return "moon"
        if ".instrument" in problem.field or ".setup" in problem.field:
            return "instrument"
    return "visibility"


def _number(value: object) -> float | None:
    if isinstance(value, (int, float)) and not isinstance(value, bool) and math.isfinite(float(value)):
        return float(value)
    return None

"""check_proposal: the orchestrator's contract (interfaces.md) on the demo observatory.

The demo documents are inputs; expected values come from the contract itself and
from outside references named beside the assertions.
"""

from __future__ import annotations

import copy
import json
from pathlib import Path
from typing import Any

import pytest

import feasibility
from feasibility.documents import InstrumentSchedule, Observatory, Proposal, load_document, parse_document
from feasibility.engine import check_proposal
from feasibility.results import Level, ProposalResult, worst
from tests.engine.conftest import DEMO_DATA

REQUEST: dict[str, Any] = {
    "label": "bulge-V",
    "target": {"name": "bulge field", "ra": "17:45:36", "dec": "-29:00:00"},
    "instrument": "KESTREL",
    "setup": {"filter": "V"},
    "brightness": {"magnitude": 18.0, "band": "V"},
    "goal": {"snr": 50},
    "hours_requested": 2.0,
}

REQUIRED_FIGURES = {
    "hours_requested",
    "hours_observable",
    "hours_usable",
    "hours_needed",
    "snr_expected",
    "source_rate_e_s",
    "sky_rate_e_s_pix",
    "airmass_median",
}


def _proposal(*requests: dict[str, Any], semester: str = "2027A") -> Proposal:
    return parse_document(
        Proposal,
        {
            "id": "TEST-1",
            "semester": semester,
            "title": "engine contract",
            "pi": {"name": "A. Tester", "email": "a@example.org"},
            "requests": list(requests) or [REQUEST],
        },
    )


def _with(**changes: Any) -> dict[str, Any]:
    data = copy.deepcopy(REQUEST)
    data.update(changes)
    return data


def test_result_carries_figures_series_and_versions(demo_observatory: Observatory, demo_schedule: InstrumentSchedule) -> None:
    result = check_proposal(_proposal(), demo_observatory, demo_schedule)
    assert isinstance(result, ProposalResult)
    assert result.engine_version == feasibility.__version__
    assert result.schedule_version == demo_schedule.version and result.observatory_version == demo_observatory.version
    request = result.requests[0]
    assert REQUIRED_FIGURES <= set(
        request.figures
    )  # the key figures the store copies into RequestOutcome and the pages read (feasibility/store/models.py, service/runs.py)
    checks = {f.check for f in request.findings}
    assert {"visibility", "moon", "schedule", "sun-safety", "sensitivity"} <= checks
    assert all(f.method for f in request.findings if f.check in {"visibility", "moon", "schedule", "sun-safety"})
    series = request.series
    assert len(series["nights"]) == len(series["hours_usable"]) == len(series["moon_illumination"]) == 183
    assert {"hours_from_midnight", "target_alt_deg", "moon_alt_deg", "sun_alt_deg", "night"} <= set(series["night_curve"])
    assert request.verdict is worst([f.level for f in request.findings])  # shared/VOCABULARY.md: verdict = worst finding
    json.dumps(result.model_dump(mode="json"))  # storable as JSON


def test_hours_chain_never_grows(demo_observatory: Observatory, demo_schedule: InstrumentSchedule) -> None:
    figures = check_proposal(_proposal(), demo_observatory, demo_schedule).requests[0].figures
    # Each stage is a subset of the one before; weather only removes time.
    assert figures["hours_visible"] >= figures["hours_observable"] >= figures["hours_usable"] > 0
    assert figures["hours_usable_clear"] <= figures["hours_usable"]
    assert sum(check_proposal(_proposal(), demo_observatory, demo_schedule).requests[0].series["hours_usable"]) == pytest.approx(
        figures["hours_usable"], abs=0.01
    )


def test_unknown_instrument_is_unchecked_and_others_still_run(demo_observatory: Observatory) -> None:
    result = check_proposal(_proposal(REQUEST, _with(label="odd", instrument="TELESCOPE-X")), demo_observatory)
    good, odd = result.requests
    assert good.verdict is not Level.UNCHECKED
    assert odd.verdict is Level.UNCHECKED
    assert "requests[1].instrument" in odd.findings[0].message  # helper rules: errors name the field path
    assert result.verdict is worst([good.verdict, odd.verdict])


def test_unknown_filter_is_unchecked(demo_observatory: Observatory) -> None:
    result = check_proposal(_proposal(_with(setup={"filter": "Z"})), demo_observatory)
    assert result.requests[0].verdict is Level.UNCHECKED
    assert "requests[0].setup.filter" in result.requests[0].findings[0].message


def test_unknown_semester_leaves_every_request_unchecked(demo_observatory: Observatory) -> None:
    result = check_proposal(_proposal(semester="2031A"), demo_observatory)
    assert result.verdict is Level.UNCHECKED
    assert "semester" in result.requests[0].findings[0].message


def test_schedule_of_another_semester_is_ignored(demo_observatory: Observatory, demo_schedule: InstrumentSchedule) -> None:
    other = demo_schedule.model_copy(update={"semester": "2027B"})
    result = check_proposal(_proposal(), demo_observatory, other)
    assert result.schedule_version is None
    figures = result.requests[0].figures
    assert figures["hours_usable"] == figures["hours_observable"]


def test_goal_beyond_the_available_time_is_infeasible(demo_observatory: Observatory) -> None:
    faint = _with(brightness={"magnitude": 26.5, "band": "V"}, goal={"snr": 200}, hours_requested=2.0)
    request = check_proposal(_proposal(faint), demo_observatory).requests[0]
    schedule = next(f for f in request.findings if f.check == "schedule")
    # The time the goal needs (from the exposure checks, overheads included) exceeds the usable time.
    assert request.figures["hours_needed"] > request.figures["hours_usable_clear"]
    assert schedule.level is Level.INFEASIBLE and "the goal needs" in schedule.message
    assert request.verdict is Level.INFEASIBLE


def test_conditions_reach_the_exposure_checks(demo_observatory: Observatory) -> None:
    low = check_proposal(_proposal(_with(constraints={"max_airmass": 1.1})), demo_observatory).requests[0]
    high = check_proposal(_proposal(_with(constraints={"max_airmass": 2.5})), demo_observatory).requests[0]
    # A tighter airmass limit keeps the target higher: lower median airmass, fewer hours.
    assert low.figures["airmass_median"] <= 1.1 < high.figures["airmass_median"]
    assert low.figures["hours_observable"] < high.figures["hours_observable"]
    # Common practice: extinction makes the source fainter at higher airmass, so the source rate drops.
    assert low.figures["source_rate_e_s"] > high.figures["source_rate_e_s"]


def test_without_series_everything_but_the_series_is_the_same(demo_observatory: Observatory, demo_schedule: InstrumentSchedule) -> None:
    """``series=False`` (what a stored run keeps) leaves every request's series empty and changes nothing else:
    verdicts, findings (messages, figures, suggestions) and figures of every demo proposal, a moving target among them."""
    paths = sorted(Path(str(DEMO_DATA / "proposals")).glob("*.yaml"))
    assert paths
    for path in paths:
        proposal = load_document(Proposal, path)
        full = check_proposal(proposal, demo_observatory, demo_schedule).model_dump(mode="json", exclude={"computed_at"})
        lean = check_proposal(proposal, demo_observatory, demo_schedule, series=False).model_dump(mode="json", exclude={"computed_at"})
        checked = [r for r in full["requests"] if r["verdict"] != Level.UNCHECKED.value]
        assert checked and all(r["series"].get("night_curve") and r["series"].get("hours_usable") for r in checked), path.name
        assert all(r["series"] == {} for r in lean["requests"]), path.name
        for request in full["requests"]:
            request["series"] = {}
        assert lean == full, path.name

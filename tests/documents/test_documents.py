"""Reading documents: units of angles, and bad input answered with the field path and the problem."""

from __future__ import annotations

import copy
from importlib import resources

import pytest

from feasibility.documents import (
    DocumentError,
    InstrumentSchedule,
    Observatory,
    Proposal,
    load_document,
    parse_document,
)
from feasibility.documents.consistency import proposal_problems, schedule_problems
from tests.documents.examples import GOOD


def problems_of(data: dict) -> dict[str, str]:
    with pytest.raises(DocumentError) as caught:
        parse_document(Proposal, data)
    return {p.field: p.message for p in caught.value.problems}


def test_sexagesimal_right_ascension_is_hours_and_declination_degrees() -> None:
    # 1 hour of right ascension is 15 degrees (definition); 5h35m17.3s = 83.8220833°,
    # -5°23'28" = -5.3911111°.
    proposal = parse_document(Proposal, GOOD)
    target = proposal.requests[0].target
    assert target.ra_deg == pytest.approx(83.8220833, abs=1e-6)
    assert target.dec_deg == pytest.approx(-5.3911111, abs=1e-6)


def test_numbers_are_degrees() -> None:
    data = copy.deepcopy(GOOD)
    data["requests"][0]["target"].update(ra=83.5, dec="-5.25")
    target = parse_document(Proposal, data).requests[0].target
    assert (target.ra_deg, target.dec_deg) == (83.5, -5.25)


def test_yaml_and_json_text_are_both_read() -> None:
    import json

    import yaml

    assert parse_document(Proposal, json.dumps(GOOD)).id == "T-1"
    assert parse_document(Proposal, yaml.safe_dump(GOOD)).id == "T-1"


@pytest.mark.parametrize(
    ("path", "value", "field", "words"),
    [
        (("target", "dec"), 95, "requests[0].target.dec", "between -90 and +90"),
        (("target", "ra"), "25:00:00", "requests[0].target.ra", "range [0,24)"),
        (("target", "ra"), "not an angle", "requests[0].target.ra", "cannot read"),
        (("brightness", "error"), -0.1, "requests[0].brightness.error", "must be at least 0 and at most 5; got -0.1"),
        (("brightness", "system"), "st", "requests[0].brightness.system", "'vega' or 'ab'"),
        (("hours_requested",), 0, "requests[0].hours_requested", "hours requested must be more than 0 and at most 2000; got 0"),
        (("constraints",), {"max_airmass": 0.5}, "requests[0].constraints.max_airmass", "max airmass must be at least 1 and at most 6; got 0.5"),
        (("goal",), {"snr": 10, "exposure_time_s": 100}, "requests[0].goal", "exactly one"),
        (("windows",), [{"start": "2027-05-02T00:00", "end": "2027-05-01T00:00"}], "requests[0].windows[0]", "after"),
    ],
)
def test_bad_request_fields_are_named(path: tuple[str, ...], value: object, field: str, words: str) -> None:
    data = copy.deepcopy(GOOD)
    node = data["requests"][0]
    for key in path[:-1]:
        node = node[key]
    node[path[-1]] = value
    problems = problems_of(data)
    assert field in problems, problems
    assert words in problems[field]


def test_missing_and_unknown_fields_are_named() -> None:
    data = copy.deepcopy(GOOD)
    del data["pi"]["email"]
    data["requests"][0]["colour"] = "red"
    problems = problems_of(data)
    assert problems["pi.email"] == "is required"
    assert problems["requests[0].colour"] == (
        "is not a known field (known: label, target, instrument, setup, brightness, goal, hours_requested, constraints, windows)"
    )


def test_malformed_text_is_a_document_error_not_a_crash() -> None:
    with pytest.raises(DocumentError) as caught:
        parse_document(Proposal, "id: [unclosed")
    assert "neither valid JSON nor YAML" in str(caught.value)
    with pytest.raises(DocumentError, match="mapping of fields"):
        parse_document(Proposal, "- just\n- a list\n")


def test_repeated_labels_are_refused() -> None:
    data = copy.deepcopy(GOOD)
    data["requests"].append(copy.deepcopy(data["requests"][0]))
    assert "used twice" in problems_of(data)["requests"]


def test_proposal_naming_what_the_observatory_lacks(observatory: Observatory) -> None:
    data = copy.deepcopy(GOOD)
    data["semester"] = "1999Z"
    data["requests"][0]["setup"] = {"filter": "Halpha"}
    extra = copy.deepcopy(data["requests"][0])
    extra.update(label="r2", instrument="NOSUCH")
    data["requests"].append(extra)
    found = {p.field: p.message for p in proposal_problems(parse_document(Proposal, data), observatory)}
    assert "is not a semester" in found["semester"]
    assert "no filter 'Halpha'" in found["requests[0].setup.filter"]
    assert "unknown instrument 'NOSUCH'" in found["requests[1].instrument"]


def test_demo_schedule_fits_demo_observatory(observatory: Observatory) -> None:
    schedule = load_document(InstrumentSchedule, resources.files("feasibility") / "data" / "schedule-2027A.yaml")
    assert schedule_problems(schedule, observatory) == []
    assert schedule.instrument_on(schedule.nights[1].night) == "KESTREL"
    assert schedule.instrument_on(schedule.nights[0].night) is None  # engineering night

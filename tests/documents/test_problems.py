"""Input errors all at once and in our words: schema and observatory problems in one answer, each naming
the field with its allowed range; conflicting constraints refused; unknown keys get the closest known one."""

from __future__ import annotations

import copy

import pytest

from feasibility.documents import (
    DocumentError,
    Observatory,
    Proposal,
    parse_document,
)
from feasibility.documents.proposal_problems import read_proposal
from tests.documents.examples import GOOD


def _all_problems(data: dict, observatory: Observatory) -> dict[str, str]:
    with pytest.raises(DocumentError) as caught:
        read_proposal(data, observatory)
    return {p.field: p.message for p in caught.value.problems}


def test_declination_95_and_an_unknown_filter_come_together(observatory: Observatory) -> None:
    data = copy.deepcopy(GOOD)
    data["requests"][0]["target"]["dec"] = 95
    data["requests"][0]["setup"]["filter"] = "Halpha"
    data["requests"][0]["windows"] = [{"start": "2027-11-01T00:00:00Z", "end": "2027-11-02T00:00:00Z"}]
    problems = _all_problems(data, observatory)
    assert "between -90 and +90" in problems["requests[0].target.dec"]
    assert "no filter 'Halpha'" in problems["requests[0].setup.filter"]
    assert "outside the semester" in problems["requests[0].windows[0]"]


def test_schema_problems_in_plain_words_with_the_allowed_range() -> None:
    data = copy.deepcopy(GOOD)
    data["pi"]["email"] = "not an address"
    data["id"] = "has spaces"
    data["requests"][0]["hours_requested"] = 0
    data["requests"][0]["target"]["pm_dec_mas_yr"] = 30000
    with pytest.raises(DocumentError) as caught:
        parse_document(Proposal, data)
    problems = {p.field: p.message for p in caught.value.problems}
    assert problems["pi.email"] == "e-mail address must be an e-mail address such as name@example.org; got 'not an address'"
    assert problems["id"].startswith("proposal id must be 1 to 64 letters, digits")
    assert problems["requests[0].hours_requested"] == "hours requested must be more than 0 and at most 2000; got 0"
    assert "at least -20000 and at most 20000; got 30000" in problems["requests[0].target.pm_dec_mas_yr"]
    for message in problems.values():  # no raw library sentences
        assert "should" not in message and "Input" not in message and "pattern" not in message


def test_unknown_key_suggests_the_closest_known_one() -> None:
    data = copy.deepcopy(GOOD)
    data["requests"][0]["constraints"] = {"max_airmas": 1.5}
    data["requests"][0]["hours_requsted"] = 2
    with pytest.raises(DocumentError) as caught:
        parse_document(Proposal, data)
    problems = {p.field: p.message for p in caught.value.problems}
    assert problems["requests[0].constraints.max_airmas"] == "is not a known field; did you mean 'max_airmass'?"
    assert problems["requests[0].hours_requsted"] == "is not a known field; did you mean 'hours_requested'?"


def test_sky_and_a_larger_moon_illumination_conflict(observatory: Observatory) -> None:
    data = copy.deepcopy(GOOD)
    data["requests"][0]["constraints"] = {"sky": "dark", "max_moon_illumination": 0.5}
    problems = _all_problems(data, observatory)
    message = problems["requests[0].constraints.max_moon_illumination"]
    assert "0.5" in message and "'dark'" in message and "0.3" in message  # dark time: illumination ≤ 0.3 (common practice)
    agreeing = copy.deepcopy(GOOD)
    agreeing["requests"][0]["constraints"] = {"sky": "dark", "max_moon_illumination": 0.2}
    assert read_proposal(agreeing, observatory).requests[0].constraints.max_moon_illumination == 0.2


def test_conflict_is_reported_beside_schema_problems(observatory: Observatory) -> None:
    data = copy.deepcopy(GOOD)
    data["requests"][0]["constraints"] = {"sky": "grey", "max_moon_illumination": 0.9}
    data["requests"][0]["brightness"]["magnitude"] = 99
    problems = _all_problems(data, observatory)
    assert "requests[0].brightness.magnitude" in problems
    assert "requests[0].constraints.max_moon_illumination" in problems

"""The target kinds of the proposal document: fixed by default, major body, orbital elements, ephemeris table.

Each bad input is refused with the field path and the problem; the published schema (checked by ``jsonschema``,
the outside judge) accepts what the parser accepts for the examples here.
"""

from __future__ import annotations

from typing import Any

import pytest
from jsonschema import Draft202012Validator

from feasibility.documents import DocumentError, Observatory, parse_document
from feasibility.documents.moving_targets import EphemerisTableTarget, MajorBodyTarget, OrbitalElementsTarget
from feasibility.documents.proposal import ObservationRequest, Target
from feasibility.documents.schemas import published_schema

REQUEST: dict[str, Any] = {
    "label": "a",
    "instrument": "KESTREL",
    "brightness": {"magnitude": 15.0, "band": "V"},
    "goal": {"snr": 10},
    "hours_requested": 1.0,
}
ELEMENTS: dict[str, Any] = {
    "kind": "orbital_elements",
    "name": "(90001) Invented",
    "epoch": "2027-06-01",
    "semi_major_axis": 2.6,
    "eccentricity": 0.15,
    "inclination": 8.0,
    "ascending_node_longitude": 120.0,
    "perihelion_argument": 60.0,
    "mean_anomaly": 200.0,
    "absolute_magnitude": 13.2,
    "slope_parameter": 0.2,
}
TABLE: dict[str, Any] = {
    "kind": "ephemeris_table",
    "name": "tabled",
    "ephemeris_table": [
        {"time": "2027-05-01T00:00:00Z", "ra": "10:00:00", "dec": 5.0, "magnitude": 16.0},
        {"time": "2027-05-02T00:00:00Z", "ra": "10:01:00", "dec": 5.1, "magnitude": 16.1},
    ],
}


def _problems(target: dict[str, Any]) -> list[tuple[str, str]]:
    with pytest.raises(DocumentError) as caught:
        parse_document(ObservationRequest, {**REQUEST, "target": target})
    return [(p.field, p.message) for p in caught.value.problems]


def _schema_accepts(target: dict[str, Any]) -> bool:
    schema = published_schema("proposal")
    request = {"$schema": schema["$schema"], "$defs": schema["$defs"], "$ref": "#/$defs/ObservationRequest"}
    return Draft202012Validator(request).is_valid({**REQUEST, "target": target})


@pytest.mark.parametrize(
    ("target", "model"),
    [
        ({"name": "NGC 5128", "ra": "13:25:27.6", "dec": "-43:01:09"}, Target),
        ({"kind": "fixed", "name": "NGC 5128", "ra": 201.365, "dec": -43.019}, Target),
        ({"kind": "major_body", "name": "Jupiter", "body": "jupiter"}, MajorBodyTarget),
        (ELEMENTS, OrbitalElementsTarget),
        (
            ELEMENTS
            | {
                "semi_major_axis": None,
                "perihelion_distance": 0.4,
                "eccentricity": 1.0,
                "mean_anomaly": None,
                "perihelion_time": "2027-06-20T00:00:00Z",
                "absolute_magnitude": None,
                "slope_parameter": None,
                "total_absolute_magnitude": 9.0,
                "total_magnitude_slope": 10.0,
            },
            OrbitalElementsTarget,
        ),
        (TABLE, EphemerisTableTarget),
    ],
)
def test_each_kind_parses_and_the_schema_agrees(target: dict[str, Any], model: type) -> None:
    target = {key: value for key, value in target.items() if value is not None}
    parsed = parse_document(ObservationRequest, {**REQUEST, "target": target})
    assert isinstance(parsed.target, model)
    assert _schema_accepts(target)
    stored = parsed.model_dump(mode="json", by_alias=True)
    assert parse_document(ObservationRequest, stored).target == parsed.target  # round trip as the store keeps it


def test_body_names_are_read_in_any_letter_case() -> None:
    # The schema states the names in lower case; the parser also reads 'Jupiter' (it accepts more, never less).
    parsed = parse_document(ObservationRequest, {**REQUEST, "target": {"kind": "major_body", "name": "J", "body": " Jupiter "}})
    assert isinstance(parsed.target, MajorBodyTarget) and parsed.target.body == "jupiter"


def test_a_fixed_target_without_kind_is_stored_as_before() -> None:
    parsed = parse_document(ObservationRequest, {**REQUEST, "target": {"name": "x", "ra": 10.0, "dec": 5.0}})
    assert isinstance(parsed.target, Target) and parsed.target.kind == "fixed" and parsed.target.ra_deg == 10.0


@pytest.mark.parametrize(
    ("target", "field", "words"),
    [
        ({**ELEMENTS, "eccentricity": -0.1}, "target.eccentricity", "eccentricity"),
        ({**ELEMENTS, "inclination": "steep"}, "target.inclination", "number"),
        ({k: v for k, v in ELEMENTS.items() if k != "semi_major_axis"}, "target", "perihelion_distance"),
        ({**ELEMENTS, "eccentricity": 1.2}, "target", "needs an ellipse"),
        ({**ELEMENTS, "total_absolute_magnitude": 8.0}, "target", "total_magnitude_slope"),
        ({"kind": "major_body", "name": "Pluto", "body": "pluto"}, "target.body", "mercury"),
        ({"kind": "comet", "name": "x"}, "target", "orbital_elements"),
        ({**TABLE, "ephemeris_table": list(reversed(TABLE["ephemeris_table"]))}, "target.ephemeris_table", "row 1"),
        (
            {**TABLE, "ephemeris_table": [TABLE["ephemeris_table"][0], {**TABLE["ephemeris_table"][1], "dec": 95}]},
            "target.ephemeris_table[1].dec",
            "declination",
        ),
        (
            {**TABLE, "ephemeris_table": [TABLE["ephemeris_table"][0], {k: v for k, v in TABLE["ephemeris_table"][1].items() if k != "magnitude"}]},
            "target.ephemeris_table",
            "magnitude",
        ),
    ],
)
def test_bad_targets_name_the_field_and_the_problem(target: dict[str, Any], field: str, words: str) -> None:
    problems = _problems(target)
    assert any(path == field and words in message for path, message in problems), problems


def test_observatory_tracking_fields_are_optional_and_bounded() -> None:
    from importlib.resources import files

    import yaml

    data = yaml.safe_load((files("feasibility") / "data" / "observatory.yaml").read_text(encoding="utf-8"))
    observatory = parse_document(Observatory, data)
    assert observatory.telescope.max_tracking_rate_arcsec_per_hour is None and not observatory.telescope.sidereal_tracking_only
    data["telescope"] |= {"max_tracking_rate_arcsec_per_hour": 3600.0, "sidereal_tracking_only": False}
    assert parse_document(Observatory, data).telescope.max_tracking_rate_arcsec_per_hour == 3600.0
    data["telescope"]["max_tracking_rate_arcsec_per_hour"] = -1.0
    with pytest.raises(DocumentError) as caught:
        parse_document(Observatory, data)
    assert caught.value.problems[0].field == "telescope.max_tracking_rate_arcsec_per_hour"

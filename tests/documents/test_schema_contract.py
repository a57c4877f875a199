"""The published JSON Schemas against the parser, both ways, checked by an outside validator.

Reference: ``jsonschema`` (Draft 2020-12, with format checking) is the outside judge of
what a schema accepts; ``hypothesis-jsonschema`` makes documents a schema accepts.

* every demo and example file validates against its published schema;
* every document the schema accepts either parses or is refused with a DocumentError
  (never another exception, never the "cannot be validated" fallback that marks a bug);
* every parsed document, dumped as the store keeps it, validates again.
"""

from __future__ import annotations

import json
from collections.abc import Iterator
from datetime import date, datetime
from importlib.resources import files
from typing import Any

import pytest
import yaml
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from hypothesis_jsonschema import from_schema
from jsonschema import Draft202012Validator
from pydantic import BaseModel

from feasibility.documents import DocumentError, Target, TimeWindow, parse_document
from feasibility.documents.schemas import DOCUMENTS, SCHEMA_VERSIONS, published_schema

DATA = files("feasibility") / "data"


def _as_json(data: Any) -> Any:
    """What a YAML file says, as the JSON a portal would send (YAML dates and times become ISO 8601 text)."""
    return json.loads(json.dumps(data, default=lambda value: value.isoformat() if isinstance(value, (date, datetime)) else value))


def _validator(document: str) -> Draft202012Validator:
    schema = published_schema(document)
    Draft202012Validator.check_schema(schema)
    return Draft202012Validator(schema, format_checker=Draft202012Validator.FORMAT_CHECKER)


def _files() -> Iterator[tuple[str, str]]:
    yield "observatory", "observatory.yaml"
    for item in sorted(DATA.iterdir(), key=lambda i: i.name):
        if item.name.startswith("schedule-") and item.name.endswith(".yaml"):
            yield "schedule", item.name
    for item in sorted((DATA / "proposals").iterdir(), key=lambda i: i.name):
        if item.name.endswith((".yaml", ".json")):
            yield "proposal", f"proposals/{item.name}"


FILES = list(_files())


def test_every_kind_of_file_is_covered() -> None:
    kinds = {kind for kind, _ in FILES}
    assert kinds == set(DOCUMENTS)
    assert sum(kind == "proposal" for kind, _ in FILES) >= 7


@pytest.mark.parametrize(("document", "name"), FILES)
def test_demo_files_validate_against_their_published_schema(document: str, name: str) -> None:
    data = _as_json(yaml.safe_load((DATA / name).read_text(encoding="utf-8")))
    errors = [f"{'/'.join(map(str, e.absolute_path))}: {e.message}" for e in _validator(document).iter_errors(data)]
    assert errors == []
    parse_document(DOCUMENTS[document], data)  # and the parser agrees


@pytest.mark.parametrize(("document", "name"), FILES)
def test_parsed_documents_dumped_as_stored_validate(document: str, name: str) -> None:
    parsed = parse_document(DOCUMENTS[document], (DATA / name).read_bytes())
    stored = parsed.model_dump(mode="json", by_alias=True)  # as feasibility.service stores it
    assert list(_validator(document).iter_errors(stored)) == []


@pytest.mark.parametrize("document", sorted(DOCUMENTS))
def test_schema_carries_draft_id_and_version(document: str) -> None:
    schema = published_schema(document)
    assert schema["$schema"] == "https://json-schema.org/draft/2020-12/schema"
    assert schema["$id"] == f"/api/v1/schemas/{document}-{SCHEMA_VERSIONS[document]}.json"
    assert schema["x-schema-version"] == SCHEMA_VERSIONS[document]
    assert published_schema(document, "https://feasibility.example.org/")["$id"] == (
        f"https://feasibility.example.org/api/v1/schemas/{document}-{SCHEMA_VERSIONS[document]}.json"
    )


# --- what the schema says about the forms the parser reads ---------------------------------

_TARGET = {"name": "NGC 5128", "ra": "13:25:27.6", "dec": "-43:01:09"}


@pytest.mark.parametrize(
    ("field", "value", "accepted"),
    [
        ("ra", "13:25:27.6", True),
        ("ra", "13 25 27.6", True),
        ("ra", "13h25m27.6s", True),
        ("ra", "201.365d", True),
        ("ra", 201.365, True),
        ("ra", 360, False),
        ("ra", "13:60:00", False),
        ("ra", "24:00:00", False),
        ("ra", "thirteen", False),
        ("dec", "-43:01:09", True),
        ("dec", "-43d01m09s", True),
        ("dec", -43.02, True),
        ("dec", 95, False),
        ("dec", "-43:61:00", False),
        ("name", "NGC\x005128", False),
        ("epoch", 1e16, False),
    ],
)
def test_schema_and_parser_agree_on_target_forms(field: str, value: Any, accepted: bool) -> None:
    document = {"requests": [{"target": {**_TARGET, field: value}}]}
    schema = published_schema("proposal")
    target_schema = {"$schema": schema["$schema"], "$defs": schema["$defs"], "$ref": "#/$defs/Target"}
    valid = Draft202012Validator(target_schema).is_valid(document["requests"][0]["target"])
    try:
        parse_document(Target, document["requests"][0]["target"])
        parsed = True
    except DocumentError:
        parsed = False
    assert (valid, parsed) == (accepted, accepted)


@pytest.mark.parametrize(
    ("value", "accepted"),
    [
        ("2027-05-01T22:00:00Z", True),
        ("2027-05-01T19:00:00-03:00", True),
        ("2027-05-01 22:00", True),
        ("2027-05-01", True),
        (2027, False),
        ("1700000000", False),
        ("2027-5-1", False),
    ],
)
def test_times_are_iso_text_not_unix_numbers(value: Any, accepted: bool) -> None:
    window = {"start": value, "end": "2027-12-31T00:00:00Z"}
    schema = published_schema("proposal")
    window_schema = {"$schema": schema["$schema"], "$defs": schema["$defs"], "$ref": "#/$defs/TimeWindow"}
    try:
        parse_document(TimeWindow, window)
        parsed = True
    except DocumentError:
        parsed = False
    assert (Draft202012Validator(window_schema).is_valid(window), parsed) == (accepted, accepted)


# --- generated documents: the schema never promises what the parser cannot handle ---------


def _small(node: Any) -> Any:
    """The schema with lists and mappings capped at two entries: a subset of what it accepts, quick to generate."""
    if isinstance(node, dict):
        out = {key: _small(value) for key, value in node.items()}
        if out.get("type") == "array":
            out["maxItems"] = min(out.get("maxItems", 2), 2)
        if out.get("type") == "object" and "properties" not in out:
            out["maxProperties"] = min(out.get("maxProperties", 2), 2)
        return out
    if isinstance(node, list):
        return [_small(value) for value in node]
    return node


def _generated(document: str, part: str | None = None) -> st.SearchStrategy[Any]:
    schema = _small(published_schema(document))
    schema.pop("$id")  # generation needs no base address
    if part is not None:
        schema = {"$schema": schema["$schema"], "$defs": schema["$defs"], "$ref": f"#/$defs/{part}"}
    return from_schema(schema)


_CONTRACT = settings(max_examples=8, derandomize=True, deadline=None, database=None, suppress_health_check=list(HealthCheck))


def _parse_or_refuse(model: type[BaseModel], document: str, data: Any) -> None:
    """Parse ``data``: a parsed document dumps back valid; a refusal is a DocumentError naming real problems."""
    try:
        parsed = parse_document(model, data)
    except DocumentError as error:
        assert error.problems
        assert not any("cannot be validated" in p.message for p in error.problems), error.describe()
        return
    if document in DOCUMENTS and model is DOCUMENTS[document]:
        assert list(_validator(document).iter_errors(parsed.model_dump(mode="json", by_alias=True))) == []


@_CONTRACT
@given(_generated("proposal"))
def test_generated_proposals_parse_or_are_refused_by_field(data: Any) -> None:
    _parse_or_refuse(DOCUMENTS["proposal"], "proposal", data)


@_CONTRACT
@given(_generated("observatory"))
def test_generated_observatories_parse_or_are_refused_by_field(data: Any) -> None:
    _parse_or_refuse(DOCUMENTS["observatory"], "observatory", data)


@settings(_CONTRACT, max_examples=25)
@given(_generated("schedule"))
def test_generated_schedules_parse_or_are_refused_by_field(data: Any) -> None:
    _parse_or_refuse(DOCUMENTS["schedule"], "schedule", data)


@settings(_CONTRACT, max_examples=60)
@given(_generated("proposal", "Target"))
def test_generated_targets_parse_or_are_refused_by_field(data: Any) -> None:
    _parse_or_refuse(Target, "proposal", data)


@settings(_CONTRACT, max_examples=40)
@given(_generated("proposal", "TimeWindow"))
def test_generated_windows_parse_or_are_refused_by_field(data: Any) -> None:
    _parse_or_refuse(TimeWindow, "proposal", data)

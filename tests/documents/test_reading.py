"""The safe readers' bounds, one by one: each refusal is a DocumentError naming the document or the field.

References: RFC 8259 §6 (JSON has no NaN or infinity; "numbers that cannot be
represented" are outside interoperable JSON); YAML 1.1 (PyYAML's dialect: ``.inf``,
``.nan``, anchors and aliases); PostgreSQL's documentation of the ``jsonb`` type
(``\\u0000`` cannot be stored) and of text (no NUL character). See docs/references.md.
"""

from __future__ import annotations

import copy
import json

import pytest

from feasibility.documents import (
    DocumentError,
    InstrumentSchedule,
    Proposal,
    parse_document,
)
from feasibility.documents.problems import MAX_PROBLEMS, UnreadableDocument
from feasibility.documents.reading import (
    MAX_DEPTH,
    MAX_DOCUMENT_BYTES,
    MAX_NUMBER_CHARS,
    read_data,
    read_file,
)
from tests.documents.examples import GOOD


def problems(data: object) -> dict[str, str]:
    with pytest.raises(DocumentError) as caught:
        parse_document(Proposal, data)  # type: ignore[arg-type]
    return {p.field: p.message for p in caught.value.problems}


def nested(depth: int) -> str:
    return "[" * depth + "1" + "]" * depth


@pytest.mark.parametrize("flow", [True, False])
def test_nesting_up_to_the_bound_is_read_and_deeper_is_refused(flow: bool) -> None:
    assert read_data(nested(MAX_DEPTH)) is not None
    with pytest.raises(UnreadableDocument, match=f"nested more than {MAX_DEPTH} levels deep"):
        read_data(nested(MAX_DEPTH + 1) if flow else "a:\n" + "".join("  " * i + "- \n" for i in range(1, MAX_DEPTH + 2)) + "  " * (MAX_DEPTH + 2) + "x")
    with pytest.raises(UnreadableDocument, match="nested more than"):
        read_data(nested(100_000))  # neither parser recurses into it


@pytest.mark.parametrize("token", ["NaN", "Infinity", "-Infinity", "1e999", "-1E400"])
def test_json_numbers_must_be_finite(token: str) -> None:
    # RFC 8259 §6: NaN and Infinity are not JSON numbers; 1e999 overflows every float.
    with pytest.raises(UnreadableDocument, match="not"):
        read_data(f'{{"x": {token}}}')


@pytest.mark.parametrize("token", [".nan", ".inf", "-.Inf", "1.0e+999"])
def test_yaml_numbers_must_be_finite(token: str) -> None:
    with pytest.raises(UnreadableDocument, match="not finite"):
        read_data(f"x: {token}\n")


@pytest.mark.parametrize("text", ['{"x": ' + "9" * 5000 + "}", "x: " + "9" * 5000 + "\n", '{"x": 0.' + "1" * 200 + "}"])
def test_number_literals_are_bounded_in_length(text: str) -> None:
    # 5,000 digits would trip Python's 4,300-digit limit of int(); the readers stop at MAX_NUMBER_CHARS.
    with pytest.raises(UnreadableDocument, match=f"at most {MAX_NUMBER_CHARS}"):
        read_data(text)


def test_alias_bombs_and_self_reference_are_refused() -> None:
    rows = ['a: &a ["x", "x", "x", "x", "x", "x", "x", "x", "x", "x"]']
    for i in range(8):
        here, before = chr(98 + i), chr(97 + i)
        rows.append(f"{here}: &{here} [" + ", ".join([f"*{before}"] * 10) + "]")
    with pytest.raises(UnreadableDocument, match="holds more than"):
        read_data("\n".join(rows))  # a billion strings if expanded
    with pytest.raises(UnreadableDocument, match="refers to a part that contains it"):
        read_data("a: &a [1, *a]")
    assert read_data("base: &b {x: 1}\none: *b\ntwo: *b\n") == {"base": {"x": 1}, "one": {"x": 1}, "two": {"x": 1}}


def test_impossible_dates_in_yaml_are_refused() -> None:
    with pytest.raises(UnreadableDocument, match="does not exist"):
        read_data("night: 2027-02-31\n")


def test_files_are_read_no_further_than_the_limit(tmp_path: object) -> None:
    with pytest.raises(DocumentError, match=f"larger than the limit of {MAX_DOCUMENT_BYTES} bytes"):
        read_file("/dev/zero")
    with pytest.raises(DocumentError, match="larger than the limit"):
        read_data(b" " * (MAX_DOCUMENT_BYTES + 1))


def test_control_characters_are_refused_naming_the_field() -> None:
    document = copy.deepcopy(GOOD)
    document["pi"]["name"] = "Test\x00Person"
    document["requests"][0]["target"]["name"] = "a\x1b[31mred"
    found = problems(json.dumps(document))
    assert found["pi.name"].startswith("contains the control character U+0000")
    assert found["requests[0].target.name"].startswith("contains the control character U+001B")


def test_line_breaks_only_in_free_text() -> None:
    document = copy.deepcopy(GOOD)
    document["title"] = "A title\nwrapped over\tlines"
    assert parse_document(Proposal, document).title == "A title\nwrapped over\tlines"
    document["requests"][0]["label"] = "two\nlines"
    assert problems(document) == {"requests[0].label": "contains a tab or line break (U+000A) at character 4; this field is one line of text"}
    schedule = {"observatory": "x", "semester": "2027A", "nights": [{"night": "2027-04-01", "status": "shutdown", "note": "storm\nno power"}]}
    assert parse_document(InstrumentSchedule, schedule).nights[0].note == "storm\nno power"


def test_lone_surrogates_are_refused() -> None:
    # JSON's \ud800 escape gives a string that UTF-8 (and so PostgreSQL) cannot hold.
    found = problems('{"id": "T-1", "semester": "2027A", "title": "a\\ud800b"}')
    assert "title" in found


@pytest.mark.parametrize(("field", "value"), [("hours_requested", 10**400), ("hours_requested", 1e300), ("magnitude", float("nan"))])
def test_huge_and_non_finite_numbers_are_field_problems(field: str, value: object) -> None:
    document = copy.deepcopy(GOOD)
    request = document["requests"][0]
    (request["brightness"] if field == "magnitude" else request)[field] = value
    found = problems(document)
    assert len(found) == 1 and next(iter(found)).endswith(field)


def test_huge_integer_angles_are_field_problems() -> None:
    document = copy.deepcopy(GOOD)
    document["requests"][0]["target"]["ra"] = 10**400  # float() of it overflows
    assert problems(document) == {"requests[0].target.ra": "angle is out of range"}


def test_problem_lists_are_capped_and_unknown_keys_bounded() -> None:
    document = {**GOOD, **{"x" * 10_000 + str(i): 1 for i in range(5_000)}}
    with pytest.raises(DocumentError) as caught:
        parse_document(Proposal, document)
    error = caught.value
    assert error.total == 5_000 and len(error.problems) == MAX_PROBLEMS + 1
    assert error.problems[-1].message == f"and {5_000 - MAX_PROBLEMS} more problems (only the first {MAX_PROBLEMS} are listed)"
    assert len(json.dumps(error.as_dict())) < 20_000  # 50 MB of key names answered in a few kilobytes


def test_a_mapping_handed_over_is_measured_too() -> None:
    deep: object = 1
    for _ in range(500):
        deep = [deep]
    assert problems({**GOOD, "title": deep}) == {"": f"is nested more than {MAX_DEPTH} levels deep"}

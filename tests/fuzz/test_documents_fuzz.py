"""Property-based fuzzing of the document readers and models: a poisoned document is a DocumentError, never anything else.

Thousands of mutated demo documents (see ``mutations``) go through
``parse_document`` as Python data, JSON text and YAML text. Each must be refused
with a :class:`DocumentError` whose problems are few and each one line of bounded
length; no other exception may escape. Unpoisoned mutations may be valid, and then
what the service would store must be storable: JSON without NaN or infinities
(RFC 8259 §6 has none) and text PostgreSQL can hold (no NUL, valid UTF-8).
"""

from __future__ import annotations

import json
from typing import Any

import pytest
from hypothesis import given
from hypothesis import strategies as st

from feasibility.documents import DocumentError, InstrumentSchedule, Observatory, Proposal, parse_document
from feasibility.documents.problems import MAX_FIELD_CHARS, MAX_MESSAGE_CHARS, MAX_PROBLEMS

from . import tally
from .mutations import BASES, ENCODINGS, fuzz, ordinary_values, poisoned

MODELS: dict[str, type] = {"proposal": Proposal, "observatory": Observatory, "schedule": InstrumentSchedule}


def assert_well_formed(error: DocumentError) -> None:
    """At most MAX_PROBLEMS problems plus one counting line; each one line, bounded, naming a field or the document."""
    assert 1 <= len(error.problems) <= MAX_PROBLEMS + 1
    for problem in error.problems:
        assert len(problem.field) <= MAX_FIELD_CHARS and len(problem.message) <= MAX_MESSAGE_CHARS
        assert problem.message and "\n" not in problem.message and "\n" not in problem.field
        assert not any(ord(c) < 0x20 or 0x7F <= ord(c) < 0xA0 for c in problem.field + problem.message)
    assert len(error.describe().splitlines()) == len(error.problems)


def assert_storable(model: Any) -> None:
    text = json.dumps(model.model_dump(mode="json", by_alias=True), allow_nan=False, ensure_ascii=False)
    assert "\x00" not in text and "\\u0000" not in text
    text.encode("utf-8")  # no lone surrogates


def _check(kind: str, document: Any, done: list[str], *, must_fail: bool) -> None:
    tally.count(f"document parsers ({kind})")
    try:
        model = parse_document(MODELS[kind], document, kind)
    except DocumentError as error:
        assert_well_formed(error)
        return
    except Exception as exc:  # noqa: BLE001 - the property under test: nothing else escapes
        tally.count(f"document parsers ({kind})", server_error=True)
        pytest.fail(f"{type(exc).__name__} escaped parse_document after {done}: {exc}")
    assert not must_fail, f"a poisoned {kind} was accepted: {done}"
    assert_storable(model)


@pytest.mark.parametrize("encoding", ENCODINGS)
@fuzz(300)
@given(data=st.data())
def test_poisoned_proposals_are_refused_with_field_problems(encoding: str, data: st.DataObject) -> None:
    document, done = data.draw(poisoned("proposal", encoding))
    _check("proposal", document, done, must_fail=True)


@pytest.mark.parametrize("kind", ["observatory", "schedule"])
@fuzz(250)
@given(data=st.data())
def test_poisoned_observatories_and_schedules_are_refused(kind: str, data: st.DataObject) -> None:
    document, done = data.draw(poisoned(kind))
    _check(kind, document, done, must_fail=True)


@fuzz(300)
@given(data=st.data())
def test_ordinary_mutations_are_valid_or_field_problems(data: st.DataObject) -> None:
    """Wrong types, missing and repeated fields without poison: valid (and storable) or refused, never a crash."""
    kind = data.draw(st.sampled_from(sorted(MODELS)))
    document = json.loads(json.dumps(BASES[kind]))
    for _ in range(data.draw(st.integers(1, 3))):
        paths = _leaf_paths(document)
        path = data.draw(st.sampled_from(paths))
        parent = document
        for key in path[:-1]:
            parent = parent[key]
        parent[path[-1]] = data.draw(ordinary_values)
    _check(kind, document, ["ordinary values"], must_fail=False)


@fuzz(300)
@given(text=st.one_of(st.text(max_size=200), st.binary(max_size=200), st.text("[]{}:,\"'&*!- \n0123456789.eE+", max_size=400)))
def test_arbitrary_text_is_refused_cleanly(text: str | bytes) -> None:
    _check("proposal", text, [repr(text[:40])], must_fail=True)


def _leaf_paths(value: Any, prefix: tuple[Any, ...] = ()) -> list[tuple[Any, ...]]:
    if isinstance(value, dict):
        return [p for k, v in value.items() for p in _leaf_paths(v, (*prefix, k))]
    if isinstance(value, list):
        return [p for i, v in enumerate(value) for p in _leaf_paths(v, (*prefix, i))]
    return [prefix]

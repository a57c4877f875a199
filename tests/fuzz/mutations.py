"""Hypothesis strategies that poison the packaged demo documents (invented data, used here only as a shape to mutate).

A drawn document is the demo proposal, observatory description or schedule with
0-2 ordinary mutations (a key removed, a value replaced by another ordinary value,
a list item repeated) and then 1-2 poisons, each of which makes any document
invalid wherever it lands:

* an unknown key (its name may hold control characters);
* text holding a control character or a lone surrogate;
* a number that is not finite (NaN, ±infinity, ``1e999``), larger than any document
  allows (beyond 1e15), or written with thousands of digits;
* nesting far deeper than the readers accept.

:func:`poisoned` gives the document as Python data, JSON text or YAML text. Poisons
that no Python value can carry through a serialiser (a 5,000-digit literal, nesting
deeper than the serialisers recurse) are written into the text after dumping.
"""

from __future__ import annotations

import copy
import json
from importlib import resources
from typing import Any

import yaml
from hypothesis import HealthCheck, settings
from hypothesis import strategies as st

__all__ = ["BASES", "ENCODINGS", "fuzz", "ordinary_values", "poisoned"]


def fuzz(examples: int) -> settings:
    """Reproducible runs (derandomized, no example database), no time limit per example; fixtures shared by the examples."""
    return settings(
        max_examples=examples,
        derandomize=True,
        database=None,
        deadline=None,
        suppress_health_check=[HealthCheck.too_slow, HealthCheck.data_too_large, HealthCheck.function_scoped_fixture],
    )


def _demo(path: str) -> dict[str, Any]:
    return yaml.safe_load((resources.files("feasibility") / "data" / path).read_text(encoding="utf-8"))


#: The shapes to mutate: one demo document of each kind, as plain JSON-like data.
BASES: dict[str, dict[str, Any]] = {
    "proposal": json.loads(json.dumps(_demo("proposals/SQ-2027A-005.yaml"), default=str)),
    "observatory": json.loads(json.dumps(_demo("observatory.yaml"), default=str)),
    "schedule": json.loads(json.dumps(_demo("schedule-2027A.yaml"), default=str)),
}
BASES["schedule"]["nights"] = BASES["schedule"]["nights"][:20]  # the shape is what matters; short keeps each example fast
ENCODINGS = ("data", "json", "yaml")
_DUMPER = getattr(yaml, "CSafeDumper", yaml.SafeDumper)

Path = tuple[Any, ...]

#: Control characters no field accepts (tab, line feed and carriage return are allowed in free text).
_FORBIDDEN = [chr(c) for c in [*range(0x00, 0x09), 0x0B, 0x0C, *range(0x0E, 0x20), *range(0x7F, 0xA0)]]
_SURROGATES = ["\ud800", "\udbff", "\udc00", "\udfff"]

#: Text-level poisons, written where a marker stands once the document is dumped (JSON, YAML).
_TEXT_NUMBERS = {
    "json": ["NaN", "Infinity", "-Infinity", "1e999", "-1e999", "9" * 5000, "-" + "1" * 4400, "0." + "1" * 300],
    "yaml": [".nan", ".inf", "-.inf", "1.0e+999", "9" * 5000, "-" + "1" * 4400, "0." + "1" * 300],
}

ordinary_values = st.one_of(
    st.none(),
    st.booleans(),
    st.integers(min_value=-(10**6), max_value=10**6),
    st.floats(min_value=-1e6, max_value=1e6, allow_nan=False),
    st.text(st.characters(codec="utf-8", categories=["L", "N", "P", "Zs"]), max_size=20),
    st.lists(st.integers(0, 100), max_size=3),
    st.dictionaries(st.text("abcxyz", min_size=1, max_size=4), st.integers(0, 9), max_size=2),
)


def _paths(value: Any, prefix: Path = ()) -> list[Path]:
    """Every place in ``value`` (the root excluded), parents before children."""
    found: list[Path] = []
    if isinstance(value, dict):
        items: Any = value.items()
    elif isinstance(value, list):
        items = enumerate(value)
    else:
        return found
    for key, child in items:
        found.append((*prefix, key))
        found.extend(_paths(child, (*prefix, key)))
    return found


def _get(document: Any, path: Path) -> Any:
    for key in path:
        document = document[key]
    return document


def _set(document: Any, path: Path, value: Any) -> None:
    _get(document, path[:-1])[path[-1]] = value


@st.composite
def _ordinary_mutation(draw: st.DrawFn, document: dict[str, Any]) -> None:
    paths = _paths(document)
    path = draw(st.sampled_from(paths))
    parent = _get(document, path[:-1])
    kind = draw(st.sampled_from(["remove", "replace", "repeat"]))
    if kind == "remove":
        del parent[path[-1]]
    elif kind == "replace":
        parent[path[-1]] = draw(ordinary_values)
    elif isinstance(parent, list):
        parent.insert(path[-1], copy.deepcopy(parent[path[-1]]))


@st.composite
def _poison(draw: st.DrawFn, document: dict[str, Any], encoding: str, markers: dict[str, str]) -> str:
    """Poison ``document`` in place; return what was done (for the failure report)."""
    kind = draw(st.sampled_from(["unknown key", "control text", "bad number", "deep nesting"]))
    mappings = [()] + [p for p in _paths(document) if isinstance(_get(document, p), dict)]
    places = _paths(document)
    if kind == "unknown key":
        where = draw(st.sampled_from(mappings))
        name = "x_" + draw(st.text(st.sampled_from(["a", "é", "\x00", "\x1b", "\u202e", " "]), max_size=8))
        _get(document, where)[name] = draw(ordinary_values)
        return f"{kind} {name!r} at {where}"
    where = draw(st.sampled_from(places))
    if kind == "control text":
        alphabet = _FORBIDDEN + (_SURROGATES if encoding != "yaml" else [])
        bad = draw(st.sampled_from(alphabet))
        text = "a" + draw(st.text(max_size=5)) + bad + draw(st.text(max_size=5)) + "z"  # inside: surrounding whitespace is only stripped
        _set(document, where, text)
        return f"{kind} {text!r} at {where}"
    if encoding == "data":
        if kind == "bad number":
            number = draw(st.sampled_from([float("nan"), float("inf"), float("-inf"), 1e300, -1e300, 10**400, -(10**5000), 2**63]))
        else:
            number = 1
            for _ in range(draw(st.integers(65, 150))):
                number = [number] if draw(st.booleans()) else {"a": number}
        _set(document, where, number)
        return f"{kind} at {where}"
    marker = f"POISONMARK{len(markers)}"
    if kind == "bad number":
        markers[marker] = draw(st.sampled_from(_TEXT_NUMBERS[encoding]))
    else:
        depth = draw(st.integers(65, 3000))
        markers[marker] = "[" * depth + "1" + "]" * depth
    _set(document, where, marker)
    return f"{kind} {markers[marker][:20]}... at {where}"


@st.composite
def poisoned(draw: st.DrawFn, kind: str, encoding: str | None = None) -> tuple[Any, list[str]]:
    """A poisoned document of ``kind``: Python data, or JSON or YAML text; and what was done to it."""
    encoding = encoding or draw(st.sampled_from(ENCODINGS))
    document = copy.deepcopy(BASES[kind])
    done: list[str] = [f"as {encoding}"]
    for _ in range(draw(st.integers(0, 2))):
        draw(_ordinary_mutation(document))
    markers: dict[str, str] = {}
    for _ in range(draw(st.integers(1, 2))):
        done.append(draw(_poison(document, encoding, markers)))
    if encoding == "data":
        return document, done
    if encoding == "json":
        text = json.dumps(document, ensure_ascii=draw(st.booleans()))
        for marker, token in markers.items():
            text = text.replace(json.dumps(marker), token)
    else:
        text = yaml.dump(document, Dumper=_DUMPER, allow_unicode=True, sort_keys=False, default_flow_style=draw(st.sampled_from([None, True, False])))
        for marker, token in markers.items():
            text = text.replace(marker, token)
    return text, done

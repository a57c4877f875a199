"""Safe reading of JSON and YAML: the one place where untrusted text becomes Python data.

Every entry point (the API, the admin API, the upload page and the command line)
reads documents through :func:`read_data` or :func:`read_file`, which bound what a
hostile document can cost before any parser builds it:

* size: at most :data:`MAX_DOCUMENT_BYTES` (the web app's ``MAX_CONTENT_LENGTH``
  is the same number; a file is read no further than that);
* nesting: at most :data:`MAX_DEPTH` levels, measured without recursion (JSON by a
  linear scan of its brackets, YAML from the parser's event stream), so neither
  parser ever recurses deeply;
* size of the data: at most :data:`MAX_VALUES` values, YAML aliases counted as the
  values they stand for (so "billion laughs" documents are refused before they are built);
* numbers: a literal of at most :data:`MAX_NUMBER_CHARS` characters (no
  4,300-digit integer reaches ``int()``) and finite (``NaN``, ``Infinity``,
  ``1e999`` and YAML's ``.inf`` are refused; RFC 8259 §6 has no such JSON numbers).

Each refusal is an :class:`UnreadableDocument` (or :class:`DocumentTooLarge`) with a
document-level problem, never another exception.
"""

from __future__ import annotations

import json
import math
import re
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import numpy as np
import yaml
from yaml.constructor import SafeConstructor

from feasibility.documents.problems import DocumentTooLarge, Problem, UnreadableDocument

__all__ = [
    "MAX_DEPTH",
    "MAX_DOCUMENT_BYTES",
    "MAX_NUMBER_CHARS",
    "MAX_VALUES",
    "data_shape_problem",
    "read_data",
    "read_file",
]

#: Largest document accepted, in bytes (a proposal is a few kilobytes; a bulk submission of 500 is about 2 MB).
MAX_DOCUMENT_BYTES = 4 * 1024 * 1024
#: Deepest nesting of mappings and lists (the documents need 6).
MAX_DEPTH = 64
#: Most values (mappings, lists and scalars) in what one text holds.
MAX_VALUES = 250_000
#: Longest number literal, in characters.
MAX_NUMBER_CHARS = 100


class _Refused(Exception):
    """A reason to refuse the text, raised from inside a parser's hooks."""


def read_file(path: str | Path, document: str | None = None) -> bytes:
    """The bytes of ``path``, read no further than :data:`MAX_DOCUMENT_BYTES` (so ``/dev/zero`` is refused, not read)."""
    path = Path(path)
    name = document or str(path)
    try:
        with path.open("rb") as handle:
            data = handle.read(MAX_DOCUMENT_BYTES + 1)
    except OSError as exc:
        raise UnreadableDocument([Problem("", f"cannot read {path}: {exc.strerror or exc}")], name) from None
    if len(data) > MAX_DOCUMENT_BYTES:
        raise DocumentTooLarge(MAX_DOCUMENT_BYTES, name)
    return data


def read_data(text: str | bytes, document: str = "document", *, max_values: int = MAX_VALUES) -> Any:
    """Parse JSON (the fast path) or YAML text into Python data, within the bounds above; raise :class:`UnreadableDocument`."""
    if len(text) > MAX_DOCUMENT_BYTES:
        raise DocumentTooLarge(MAX_DOCUMENT_BYTES, document)
    if isinstance(text, bytes):
        try:
            text = text.decode("utf-8")
        except UnicodeDecodeError:
            raise UnreadableDocument([Problem("", "is not UTF-8 text")], document) from None
    try:
        deep = False
        if text.lstrip()[:1] in ("{", "["):
            data, ok, deep = _read_json(text, max_values)
            if ok:
                return data
        try:
            return _read_yaml(text, max_values)
        except _Refused:
            if deep:  # libyaml stops at its own depth limit before the event scan can: say why
                raise _Refused(_too_deep()) from None
            raise
    except _Refused as refusal:
        raise UnreadableDocument([Problem("", str(refusal))], document) from None


def data_shape_problem(data: Any, *, max_values: int = MAX_VALUES) -> str | None:
    """Why already-parsed ``data`` is too deep or too big (walked without recursion), or None."""
    stack: list[tuple[Any, int]] = [(data, 1)]
    count = 0
    while stack:
        item, depth = stack.pop()
        count += 1
        if count > max_values:
            return _too_many(max_values)
        if isinstance(item, dict):
            children: Any = item.values()
        elif isinstance(item, (list, tuple)):
            children = item
        else:
            continue
        if depth > MAX_DEPTH:
            return _too_deep()
        stack.extend((child, depth + 1) for child in children)
    return None


# --- JSON ---------------------------------------------------------------------------------

#: A JSON string, or an unterminated one running to the end (so a scan never restarts inside it).
_JSON_STRING = re.compile(r'"(?:[^"\\]++|\\[\s\S]?)*+(?:"|\Z)')
_NOT_BRACKET = re.compile(r"[^\[\]{}]++")


def _read_json(text: str, max_values: int) -> tuple[Any, bool, bool]:
    """``(data, True, False)``; or ``(None, False, too_deep)`` when the text is not JSON within the depth bound.

    Text that is not JSON may be YAML in flow style: the YAML reader decides then.
    """
    skeleton = _JSON_STRING.sub("", text)
    brackets = _NOT_BRACKET.sub("", skeleton).encode("ascii")
    if brackets:
        codes = np.frombuffer(brackets, dtype=np.uint8)
        steps = np.where((codes == ord("[")) | (codes == ord("{")), 1, -1)
        if int(np.cumsum(steps).max()) > MAX_DEPTH:
            return None, False, True  # the YAML reader measures the depth exactly (brackets in '...' strings)
    if skeleton.count(",") + len(brackets) // 2 + 1 > max_values:
        raise _Refused(_too_many(max_values))
    try:
        return json.loads(text, parse_int=_json_int, parse_float=_json_float, parse_constant=_json_constant), True, False
    except ValueError:
        return None, False, False


def _json_int(literal: str) -> int:
    _check_length(literal)
    return int(literal)


def _json_float(literal: str) -> float:
    _check_length(literal)
    return _finite(float(literal), literal)


def _json_constant(literal: str) -> float:
    raise _Refused(f"{literal} is not a number a document may hold (numbers must be finite)")


# --- YAML ---------------------------------------------------------------------------------

#: libyaml's parser when PyYAML has it, else the pure-Python one; both safe (plain data only).
_Base: Any = getattr(yaml, "CSafeLoader", yaml.SafeLoader)


class _Loader(_Base):
    """The safe loader, with bounded and finite numbers."""


def _yaml_int(loader: SafeConstructor, node: yaml.ScalarNode) -> int:
    _check_length(node.value)
    return int(SafeConstructor.construct_yaml_int(loader, node))


def _yaml_float(loader: SafeConstructor, node: yaml.ScalarNode) -> float:
    _check_length(node.value)
    return _finite(float(SafeConstructor.construct_yaml_float(loader, node)), node.value)


def _yaml_timestamp(loader: SafeConstructor, node: yaml.ScalarNode) -> Any:
    try:
        return SafeConstructor.construct_yaml_timestamp(loader, node)
    except (ValueError, OverflowError):
        raise _Refused(f"holds the date or time {_short(node.value)}, which does not exist") from None


_Loader.add_constructor("tag:yaml.org,2002:int", _yaml_int)
_Loader.add_constructor("tag:yaml.org,2002:float", _yaml_float)
_Loader.add_constructor("tag:yaml.org,2002:timestamp", _yaml_timestamp)


def _read_yaml(text: str, max_values: int) -> Any:
    try:
        _check_yaml_events(yaml.parse(text, Loader=_Base), max_values)
        return yaml.load(text, Loader=_Loader)
    except yaml.YAMLError as exc:
        mark = getattr(exc, "problem_mark", None)
        where = f" at line {mark.line + 1}, column {mark.column + 1}" if mark is not None else ""
        raise _Refused(f"is neither valid JSON nor YAML{where}") from None


def _check_yaml_events(events: Iterator[yaml.Event], max_values: int) -> None:
    """Refuse nesting deeper than MAX_DEPTH and more than ``max_values`` values, aliases expanded, from the event stream.

    An alias counts as every value of the part it names; an alias to a part still
    open (a part containing itself) is refused.
    """
    sizes: dict[str, int] = {}  # anchor -> values in the part it names
    open_parts: list[tuple[str | None, int]] = []  # (anchor, values counted before the part began)
    total = 0
    for event in events:
        if isinstance(event, yaml.AliasEvent):
            if event.anchor not in sizes:
                raise _Refused(f"the alias *{_short(event.anchor or '')} refers to a part that contains it, or to no part")
            total += sizes[event.anchor]
        elif isinstance(event, (yaml.ScalarEvent, yaml.MappingStartEvent, yaml.SequenceStartEvent)):
            total += 1
            if isinstance(event, yaml.ScalarEvent):
                if event.anchor is not None:
                    sizes[event.anchor] = 1
            else:
                open_parts.append((event.anchor, total - 1))
                if len(open_parts) > MAX_DEPTH:
                    raise _Refused(_too_deep())
        elif isinstance(event, (yaml.MappingEndEvent, yaml.SequenceEndEvent)):
            anchor, before = open_parts.pop()
            if anchor is not None:
                sizes[anchor] = total - before
        if total > max_values:
            raise _Refused(_too_many(max_values))


# --- shared -------------------------------------------------------------------------------


def _check_length(literal: str) -> None:
    if len(literal) > MAX_NUMBER_CHARS:
        raise _Refused(f"holds a number written with {len(literal)} characters; at most {MAX_NUMBER_CHARS} are read")


def _finite(value: float, literal: str) -> float:
    if not math.isfinite(value):
        raise _Refused(f"holds the number {_short(literal)}, which is not finite (too large, infinite or not a number)")
    return value


def _short(text: str) -> str:
    return text if len(text) <= 40 else text[:39] + "…"


def _too_deep() -> str:
    return f"is nested more than {MAX_DEPTH} levels deep"


def _too_many(max_values: int) -> str:
    return f"holds more than {max_values} values"

"""The base of every document model: one place for the rules every field of every document follows.

* Unknown fields are errors, not silently dropped; text is stripped of surrounding whitespace.
* Numbers are finite (``allow_inf_nan=False``) and at most :data:`MAX_MAGNITUDE` in size: no
  quantity of these documents comes near it in its unit, and a bound keeps the engine's
  arithmetic finite and the stored JSON valid (PostgreSQL's JSON has no infinities).
* Text holds no control characters (C0, DEL, C1: NUL and the like, which PostgreSQL cannot
  store in text) and no lone surrogates (not encodable as UTF-8). Names, identifiers, labels
  and e-mail addresses are one line. Free-text fields a model lists in ``multiline_fields``
  (the proposal's title, a schedule night's note) may also hold tabs and line breaks.

The published JSON Schema states these rules where it can (:func:`_schema_rules`): each number
property without a tighter bound gets ``minimum``/``maximum`` of ±:data:`MAX_MAGNITUDE`, each text
property without a pattern of its own a pattern refusing control characters (tabs and line breaks
allowed in the multi-line fields), and each mapping's keys the same.

The checks run after each field's own validation (so the error names the field) and
so after surrounding whitespace is stripped: a vertical tab or NEL at either end of a
name is whitespace that is dropped, never stored.
"""

from __future__ import annotations

import math
import re
from typing import Any, ClassVar

from pydantic import BaseModel, ConfigDict, ValidationInfo, field_validator

__all__ = ["CONTROL_FREE_PATTERN", "LAYOUT_ALLOWED_PATTERN", "MAX_MAGNITUDE", "DocumentModel", "text_problem", "value_problem"]

#: Largest absolute value of any number in a document.
MAX_MAGNITUDE = 1e15

_CONTROL = re.compile(r"[\x00-\x1f\x7f-\x9f\ud800-\udfff]")
_CONTROL_BUT_LAYOUT = re.compile(r"[\x00-\x08\x0b\x0c\x0e-\x1f\x7f-\x9f\ud800-\udfff]")

#: The same rules as JSON Schema patterns (ECMA-262 and Python both read ``\uXXXX``). Lone surrogates are left
#: out: a pattern cannot refuse them without refusing every character outside the Basic Multilingual Plane.
CONTROL_FREE_PATTERN = r"^[^\u0000-\u001f\u007f-\u009f]*$"
LAYOUT_ALLOWED_PATTERN = r"^[^\u0000-\u0008\u000b\u000c\u000e-\u001f\u007f-\u009f]*$"


def _schema_rules(schema: dict[str, Any], model: type[BaseModel]) -> None:
    """State this module's rules in a model's published JSON Schema (``json_schema_extra``), in place."""
    multiline: frozenset[str] = getattr(model, "multiline_fields", frozenset())
    by_key = {field.serialization_alias or field.alias or name: name for name, field in model.model_fields.items()}
    for key, node in schema.get("properties", {}).items():
        _state_rules(node, by_key.get(key, key) in multiline)


def _state_rules(node: Any, multiline: bool) -> None:
    """Add the bounds and text patterns to one property's schema (and its alternatives, items and values)."""
    if not isinstance(node, dict) or "$ref" in node or "enum" in node or "const" in node:
        return
    for key in ("anyOf", "oneOf", "allOf"):
        for alternative in node.get(key, []):
            _state_rules(alternative, multiline)
    kind = node.get("type")
    if kind == "string" and "pattern" not in node:
        node["pattern"] = LAYOUT_ALLOWED_PATTERN if multiline else CONTROL_FREE_PATTERN
    elif kind in ("number", "integer"):
        if "minimum" not in node and "exclusiveMinimum" not in node:
            node["minimum"] = -MAX_MAGNITUDE
        if "maximum" not in node and "exclusiveMaximum" not in node:
            node["maximum"] = MAX_MAGNITUDE
    elif kind == "array":
        _state_rules(node.get("items"), multiline)
    elif kind == "object" and "properties" not in node:
        node.setdefault("propertyNames", {"pattern": CONTROL_FREE_PATTERN})
        _state_rules(node.get("additionalProperties"), multiline)


class DocumentModel(BaseModel):
    """Base of every part of the three documents (see the module's rules)."""

    model_config = ConfigDict(extra="forbid", str_strip_whitespace=True, allow_inf_nan=False, json_schema_extra=_schema_rules)

    #: Fields of free text that may hold tabs and line breaks.
    multiline_fields: ClassVar[frozenset[str]] = frozenset()

    @field_validator("*", mode="after")
    @classmethod
    def _plain_values(cls, value: Any, info: ValidationInfo) -> Any:
        problem = value_problem(value, multiline=info.field_name in cls.multiline_fields)
        if problem is not None:
            raise ValueError(problem)
        return value


def text_problem(text: str, *, multiline: bool = False) -> str | None:
    """What is wrong with ``text`` as the text of a field, or None."""
    found = (_CONTROL_BUT_LAYOUT if multiline else _CONTROL).search(text)
    if found is None:
        return None
    char = found.group()
    where = f"at character {found.start() + 1}"
    if "\ud800" <= char <= "\udfff":
        return f"contains a lone surrogate (U+{ord(char):04X}) {where}, which is not a character"
    if char in "\t\n\r":
        return f"contains a tab or line break (U+{ord(char):04X}) {where}; this field is one line of text"
    return f"contains the control character U+{ord(char):04X} {where}; only printable text is allowed"


def value_problem(value: Any, *, multiline: bool = False) -> str | None:
    """What is wrong with a validated field value (text, a number, or a list or mapping of them), or None."""
    if isinstance(value, str):
        return text_problem(value, multiline=multiline)
    if isinstance(value, float) or (isinstance(value, int) and not isinstance(value, bool)):
        if not math.isfinite(value) or abs(value) > MAX_MAGNITUDE:
            return f"is out of range: numbers in a document lie between -{MAX_MAGNITUDE:g} and {MAX_MAGNITUDE:g}"
        return None
    if isinstance(value, (list, tuple)):
        for index, item in enumerate(value):
            problem = value_problem(item, multiline=multiline) if not isinstance(item, BaseModel) else None
            if problem is not None:
                return f"item {index}: {problem}"
        return None
    if isinstance(value, dict):
        for key, item in value.items():
            problem = value_problem(key) or (value_problem(item, multiline=multiline) if not isinstance(item, BaseModel) else None)
            if problem is not None:
                return f"entry {str(key)[:40]!r}: {problem}"
        return None
    return None

"""Validation problems in our words: the field named plainly, the allowed range, the value given.

pydantic reports a problem as a type code, a location and a library sentence
("Input should be greater than 0", "String should match pattern '^[^@\\s]+@…'").
:func:`plain_message` turns each into a sentence a proposer can act on: it looks
the field up in the document's model to state its whole allowed range ("hours
requested must be more than 0 and at most 2000; got 0"), explains patterns by
what they stand for, and for an unknown key suggests the closest known one.
"""

from __future__ import annotations

import difflib
import types
import typing
from collections.abc import Mapping
from typing import Any

import annotated_types
from pydantic import BaseModel
from pydantic.fields import FieldInfo

__all__ = ["plain_message", "plain_name"]

#: How a field is called in messages, when its key alone does not say it plainly.
_NAMES = {
    "ra": "right ascension",
    "dec": "declination",
    "pi": "principal investigator",
    "snr": "signal-to-noise goal",
    "id": "proposal id",
    "email": "e-mail address",
    "error": "magnitude uncertainty",
    "pm_ra_cosdec_mas_yr": "proper motion in right ascension (mas per year)",
    "pm_dec_mas_yr": "proper motion in declination (mas per year)",
}

#: Unit suffixes of field keys and how messages say them.
_UNITS = (
    ("_arcsec2", " (mag per square arcsecond)"),
    ("_e_s_pix", " (electrons per second per pixel)"),
    ("_e_adu", " (electrons per ADU)"),
    ("_deg", " (degrees)"),
    ("_arcsec", " (arcseconds)"),
    ("_nm", " (nm)"),
    ("_jy", " (Jy)"),
    ("_s", " (seconds)"),
    ("_m", " (metres)"),
    ("_e", " (electrons)"),
)

#: What a field's pattern stands for, by field key.
_PATTERNS = {
    "email": "must be an e-mail address such as name@example.org",
    "id": "must be 1 to 64 letters, digits, '.', '_' or '-', beginning with a letter or digit",
}

_DATE = "must be a date such as 2027-04-01"
_DATETIME = "must be a date and time such as 2027-05-01T22:00:00Z (UTC unless a zone is given)"


def plain_name(location: tuple[int | str, ...]) -> str:
    """The field a location points at, in words: ``hours_requested`` → "hours requested"."""
    key = next((part for part in reversed(location) if isinstance(part, str)), "")
    if key in _NAMES:
        return _NAMES[key]
    for suffix, unit in _UNITS:
        if key.endswith(suffix) and len(key) > len(suffix):
            return key[: -len(suffix)].replace("_", " ") + unit
    return key.replace("_", " ")


def plain_message(error: Mapping[str, Any], model: type[BaseModel] | None = None) -> str:
    """One pydantic error (from ``ValidationError.errors()``) as a sentence in our words."""
    kind = str(error.get("type", ""))
    location = tuple(error.get("loc", ()))
    context = error.get("ctx") or {}
    given = error.get("input")
    name = plain_name(location)
    field = _field_at(model, location) if model is not None else None
    if kind == "missing":
        return "is required"
    if kind == "extra_forbidden":
        return _unknown_key(model, location)
    if kind in ("value_error", "assertion_error"):
        message = str(error.get("msg", ""))
        for prefix in ("Value error, ", "Assertion failed, "):
            message = message.removeprefix(prefix)
        return message
    if kind in ("greater_than", "greater_than_equal", "less_than", "less_than_equal"):
        allowed = _range(field) or _range_from_context(kind, context)
        return f"{name} must be {allowed}; got {_shown(given)}"
    if kind == "finite_number":
        return f"{name} must be a finite number; got {_shown(given)}"
    if kind == "string_pattern_mismatch":
        key = next((part for part in reversed(location) if isinstance(part, str)), "")
        return f"{name} {_PATTERNS.get(key, 'has characters that are not allowed here')}; got {_shown(given)}"
    if kind == "string_too_short":
        least = context.get("min_length", 1)
        return f"{name} must not be empty" if least == 1 else f"{name} must have at least {least} characters"
    if kind == "string_too_long":
        return f"{name} must have at most {context.get('max_length')} characters; got {len(str(given))}"
    if kind == "too_short":
        least = context.get("min_length", 1)
        return f"{name} must have at least {least} {'entry' if least == 1 else 'entries'}"
    if kind == "too_long":
        return f"{name} must have at most {context.get('max_length')} entries; got {context.get('actual_length')}"
    if kind == "literal_error":
        return f"{name} must be {context.get('expected')}; got {_shown(given)}"
    if kind in ("float_parsing", "float_type", "int_parsing", "int_type", "int_from_float", "decimal_parsing"):
        whole = "a whole number" if kind.startswith("int") else "a number"
        return f"{name} must be {whole}; got {_shown(given)}"
    if kind in ("bool_parsing", "bool_type"):
        return f"{name} must be true or false; got {_shown(given)}"
    if kind in ("string_type", "string_unicode"):
        return f"{name} must be text; got {_kind_of(given)}"
    if kind in ("dict_type", "model_type", "model_attributes_type", "mapping_type"):
        return f"{name} must be a mapping of fields; got {_kind_of(given)}"
    if kind in ("list_type", "tuple_type", "iterable_type"):
        return f"{name} must be a list; got {_kind_of(given)}"
    if kind.startswith("datetime"):
        return f"{name} {_DATETIME}; got {_shown(given)}"
    if kind.startswith("date"):
        return f"{name} {_DATE}; got {_shown(given)}"
    message = str(error.get("msg", "is not valid"))
    for library, ours in (("Input should be", "must be"), ("String should", "must"), ("List should", "must"), ("Value should", "must")):
        if message.startswith(library):
            return f"{name} {ours}{message[len(library) :]}"
    return message


def _shown(value: object) -> str:
    if isinstance(value, str):
        return repr(value if len(value) <= 60 else value[:57] + "...")
    if isinstance(value, (int, float)) and not isinstance(value, bool):
        return _number(value)
    return _kind_of(value)


def _kind_of(value: object) -> str:
    if isinstance(value, dict):
        return "a mapping"
    if isinstance(value, list):
        return "a list"
    if value is None:
        return "nothing"
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, (int, float)):
        return _number(value)
    return f"a {type(value).__name__}"


def _number(value: object) -> str:
    """A number as written in a message; an integer too large for a float is described by its length."""
    if isinstance(value, int) and abs(value) >= 10**15:
        # From the bit length: str() of a Python int over 4300 digits raises, and a mapping handed in needs no reader.
        return f"a number of about {int(abs(value).bit_length() * 0.30103) + 1} digits"
    return f"{value:g}" if isinstance(value, (int, float)) else str(value)


def _range(field: FieldInfo | None) -> str | None:
    """The whole allowed range of a numeric field from its constraints, e.g. "more than 0 and at most 2000"."""
    if field is None:
        return None
    low = high = None
    for item in field.metadata:
        if isinstance(item, annotated_types.Gt):
            low = f"more than {_number(item.gt)}"
        elif isinstance(item, annotated_types.Ge):
            low = f"at least {_number(item.ge)}"
        elif isinstance(item, annotated_types.Lt):
            high = f"less than {_number(item.lt)}"
        elif isinstance(item, annotated_types.Le):
            high = f"at most {_number(item.le)}"
    parts = [part for part in (low, high) if part]
    return " and ".join(parts) if parts else None


def _range_from_context(kind: str, context: dict[str, Any]) -> str:
    words = {
        "greater_than": ("more than", "gt"),
        "greater_than_equal": ("at least", "ge"),
        "less_than": ("less than", "lt"),
        "less_than_equal": ("at most", "le"),
    }
    text, key = words[kind]
    return f"{text} {_number(context.get(key))}"


def _unknown_key(model: type[BaseModel] | None, location: tuple[int | str, ...]) -> str:
    """ "is not a known field", with the closest known key when one is close (difflib)."""
    key = str(location[-1]) if location else ""
    parent = _model_at(model, location[:-1]) if model is not None else None
    if parent is None:
        return "is not a known field"
    known = [field.validation_alias if isinstance(field.validation_alias, str) else name for name, field in parent.model_fields.items()]
    close = difflib.get_close_matches(key, known, n=1, cutoff=0.6)
    if close:
        return f"is not a known field; did you mean {close[0]!r}?"
    return f"is not a known field (known: {', '.join(known)})"


def _field_at(model: type[BaseModel] | None, location: tuple[int | str, ...]) -> FieldInfo | None:
    """The model field a location points at (through nested models, lists and dicts), or None."""
    parent = _model_at(model, location[:-1])
    if parent is None or not location or not isinstance(location[-1], str):
        return None
    return _field_named(parent, location[-1])


def _model_at(model: type[BaseModel] | None, location: tuple[int | str, ...]) -> type[BaseModel] | None:
    """The model a location (of a mapping inside the document) validates against, or None.

    A tagged union's tag in the location (pydantic puts it there, e.g. ``target.orbital_elements``) picks its model.
    """
    current: Any = model
    tags: dict[str, type[BaseModel]] = {}
    for part in location:
        if isinstance(part, int):
            continue
        if part in tags:
            current, tags = tags[part], {}
            continue
        if not (isinstance(current, type) and issubclass(current, BaseModel)):
            return None
        field = _field_named(current, part)
        if field is None:
            return None
        tags = _tagged_models(field.annotation)
        current = _inner_model(field.annotation)
    return current if isinstance(current, type) and issubclass(current, BaseModel) else None


def _tagged_models(annotation: Any) -> dict[str, type[BaseModel]]:
    """The models of a tagged union (``Annotated[X, Tag("x")] | ...``) by tag; empty for any other annotation."""
    found: dict[str, type[BaseModel]] = {}
    for argument in typing.get_args(annotation):
        if typing.get_origin(argument) is typing.Annotated:
            model, *metadata = typing.get_args(argument)
            for item in metadata:
                tag = getattr(item, "tag", None)
                if isinstance(tag, str) and isinstance(model, type) and issubclass(model, BaseModel):
                    found[tag] = model
        found.update(_tagged_models(argument) if typing.get_origin(argument) in (typing.Union, types.UnionType, typing.Annotated) else {})
    return found


def without_tags(model: type[BaseModel] | None, location: tuple[int | str, ...]) -> tuple[int | str, ...]:
    """``location`` without the tags of tagged unions, so a field path names fields only (``requests[0].target.eccentricity``)."""
    kept: list[int | str] = []
    current: Any = model
    tags: dict[str, type[BaseModel]] = {}
    for part in location:
        if isinstance(part, int):
            kept.append(part)
            continue
        if part in tags:
            current, tags = tags[part], {}
            continue
        kept.append(part)
        field = _field_named(current, part) if isinstance(current, type) and issubclass(current, BaseModel) else None
        tags = _tagged_models(field.annotation) if field is not None else {}
        current = _inner_model(field.annotation) if field is not None else None
    return tuple(kept)


def _field_named(model: type[BaseModel], key: str) -> FieldInfo | None:
    for name, field in model.model_fields.items():
        if key in (name, field.validation_alias, field.alias):
            return field
    return None


def _inner_model(annotation: Any) -> Any:
    """The model inside ``list[X]``, ``dict[str, X]``, ``X | None`` or ``Annotated[X, ...]``, else the annotation."""
    origin = typing.get_origin(annotation)
    if origin is None:
        return annotation
    for argument in reversed(typing.get_args(annotation)):
        inner = _inner_model(argument)
        if isinstance(inner, type) and issubclass(inner, BaseModel):
            return inner
    if origin in (typing.Union, types.UnionType):
        return next((a for a in typing.get_args(annotation) if a is not type(None)), annotation)
    return annotation

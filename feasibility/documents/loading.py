"""Reading documents from JSON or YAML, with errors that name the field path and the problem."""

from __future__ import annotations

import json
from collections.abc import Iterable, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any, TypeVar

import yaml
from pydantic import BaseModel, ValidationError

from feasibility.documents.messages import plain_message

__all__ = ["DocumentError", "Problem", "load_document", "parse_document", "read_mapping"]

Model = TypeVar("Model", bound=BaseModel)

#: Largest document accepted, in bytes; a proposal is a few kilobytes.
MAX_DOCUMENT_BYTES = 2_000_000


@dataclass(frozen=True)
class Problem:
    """One thing wrong with a document: where (a field path such as ``requests[0].target.dec``) and what."""

    field: str
    message: str

    def as_dict(self) -> dict[str, str]:
        return {"field": self.field, "problem": self.message}


class DocumentError(ValueError):
    """A document that cannot be used, with every problem found."""

    def __init__(self, problems: Sequence[Problem], document: str = "document") -> None:
        self.problems = list(problems)
        self.document = document
        super().__init__(self.describe())

    def describe(self) -> str:
        """Every problem on a line of its own, field path first."""
        lines = [f"{self.document}: {p.field}: {p.message}" if p.field else f"{self.document}: {p.message}" for p in self.problems]
        return "\n".join(lines)

    def as_dict(self) -> dict[str, Any]:
        return {"error": "invalid document", "document": self.document, "problems": [p.as_dict() for p in self.problems]}


def field_path(location: Iterable[int | str]) -> str:
    """Turn pydantic's location tuple into ``requests[0].target.dec``."""
    path = ""
    for part in location:
        if isinstance(part, int):
            path += f"[{part}]"
        else:
            path += f".{part}" if path else str(part)
    return path


def read_mapping(text: str | bytes, document: str = "document") -> dict[str, Any]:
    """Parse JSON or YAML text into a mapping, or raise :class:`DocumentError`."""
    if isinstance(text, bytes):
        if len(text) > MAX_DOCUMENT_BYTES:
            raise DocumentError([Problem("", f"larger than {MAX_DOCUMENT_BYTES} bytes")], document)
        try:
            text = text.decode("utf-8")
        except UnicodeDecodeError:
            raise DocumentError([Problem("", "is not UTF-8 text")], document) from None
    if len(text) > MAX_DOCUMENT_BYTES:
        raise DocumentError([Problem("", f"larger than {MAX_DOCUMENT_BYTES} bytes")], document)
    try:
        data = yaml.safe_load(text)  # YAML 1.1 reads JSON too
    except yaml.YAMLError as exc:
        mark = getattr(exc, "problem_mark", None)
        where = f" at line {mark.line + 1}, column {mark.column + 1}" if mark is not None else ""
        raise DocumentError([Problem("", f"is neither valid JSON nor YAML{where}")], document) from None
    if not isinstance(data, dict):
        raise DocumentError([Problem("", "must be a mapping of fields at the top level")], document)
    return data


def parse_document(model: type[Model], data: dict[str, Any] | str | bytes, document: str | None = None) -> Model:
    """Validate ``data`` (a mapping, or JSON/YAML text) as ``model``; raise :class:`DocumentError` on any problem."""
    name = document or model.__name__.lower()
    if not isinstance(data, dict):
        data = read_mapping(data, name)
    try:
        return model.model_validate(data)
    except ValidationError as exc:
        problems = [Problem(field_path(err["loc"]), plain_message(err, model)) for err in exc.errors(include_url=False)]
        raise DocumentError(problems, name) from None


def load_document(model: type[Model], path: str | Path) -> Model:
    """Read and validate a JSON or YAML file."""
    path = Path(path)
    try:
        raw = path.read_bytes()
    except OSError as exc:
        raise DocumentError([Problem("", f"cannot read {path}: {exc.strerror or exc}")], str(path)) from None
    return parse_document(model, raw, str(path))


def json_schema(model: type[BaseModel]) -> str:
    """The model's JSON Schema, as the text the CLI prints."""
    return json.dumps(model.model_json_schema(by_alias=True), indent=2)


def _message(error: dict[str, Any]) -> str:
    """One validation error in our words (:func:`feasibility.documents.messages.plain_message`)."""
    return plain_message(error)

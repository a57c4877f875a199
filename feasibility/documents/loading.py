"""Reading documents from JSON or YAML, with errors that name the field path and the problem."""

from __future__ import annotations

import json
import logging
from collections.abc import Iterable
from pathlib import Path
from typing import Any, TypeVar

from pydantic import BaseModel, ValidationError

from feasibility.documents.messages import plain_message, without_tags
from feasibility.documents.problems import MAX_PROBLEMS, DocumentError, DocumentTooLarge, Problem, UnreadableDocument, printable
from feasibility.documents.reading import MAX_DOCUMENT_BYTES, data_shape_problem, read_data, read_file

__all__ = [
    "MAX_DOCUMENT_BYTES",
    "MAX_DOCUMENT_VALUES",
    "DocumentError",
    "DocumentTooLarge",
    "Problem",
    "UnreadableDocument",
    "load_document",
    "parse_document",
    "read_mapping",
]

log = logging.getLogger(__name__)

Model = TypeVar("Model", bound=BaseModel)

#: Most values one document may hold: a proposal of 200 requests needs about 10,000. Bounds the
#: validation work and the problems a hostile document can produce.
MAX_DOCUMENT_VALUES = 50_000


def field_path(location: Iterable[int | str]) -> str:
    """Turn pydantic's location tuple into ``requests[0].target.dec``."""
    path = ""
    for part in location:
        if isinstance(part, int):
            path += f"[{part}]"
        else:
            name = printable(str(part), 60)  # an unknown key is the sender's text: bounded, on one line
            path += f".{name}" if path else name
    return path


def read_mapping(text: str | bytes, document: str = "document") -> dict[str, Any]:
    """Parse JSON or YAML text (safely: :mod:`feasibility.documents.reading`) into a mapping, or raise :class:`DocumentError`."""
    data = read_data(text, document, max_values=MAX_DOCUMENT_VALUES)
    if not isinstance(data, dict):
        raise DocumentError([Problem("", "must be a mapping of fields at the top level")], document)
    return data


def parse_document(model: type[Model], data: dict[str, Any] | str | bytes, document: str | None = None) -> Model:
    """Validate ``data`` (a mapping, or JSON/YAML text) as ``model``; raise :class:`DocumentError` on any problem.

    A mapping parsed elsewhere is measured first (nesting and number of values), so
    no caller can hand the validator a document the readers would have refused.
    """
    name = document or model.__name__.lower()
    if not isinstance(data, dict):
        data = read_mapping(data, name)
    else:
        shape = data_shape_problem(data, max_values=MAX_DOCUMENT_VALUES)
        if shape is not None:
            raise UnreadableDocument([Problem("", shape)], name)
    try:
        return model.model_validate(data)
    except ValidationError as exc:
        errors = exc.errors(include_url=False)  # with the input: messages quote it, cut short (messages._shown)
        problems = [Problem(field_path(without_tags(model, tuple(err["loc"]))), plain_message(err, model)) for err in errors[: MAX_PROBLEMS + 1]]
        raise DocumentError(problems, name, total=len(errors)) from None
    except (ArithmeticError, ValueError, TypeError, RecursionError) as exc:
        # A validator let an exception other than a validation error escape: a bug to fix, but
        # the sender still gets a 4xx naming the document, never a 500 or a traceback.
        log.warning("validating a %s raised %s: %s", model.__name__, type(exc).__name__, exc)
        raise DocumentError([Problem("", f"cannot be validated ({type(exc).__name__}); check its numbers and dates")], name) from None


def load_document(model: type[Model], path: str | Path) -> Model:
    """Read (at most :data:`MAX_DOCUMENT_BYTES`) and validate a JSON or YAML file."""
    return parse_document(model, read_file(path), str(path))


def json_schema(model: type[BaseModel], base_url: str | None = None) -> str:
    """The model's published JSON Schema (:mod:`feasibility.documents.schemas`), as the text the CLI prints."""
    from feasibility.documents.schemas import DOCUMENTS, schema_text

    document = next((name for name, known in DOCUMENTS.items() if known is model), None)
    if document is None:
        return json.dumps(model.model_json_schema(by_alias=True), indent=2)
    return schema_text(document, base_url)

"""Reading a request's document and choosing the status of a document error: one place for the API, admin API and pages.

The body is read no further than ``MAX_CONTENT_LENGTH`` (the documents' own size
limit, :data:`feasibility.documents.reading.MAX_DOCUMENT_BYTES`); a larger body is a
413 in the same shape as every other document error. Status codes follow RFC 9110:
413 Content Too Large, 400 for text that is no document at all, 422 for a document
whose fields are wrong.
"""

from __future__ import annotations

from typing import Any

from flask import current_app, request
from werkzeug.exceptions import RequestEntityTooLarge

from feasibility.documents.problems import DocumentError, DocumentTooLarge, UnreadableDocument
from feasibility.documents.reading import read_data

__all__ = ["problem_status", "read_request_data", "request_body"]


def request_body(document: str) -> bytes:
    """The raw body, or :class:`DocumentTooLarge` when it is over the limit."""
    try:
        return request.get_data(cache=True)
    except RequestEntityTooLarge:
        raise DocumentTooLarge(int(current_app.config["MAX_CONTENT_LENGTH"]), document) from None


def read_request_data(data: bytes, document: str) -> Any:
    """The body's JSON or YAML as Python data, read safely (bounded depth, size, numbers)."""
    return read_data(data, document)


def problem_status(error: DocumentError) -> int:
    """The HTTP status of a document error."""
    if isinstance(error, DocumentTooLarge):
        return 413
    if isinstance(error, UnreadableDocument):
        return 400
    return 422

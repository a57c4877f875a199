"""The published JSON Schemas of the three documents: versioned, with a stable ``$id``.

Each schema is the pydantic model's own (so it says what the parser accepts: angles as
numbers or sexagesimal text, ISO 8601 dates and times, the bounds of
:mod:`feasibility.documents.base`), wrapped with

* ``$schema``: JSON Schema Draft 2020-12;
* ``$id``: ``/api/v1/schemas/<document>-<version>.json``, where the API serves it without
  sign-in. Without a public base URL the ``$id`` is that path alone, a relative reference a
  validator resolves against the address it fetched the schema from; with one
  (the ``PUBLIC_URL`` setting, ``FEASIBILITY_PUBLIC_URL`` in the environment) it is absolute;
* ``x-schema-version``: the version in the ``$id``. It goes up when a document the schema
  accepted would be refused (a field removed, a bound tightened); a change that only accepts
  more keeps it, so editors and portals pinned to a version keep working.
"""

from __future__ import annotations

import json
from typing import Any

from pydantic import BaseModel

from feasibility.documents.observatory import Observatory
from feasibility.documents.proposal import Proposal
from feasibility.documents.schedule import InstrumentSchedule

__all__ = ["DOCUMENTS", "SCHEMA_PREFIX", "SCHEMA_VERSIONS", "published_schema", "schema_path", "schema_text"]

#: The documents with a published schema, by the name used in the CLI and the URL.
DOCUMENTS: dict[str, type[BaseModel]] = {"proposal": Proposal, "observatory": Observatory, "schedule": InstrumentSchedule}
#: Each document's schema version (see the module's rule for when it goes up).
SCHEMA_VERSIONS: dict[str, int] = {"proposal": 1, "observatory": 1, "schedule": 1}
#: Where the API serves the schemas.
SCHEMA_PREFIX = "/api/v1/schemas"
DRAFT = "https://json-schema.org/draft/2020-12/schema"


def schema_path(document: str, version: int | None = None) -> str:
    """The URL path of a document's schema: ``/api/v1/schemas/proposal-1.json``."""
    return f"{SCHEMA_PREFIX}/{document}-{version or SCHEMA_VERSIONS[document]}.json"


def published_schema(document: str, base_url: str | None = None) -> dict[str, Any]:
    """The published JSON Schema of ``document`` (a key of :data:`DOCUMENTS`); ``$id`` absolute when ``base_url`` is given."""
    body = DOCUMENTS[document].model_json_schema(by_alias=True)
    identifier = schema_path(document)
    if base_url:
        identifier = base_url.rstrip("/") + identifier
    head = {"$schema": DRAFT, "$id": identifier, "x-schema-version": SCHEMA_VERSIONS[document]}
    return head | body


def schema_text(document: str, base_url: str | None = None) -> str:
    """The published schema as the text the CLI prints and the API serves."""
    return json.dumps(published_schema(document, base_url), indent=2, ensure_ascii=False)

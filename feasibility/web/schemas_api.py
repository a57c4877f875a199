"""The published JSON Schemas of the documents, served read-only and without sign-in at stable URLs.

``GET /api/v1/schemas`` lists them; ``GET /api/v1/schemas/<document>-<version>.json`` is one
(:mod:`feasibility.documents.schemas`). Editors and submission portals point at these URLs;
the ``$id`` is absolute when the ``PUBLIC_URL`` setting is given, else the path alone.
"""

from __future__ import annotations

from typing import Any

from flask import Blueprint, Response, abort, current_app

from feasibility.documents.schemas import DOCUMENTS, SCHEMA_PREFIX, SCHEMA_VERSIONS, schema_path, schema_text

__all__ = ["bp"]

bp = Blueprint("schemas_api", __name__, url_prefix=SCHEMA_PREFIX)


@bp.get("")
def index() -> dict[str, Any]:
    """Each document's current schema version and URL."""
    return {"schemas": [{"document": name, "version": SCHEMA_VERSIONS[name], "url": schema_path(name)} for name in sorted(DOCUMENTS)]}


@bp.get("/<document>-<int:version>.json")
def schema(document: str, version: int) -> Response:
    """One document's schema; 404 for an unknown document or version."""
    if document not in DOCUMENTS or SCHEMA_VERSIONS[document] != version:
        abort(404, description=f"no schema {document}-{version}; see {SCHEMA_PREFIX}")
    response = Response(schema_text(document, current_app.config.get("PUBLIC_URL") or None), mimetype="application/schema+json")
    response.headers["Cache-Control"] = "public, max-age=3600"
    response.headers["Access-Control-Allow-Origin"] = "*"  # public documents: editors in a browser may fetch them
    return response

"""The OpenAPI 3 description of /api/v1, written by hand; document schemas come from the pydantic models."""

from __future__ import annotations

from functools import cache
from typing import Any

from pydantic import BaseModel

import feasibility
from feasibility.documents import Proposal
from feasibility.results import ProposalResult

__all__ = ["openapi_document"]

_REF = "#/components/schemas/{model}"


@cache
def openapi_document() -> dict[str, Any]:
    """The whole OpenAPI 3.1 document."""
    schemas: dict[str, Any] = {}
    _add_model(schemas, Proposal)
    _add_model(schemas, ProposalResult)
    schemas.update(_API_SCHEMAS)
    return {
        "openapi": "3.1.0",
        "info": {
            "title": "Proposal feasibility checks",
            "version": feasibility.__version__,
            "description": (
                "Submit telescope proposals, follow their check runs and read their verdicts with every figure. "
                "Errors are JSON; invalid documents get 422 with each field path and its problem."
            ),
        },
        "servers": [{"url": "/"}],
        "security": [{"bearer": []}],
        "paths": _PATHS,
        "components": {
            "schemas": schemas,
            "securitySchemes": {"bearer": {"type": "http", "scheme": "bearer", "description": "An API token from `feasibility token create`; "
                                   "revoked with `feasibility token revoke` or POST /api/v1/tokens/{token_id}/revoke."}},
            "responses": {
                "Invalid": {"description": "The document or a parameter has problems.", "content": _json("Invalid")},
                "Error": {"description": "An error.", "content": _json("Error")},
            },
        },
    }


def _add_model(schemas: dict[str, Any], model: type[BaseModel]) -> None:
    schema = model.model_json_schema(by_alias=True, ref_template=_REF)
    for name, sub in schema.pop("$defs", {}).items():
        schemas[name] = sub
    schemas[model.__name__] = schema


def _json(name: str) -> dict[str, Any]:
    return {"application/json": {"schema": {"$ref": _REF.format(model=name)}}}


def _errors(*codes: int) -> dict[str, Any]:
    out: dict[str, Any] = {}
    for code in codes:
        out[str(code)] = {"$ref": "#/components/responses/Invalid"} if code in (400, 422) else {"$ref": "#/components/responses/Error"}
    return out


def _page_params() -> list[dict[str, Any]]:
    return [
        {"name": "page", "in": "query", "schema": {"type": "integer", "minimum": 1, "default": 1}},
        {"name": "per_page", "in": "query", "schema": {"type": "integer", "minimum": 1, "maximum": 200, "default": 50}},
    ]


_PROPOSAL_BODY = {
    "required": True,
    "content": {
        "application/json": {"schema": {"$ref": _REF.format(model="Proposal")}},
        "application/yaml": {"schema": {"$ref": _REF.format(model="Proposal")}},
    },
}

_PATHS: dict[str, Any] = {
    "/api/v1/proposals": {
        "post": {
            "summary": "Submit a proposal",
            "description": "Validated, stored and queued for checking. Identical content returns the existing run (200). "
            "With `wait`, waits up to that many seconds for the verdict (a self-check).",
            "parameters": [
                {"name": "wait", "in": "query", "schema": {"type": "number", "minimum": 0, "maximum": 30}},
                {"name": "on_behalf_of", "in": "query", "description": "Portals: the proposer's user name.", "schema": {"type": "string"}},
            ],
            "requestBody": _PROPOSAL_BODY,
            "responses": {
                "202": {"description": "Stored; a new check run is queued (if the queue is unreachable, it is sent as soon as it is back).", "content": _json("Submitted")},
                "200": {"description": "Identical content was submitted before (a run still waiting is queued again), or the verdict came within `wait`.", "content": _json("Submitted")},
                **_errors(400, 401, 403, 413, 422, 503),
            },
        },
        "get": {
            "summary": "List proposals",
            "parameters": [
                {"name": "semester", "in": "query", "schema": {"type": "string"}},
                {"name": "verdict", "in": "query", "schema": {"type": "string", "enum": ["feasible", "marginal", "unchecked", "infeasible"]}},
                {"name": "instrument", "in": "query", "schema": {"type": "string"}},
                {"name": "failed_check", "in": "query", "description": "A check that came out worse than feasible.", "schema": {"type": "string"}},
                *_page_params(),
            ],
            "responses": {"200": {"description": "A page of proposals.", "content": _json("ProposalPage")}, **_errors(400, 401)},
        },
    },
    "/api/v1/proposals/bulk": {
        "post": {
            "summary": "Submit many proposals",
            "requestBody": {
                "required": True,
                "content": {
                    "application/json": {
                        "schema": {"type": "object", "properties": {"proposals": {"type": "array", "items": {"$ref": _REF.format(model="Proposal")}}}}
                    }
                },
            },
            "responses": {"200": {"description": "One answer per item.", "content": _json("BulkAnswer")}, **_errors(400, 401, 403, 413, 422)},
        }
    },
    "/api/v1/proposals/{proposal_id}": {
        "get": {
            "summary": "A proposal and its standing verdict",
            "parameters": [{"name": "proposal_id", "in": "path", "required": True, "schema": {"type": "string"}}],
            "responses": {"200": {"description": "The proposal.", "content": _json("ProposalView")}, **_errors(401, 404)},
        }
    },
    "/api/v1/proposals/{proposal_id}/runs": {
        "get": {
            "summary": "A proposal's check runs, newest first",
            "parameters": [{"name": "proposal_id", "in": "path", "required": True, "schema": {"type": "string"}}, *_page_params()],
            "responses": {"200": {"description": "Check runs.", "content": _json("RunPage")}, **_errors(401, 404)},
        }
    },
    "/api/v1/runs/{run_id}": {
        "get": {
            "summary": "A check run, with its result when done",
            "parameters": [{"name": "run_id", "in": "path", "required": True, "schema": {"type": "integer"}}],
            "responses": {"200": {"description": "The run.", "content": _json("Run")}, **_errors(401, 404)},
        }
    },
    "/api/v1/me": {"get": {"summary": "The token's user", "responses": {"200": {"description": "Name and role."}, **_errors(401)}}},
    "/api/v1/health": {"get": {"summary": "Liveness", "security": [], "responses": {"200": {"description": "The store answers."}}}},
    "/api/v1/openapi.json": {"get": {"summary": "This document", "security": [], "responses": {"200": {"description": "OpenAPI 3."}}}},
}

_NULLABLE_STR = {"type": ["string", "null"]}
_API_SCHEMAS: dict[str, Any] = {
    "Error": {"type": "object", "required": ["error"], "properties": {"error": {"type": "string"}, "message": {"type": "string"}}},
    "Invalid": {
        "type": "object",
        "required": ["error", "problems"],
        "properties": {
            "error": {"type": "string"},
            "document": {"type": "string"},
            "problems": {
                "type": "array",
                "items": {
                    "type": "object",
                    "required": ["field", "problem"],
                    "properties": {"field": {"type": "string", "description": "Field path, e.g. requests[0].target.dec"}, "problem": {"type": "string"}},
                },
            },
        },
    },
    "Run": {
        "type": "object",
        "required": ["id", "proposal_id", "state"],
        "properties": {
            "id": {"type": "integer"},
            "proposal_id": {"type": "string"},
            "proposal_version": {"type": "integer"},
            "state": {"type": "string", "enum": ["queued", "running", "done", "failed"]},
            "reason": {"type": "string"},
            "verdict": {"type": ["string", "null"], "enum": ["feasible", "marginal", "unchecked", "infeasible", None]},
            "attempts": {"type": "integer"},
            "observatory_version": {"type": "integer"},
            "schedule_version": {"type": ["integer", "null"]},
            "engine_version": {"type": "string"},
            "queued_at": _NULLABLE_STR,
            "started_at": _NULLABLE_STR,
            "finished_at": _NULLABLE_STR,
            "error": _NULLABLE_STR,
            "links": {"type": "object"},
            "result": {"$ref": _REF.format(model="ProposalResult")},
        },
    },
    "Submitted": {"type": "object", "properties": {"created": {"type": "boolean"}, "run": {"$ref": _REF.format(model="Run")}}},
    "BulkAnswer": {
        "type": "object",
        "properties": {
            "accepted": {"type": "integer"},
            "rejected": {"type": "integer"},
            "items": {
                "type": "array",
                "items": {
                    "type": "object",
                    "properties": {
                        "index": {"type": "integer"},
                        "status": {"type": "integer", "description": "This item's own answer: 202 or 200 stored, 403, 422 with its problems, 503 store unavailable (send it again)."},
                        "created": {"type": "boolean"},
                        "run_id": {"type": "integer"},
                        "problems": {"type": "array"},
                    },
                },
            },
        },
    },
    "ProposalSummary": {
        "type": "object",
        "properties": {
            "proposal_id": {"type": "string"},
            "semester": {"type": "string"},
            "version": {"type": "integer"},
            "title": {"type": "string"},
            "pi": {"type": "string"},
            "instruments": {"type": "array", "items": {"type": "string"}},
            "hours_requested": {"type": "number"},
            "verdict": {"type": ["string", "null"]},
            "run_id": {"type": ["integer", "null"]},
        },
    },
    "ProposalPage": {
        "type": "object",
        "properties": {
            "items": {"type": "array", "items": {"$ref": _REF.format(model="ProposalSummary")}},
            "page": {"type": "integer"},
            "per_page": {"type": "integer"},
            "total": {"type": "integer"},
        },
    },
    "ProposalView": {
        "type": "object",
        "properties": {
            "proposal_id": {"type": "string"},
            "semester": {"type": "string"},
            "versions": {"type": "integer"},
            "verdict": {"type": ["string", "null"]},
            "latest_run": {"$ref": _REF.format(model="Run")},
            "result": {"$ref": _REF.format(model="Run")},
        },
    },
    "RunPage": {
        "type": "object",
        "properties": {"proposal_id": {"type": "string"}, "items": {"type": "array", "items": {"$ref": _REF.format(model="Run")}}},
    },
}

from feasibility.web.admin_api import OPENAPI_PATHS as _ADMIN_PATHS  # noqa: E402 - schedules, re-checks, changes (re-check helper)

_PATHS.update(_ADMIN_PATHS)

from feasibility.web.access_api import OPENAPI_PATHS as _ACCESS_PATHS  # noqa: E402 - tokens, passwords
from feasibility.web.access_api import OPENAPI_SCHEMAS as _ACCESS_SCHEMAS  # noqa: E402

_PATHS.update(_ACCESS_PATHS)
_API_SCHEMAS.update(_ACCESS_SCHEMAS)

from feasibility.web.schemas_api import OPENAPI_PATHS as _SCHEMA_PATHS  # noqa: E402 - the published document schemas

_PATHS.update(_SCHEMA_PATHS)

from feasibility.web.review_api import OPENAPI_PATHS as _REVIEW_PATHS  # noqa: E402 - technical review

_PATHS.update(_REVIEW_PATHS)

from feasibility.web.simulations_api import OPENAPI_PATHS as _SIMULATION_PATHS  # noqa: E402 - the chance of completion

_PATHS.update(_SIMULATION_PATHS)

"""The OpenAPI 3.1 description of /api/v1, generated from the pydantic models of :mod:`feasibility.web.api_models`.

One registry, :data:`OPERATIONS`, names for each API endpoint (the Flask endpoint
name) its summary, query, body and answers by status; the document's paths come
from the app's own URL map, its schemas from ``pydantic.json_schema.models_json_schema``.
Nothing in the document is written out by hand, so it follows the models. Limits
that are settings (the longest ``wait``, the largest bulk submission) are read from
the app's configuration. The test suite checks that every API route is in the
registry and every JSON answer it gets matches the document.
"""

from __future__ import annotations

import re
from dataclasses import dataclass
from typing import Any

from flask import Flask
from pydantic import BaseModel
from pydantic.json_schema import models_json_schema

import feasibility
from feasibility.documents import Proposal
from feasibility.service.simulations import SimulationSettings
from feasibility.web import api_models as m

__all__ = ["OPERATIONS", "Operation", "openapi_document", "openapi_path"]

_REF = "#/components/schemas/{model}"
_EXTENSION = "feasibility.openapi"
_PROBLEM_STATUSES = (400, 413, 422)  # answered with the Invalid shape (field paths and problems)
_DOCUMENT_TYPES = ("application/json", "application/yaml")


@dataclass(frozen=True)
class Operation:
    """One endpoint as documented: what it does, what it reads and what it answers (status -> model)."""

    summary: str
    answers: dict[int, type[BaseModel]]
    errors: tuple[int, ...] = ()
    description: str = ""
    query: type[BaseModel] | None = None
    body: type[BaseModel] | None = None
    body_types: tuple[str, ...] = ("application/json",)
    body_required: bool = True
    public: bool = False  # no token needed
    media_type: str = "application/json"
    rate_limited: bool = False  # may answer 429 with Retry-After (feasibility.web.protection)


_READ = (401, 404)
_ADMIN = (401, 403)

#: Every API endpoint, by Flask endpoint name.
OPERATIONS: dict[str, Operation] = {
    # -- proposals and runs (feasibility.web.api)
    "api.openapi": Operation("This document", {200: m.OpenApiDocument}, public=True),
    "api.health": Operation("Liveness: the store answers; which dispatcher computes runs", {200: m.Health}, public=True),
    "api.me": Operation("The token's user", {200: m.Me}, (401,)),
    "api.submit_one": Operation(
        "Submit a proposal",
        {202: m.Submitted, 200: m.Submitted},
        (400, 401, 403, 413, 422, 503),
        "Validated, stored and queued for checking: 202 with a new run (if the queue is unreachable it is sent as soon as it is back). "
        "Identical content returns the existing run (200; a run still waiting is queued again); with `wait`, 200 once the verdict "
        "came within that many seconds (a self-check).",
        query=m.SubmitQuery,
        body=Proposal,
        body_types=_DOCUMENT_TYPES,
        rate_limited=True,
    ),
    "api.submit_many": Operation(
        "Submit many proposals",
        {200: m.BulkAnswer},
        (400, 401, 403, 413, 422),
        '`{"proposals": [...]}` or a bare list; each item is answered on its own.',
        body=m.BulkBody,
        body_types=_DOCUMENT_TYPES,
        rate_limited=True,
    ),
    "api.list_proposals": Operation("List the proposals the caller may read, newest first", {200: m.ProposalPage}, (400, 401), query=m.ProposalListQuery),
    "api.get_proposal": Operation("A proposal, its latest run and the verdict that stands", {200: m.ProposalView}, _READ),
    "api.proposal_runs": Operation("A proposal's check runs, newest first (results left out)", {200: m.RunPage}, (400, *_READ), query=m.PageQuery),
    "api.get_run": Operation("A check run, with its result when done", {200: m.Run}, _READ),
    # -- schedules, observatory, re-checks, changes, webhooks (feasibility.web.admin_api)
    "admin_api.post_schedule": Operation(
        "Upload an instrument schedule (admin)",
        {201: m.UploadAnswer, 200: m.UploadAnswer},
        (*_ADMIN, 413, 422),
        "Validated against the observatory in force and stored as a new version (201); re-checks only the proposals whose "
        "instruments' nights changed. Same content as the version in force: nothing stored, nothing queued (200).",
        body=m.SchemaDocument,
        body_types=_DOCUMENT_TYPES,
    ),
    "admin_api.get_schedule": Operation("The schedule in force and its changes from the version before", {200: m.ScheduleView}, _READ),
    "admin_api.list_schedule_versions": Operation("Every stored version of a semester's schedule, newest first", {200: m.ScheduleVersions}, _READ),
    "admin_api.compare_schedule_versions": Operation(
        "Night-by-night changes between two versions", {200: m.ScheduleComparison}, (400, *_READ), query=m.CompareQuery
    ),
    "admin_api.post_observatory": Operation(
        "Upload an observatory description (admin)",
        {201: m.UploadAnswer, 200: m.UploadAnswer},
        (*_ADMIN, 413, 422),
        "Stored as a new version (201) and every proposal re-checked; same content: nothing stored (200).",
        body=m.SchemaDocument,
        body_types=_DOCUMENT_TYPES,
    ),
    "admin_api.get_observatory": Operation("The observatory description in force", {200: m.ObservatoryView}, _READ),
    "admin_api.post_rechecks": Operation(
        "Queue the re-checks that changes, a new engine version or old results call for (admin)",
        {200: m.RecheckPlan},
        (400, *_ADMIN),
        "Idempotent: a second call queues nothing.",
        body=m.RecheckBody,
        body_required=False,
    ),
    "admin_api.list_changes": Operation(
        "Verdict and key-figure changes since a time, for proposals the caller may read", {200: m.ChangeList}, (400, 401), query=m.ChangesQuery
    ),
    "admin_api.put_webhook": Operation(
        "Set a user's webhook address and secret (admin)",
        {200: m.WebhookAnswer},
        (*_ADMIN, 404, 422),
        "Notices carry the hex HMAC-SHA256 of the body in X-Feasibility-Signature. The address must be http(s) and, unless the "
        "WEBHOOK_ALLOW_PRIVATE setting allows it, lead to a public internet address: else 422 naming the field `url`.",
        body=m.WebhookBody,
    ),
    "admin_api.delete_webhook": Operation("Stop a user's notices (admin)", {200: m.WebhookAnswer}, (*_ADMIN, 404)),
    # -- access (feasibility.web.access_api)
    "access_api.list_tokens": Operation("A user's API tokens, live and revoked (admin)", {200: m.TokenList}, (*_ADMIN, 404)),
    "access_api.revoke_token": Operation(
        "Revoke one API token (admin)",
        {200: m.RevokedToken},
        (*_ADMIN, 404),
        "The token stops working at once. Revoking a revoked token changes nothing (`revoked_now`: false).",
    ),
    "access_api.revoke_user_tokens": Operation("Revoke every live API token of a user (admin)", {200: m.RevokedTokens}, (*_ADMIN, 404)),
    "access_api.put_password": Operation(
        "Set a user's password (admin)",
        {200: m.PasswordAnswer},
        (*_ADMIN, 404, 422),
        "Ends every dashboard session of the user, including copies of their cookies.",
        body=m.PasswordBody,
    ),
    # -- published document schemas (feasibility.web.schemas_api)
    "schemas_api.index": Operation(
        "The published document schemas",
        {200: m.SchemaIndex},
        public=True,
        description="Each document (proposal, observatory, schedule) with its schema version and URL.",
    ),
    "schemas_api.schema": Operation(
        "A document's JSON Schema (Draft 2020-12)",
        {200: m.SchemaDocument},
        (404,),
        public=True,
        description="Read-only and public. `$id` is this path, or the absolute URL when the service has a "
        "PUBLIC_URL. The version goes up only when a document the schema accepted would be refused.",
        media_type="application/schema+json",
    ),
    # -- technical review (feasibility.web.review_api)
    "review_api.get_review": Operation(
        "A proposal's technical review",
        {200: m.ReviewAnswer},
        (*_READ, 403),
        "Reviewers and admins: everything. Proposers and portals: the verdict that stands, and the notes when the observatory shows them.",
    ),
    "review_api.post_assignment": Operation("Assign a proposal's technical reviewer (admin)", {200: m.Review}, (*_READ, 403, 422), body=m.AssignmentBody),
    "review_api.post_bulk_assignment": Operation(
        "Assign one reviewer to every proposal of a semester that uses an instrument (admin)",
        {200: m.BulkAssignment},
        (*_ADMIN, 422),
        body=m.BulkAssignmentBody,
    ),
    "review_api.post_note": Operation(
        "Add a reviewer's note to a proposal or one of its observation requests", {201: m.Review}, (*_READ, 403, 422), body=m.NoteBody
    ),
    "review_api.post_decision": Operation(
        "Confirm or override the engine's verdict (reviewers, admins)",
        {201: m.Review},
        (*_READ, 403, 422),
        "An override needs a verdict and a reason. It survives re-checks; a re-check that changes the engine's verdict marks it `to_review_again`.",
        body=m.DecisionBody,
    ),
    # -- simulations (feasibility.web.simulations_api)
    "simulations_api.post_simulation": Operation(
        "Ask for a simulation of the semester: the chance of completion (reviewer, admin)",
        {202: m.SimulationView},
        (*_ADMIN, 404, 413, 422),
        "Every proposal of the semester, the observatory description and schedule in force, simulated "
        "night by night under weather, seeing and competing requests. Computed by a worker.",
        body=SimulationSettings,
        body_required=False,
    ),
    "simulations_api.get_simulation": Operation(
        "One simulation: its state and, when done, its result (reviewer, admin)", {200: m.SimulationView}, (*_ADMIN, 404)
    ),
    "simulations_api.list_simulations": Operation(
        "The semester's simulations, newest first, without results (reviewer, admin)", {200: m.SimulationList}, _ADMIN
    ),
}

_PATH_ARGUMENT = re.compile(r"<(?:(?P<converter>[a-z]+)(?:\([^)]*\))?:)?(?P<name>\w+)>")
_CONVERTER_TYPES = {"int": {"type": "integer"}, "float": {"type": "number"}}


def openapi_path(rule: str) -> str:
    """A Flask rule as an OpenAPI path: ``/runs/<int:run_id>`` -> ``/runs/{run_id}``."""
    return _PATH_ARGUMENT.sub(lambda match: "{" + match["name"] + "}", rule)


def openapi_document(app: Flask) -> dict[str, Any]:
    """The whole document for ``app`` (made once per app: the routes and settings do not change while it runs)."""
    document = app.extensions.get(_EXTENSION)
    if document is None:
        document = app.extensions[_EXTENSION] = _build(app)
    return document


def _build(app: Flask) -> dict[str, Any]:
    schemas = _schemas(app.config)
    paths: dict[str, Any] = {}
    for rule in sorted(app.url_map.iter_rules(), key=lambda r: r.rule):
        operation = OPERATIONS.get(rule.endpoint)
        if operation is None:
            continue  # the pages; an API route missing here fails tests/service/test_openapi.py
        for method in sorted((rule.methods or set()) - {"HEAD", "OPTIONS"}):
            paths.setdefault(openapi_path(rule.rule), {})[method.lower()] = _operation(rule.rule, rule.endpoint, operation, app.config)
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
        "paths": paths,
        "components": {
            "schemas": schemas,
            "securitySchemes": {
                "bearer": {
                    "type": "http",
                    "scheme": "bearer",
                    "description": "An API token from `feasibility token create`; "
                    "revoked with `feasibility token revoke` or POST /api/v1/tokens/{token_id}/revoke.",
                }
            },
            "responses": {
                "Invalid": {"description": "The document or a parameter has problems.", "content": _json("Invalid")},
                "Error": {"description": "An error.", "content": _json("Error")},
                "TooMany": {
                    "description": "A rate limit was reached: wait the Retry-After seconds.",
                    "headers": {"Retry-After": {"description": "Seconds to wait (RFC 9110).", "schema": {"type": "integer"}}},
                    "content": _json("Error"),
                },
            },
        },
    }


def _models() -> list[tuple[type[BaseModel], str]]:
    """Every model the registry names, with the mode its schema is wanted in (bodies are read, answers written)."""
    seen: dict[type[BaseModel], str] = {m.Error: "serialization", m.Invalid: "serialization"}
    for operation in OPERATIONS.values():
        for model in operation.answers.values():
            seen[model] = "serialization"
        if operation.body is not None:
            seen.setdefault(operation.body, "validation")
    return list(seen.items())


def _schemas(config: Any) -> dict[str, Any]:
    _, definitions = models_json_schema(_models(), by_alias=True, ref_template=_REF)  # type: ignore[arg-type]
    schemas: dict[str, Any] = dict(definitions.get("$defs", {}))
    _apply_settings(schemas, config)
    return schemas


def _apply_settings(node: Any, config: Any) -> None:
    """Put the configured value in place of each ``x-setting-*`` marker (the models name the setting, the app gives the value)."""
    if isinstance(node, dict):
        for marker, keyword in (("x-setting-maximum", "maximum"), ("x-setting-max-items", "maxItems")):
            if marker in node:
                value = config[node[marker]]
                node[keyword] = int(value) if float(value).is_integer() else float(value)
        for value in node.values():
            _apply_settings(value, config)
    elif isinstance(node, list):
        for value in node:
            _apply_settings(value, config)


def _operation(rule: str, endpoint: str, operation: Operation, config: Any) -> dict[str, Any]:
    item: dict[str, Any] = {"operationId": endpoint.replace(".", "_"), "summary": operation.summary, "tags": [endpoint.partition(".")[0]]}
    if operation.description:
        item["description"] = operation.description
    if operation.public:
        item["security"] = []
    parameters = _path_parameters(rule) + (_query_parameters(operation.query, config) if operation.query is not None else [])
    if parameters:
        item["parameters"] = parameters
    if operation.body is not None:
        reference = {"$ref": _REF.format(model=operation.body.__name__)}
        item["requestBody"] = {"required": operation.body_required, "content": {kind: {"schema": reference} for kind in operation.body_types}}
    responses: dict[str, Any] = {}
    for status, model in sorted(operation.answers.items()):
        responses[str(status)] = {
            "description": (model.__doc__ or model.__name__).strip().splitlines()[0],
            "content": {operation.media_type: {"schema": {"$ref": _REF.format(model=model.__name__)}}},
        }
    for status in operation.errors:
        responses[str(status)] = {"$ref": "#/components/responses/" + ("Invalid" if status in _PROBLEM_STATUSES else "Error")}
    if operation.rate_limited:
        responses["429"] = {"$ref": "#/components/responses/TooMany"}
    # Any other failure (405, 503 while the store is away...) is an Error or, for a document, an Invalid.
    responses["default"] = {
        "description": "An error.",
        "content": {"application/json": {"schema": {"oneOf": [{"$ref": _REF.format(model="Error")}, {"$ref": _REF.format(model="Invalid")}]}}},
    }
    item["responses"] = responses
    return item


def _path_parameters(rule: str) -> list[dict[str, Any]]:
    return [
        {"name": match["name"], "in": "path", "required": True, "schema": dict(_CONVERTER_TYPES.get(match["converter"] or "", {"type": "string"}))}
        for match in _PATH_ARGUMENT.finditer(rule)
    ]


def _query_parameters(model: type[BaseModel], config: Any) -> list[dict[str, Any]]:
    schema = model.model_json_schema(by_alias=True, ref_template=_REF)
    _apply_settings(schema, config)
    required = set(schema.get("required", []))
    parameters = []
    for name, prop in schema.get("properties", {}).items():
        description = prop.pop("description", None)
        prop.pop("title", None)
        branches = [branch for branch in prop.pop("anyOf", []) if branch.get("type") != "null"]  # absent, not null, in a query
        if len(branches) == 1:
            prop.update(branches[0])
        elif branches:
            prop["anyOf"] = branches
        if prop.get("default", 0) is None:
            del prop["default"]
        parameter: dict[str, Any] = {"name": name, "in": "query", "required": name in required, "schema": prop}
        if description:
            parameter["description"] = description
        parameters.append(parameter)
    return parameters


def _json(name: str) -> dict[str, Any]:
    return {"application/json": {"schema": {"$ref": _REF.format(model=name)}}}

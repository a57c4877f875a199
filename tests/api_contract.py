"""The API's answers against its published OpenAPI document: every JSON answer the tests get is checked.

``record_answers(app)`` hooks the app so each answer under /api/ is kept as
(method, rule, status, content type, body); ``contract_problems(app, answers)``
checks each body with jsonschema (Draft 2020-12, the dialect of OpenAPI 3.1) against
the schema the document gives for that route, method and status. A success status
the document does not name, a content type it does not list or a body that does not
match is a problem: the ``app`` fixture fails the test that got it, so the document
cannot drift from the answers unnoticed. Reference: OpenAPI Specification 3.1.0,
"Responses Object" (a status code or ``default``) and "Media Type Object".
"""

from __future__ import annotations

import json
from dataclasses import dataclass
from typing import Any

from flask import Flask, Response, request
from jsonschema import Draft202012Validator

from feasibility.web.openapi import openapi_document, openapi_path

__all__ = ["Answer", "contract_problems", "record_answers", "schema_for"]


@dataclass(frozen=True)
class Answer:
    method: str
    rule: str
    status: int
    media_type: str
    body: Any


def record_answers(app: Flask) -> list[Answer]:
    """Keep every JSON answer ``app`` gives under /api/ (routes it knows; HEAD and OPTIONS left out) in the list returned."""
    answers: list[Answer] = []

    @app.after_request
    def keep(response: Response) -> Response:
        rule = request.url_rule
        if rule is not None and rule.rule.startswith("/api/") and request.method not in ("HEAD", "OPTIONS") and response.is_json:
            response.direct_passthrough = False
            answers.append(Answer(request.method, rule.rule, response.status_code, response.mimetype, json.loads(response.get_data())))
        return response

    return answers


def schema_for(document: dict[str, Any], answer: Answer) -> tuple[dict[str, Any] | None, str | None]:
    """The schema the document gives ``answer`` (root components attached so references resolve), or why there is none."""
    operation = document["paths"].get(openapi_path(answer.rule), {}).get(answer.method.lower())
    if operation is None:
        return None, f"{answer.method} {answer.rule} is not in the document"
    responses = operation["responses"]
    response = responses.get(str(answer.status))
    if response is None:
        if 200 <= answer.status < 300:
            return None, f"{answer.method} {answer.rule} answered {answer.status}, a success the document does not name"
        response = responses.get("default")
        if response is None:
            return None, f"{answer.method} {answer.rule} answered {answer.status}; the document names neither it nor a default"
    if "$ref" in response:
        response = document["components"]["responses"][response["$ref"].rsplit("/", 1)[1]]
    content = response.get("content", {})
    if answer.media_type not in content:
        return None, f"{answer.method} {answer.rule} {answer.status} answered {answer.media_type}; the document lists {sorted(content)}"
    return {"components": document["components"], **content[answer.media_type]["schema"]}, None


def contract_problems(app: Flask, answers: list[Answer]) -> list[str]:
    """Each answer that does not match the document, with the first few reasons."""
    with app.app_context():
        document = openapi_document(app)
    problems = []
    for answer in answers:
        schema, reason = schema_for(document, answer)
        if schema is None:
            problems.append(reason or "")
            continue
        errors = sorted(Draft202012Validator(schema).iter_errors(answer.body), key=lambda e: list(e.absolute_path))
        for error in errors[:3]:
            where = "/".join(str(p) for p in error.absolute_path) or "(the body)"
            problems.append(f"{answer.method} {answer.rule} {answer.status}: at {where}: {error.message[:300]}")
    return problems

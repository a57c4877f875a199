"""The OpenAPI document is generated from the models and covers every API route; answers that drift from it are caught.

References: OpenAPI Specification 3.1.0 (paths, the Responses Object with status codes
and ``default``); JSON Schema Draft 2020-12, the dialect of OpenAPI 3.1, checked with
the jsonschema library's meta-schema; see docs/references.md.
"""

from __future__ import annotations

from flask import Flask
from flask.testing import FlaskClient
from jsonschema import Draft202012Validator

from feasibility.web.openapi import OPERATIONS, openapi_path
from tests.api_contract import Answer, contract_problems, record_answers


def _api_routes(app: Flask) -> dict[tuple[str, str], str]:
    return {
        (method.lower(), openapi_path(rule.rule)): rule.endpoint
        for rule in app.url_map.iter_rules()
        if rule.rule.startswith("/api/")
        for method in (rule.methods or set()) - {"HEAD", "OPTIONS"}
    }


def test_every_api_route_is_documented_and_nothing_else(app: Flask, client: FlaskClient) -> None:
    routes = _api_routes(app)
    assert len(routes) >= 29  # the API's routes as of this writing; a route removed by mistake shows here
    document = client.get("/api/v1/openapi.json").get_json()
    documented = {(method, path) for path, item in document["paths"].items() for method in item}
    assert set(routes) == documented
    assert {endpoint for endpoint in routes.values()} == set(OPERATIONS)  # no registry entry without its route


def test_every_schema_is_valid_json_schema_2020_12(client: FlaskClient) -> None:
    document = client.get("/api/v1/openapi.json").get_json()
    assert document["openapi"] == "3.1.0"
    for name, schema in document["components"]["schemas"].items():
        Draft202012Validator.check_schema(schema)  # raises on an invalid schema
        assert schema.get("title") == name or "$ref" not in schema
    for path, item in document["paths"].items():
        for method, operation in item.items():
            assert operation["responses"], f"{method} {path} has no answers"
            assert any(code.startswith("2") for code in operation["responses"]), f"{method} {path} has no success answer"


def test_limits_that_are_settings_follow_the_settings(app: Flask, client: FlaskClient) -> None:
    app.config.update(MAX_WAIT_S=12, MAX_BULK=7)
    document = client.get("/api/v1/openapi.json").get_json()
    wait = next(p for p in document["paths"]["/api/v1/proposals"]["post"]["parameters"] if p["name"] == "wait")
    assert wait["schema"]["maximum"] == 12 and wait["schema"]["minimum"] == 0
    assert document["components"]["schemas"]["BulkBody"]["properties"]["proposals"]["maxItems"] == 7
    over = client.post("/api/v1/proposals?wait=13", data="{}", headers={"Authorization": "Bearer none"})
    assert over.status_code in (400, 401)  # refused either way: no token, or the wait over the documented maximum


def test_proposal_view_documents_every_key_it_answers(client: FlaskClient, make_token) -> None:  # type: ignore[no-untyped-def]
    from tests.web.support import proposal_doc  # an invented proposal

    token = make_token("admin")
    headers = {"Authorization": f"Bearer {token}"}
    assert client.post("/api/v1/proposals", json=proposal_doc("OA-1"), headers=headers).status_code == 202
    view = client.get("/api/v1/proposals/OA-1", headers=headers).get_json()
    document = client.get("/api/v1/openapi.json").get_json()
    schema = document["components"]["schemas"]["ProposalView"]
    assert set(view) == set(schema["properties"]) == set(schema["required"])
    assert schema["additionalProperties"] is False


def test_an_answer_that_drifts_from_the_document_is_reported(app: Flask, client: FlaskClient, make_token) -> None:  # type: ignore[no-untyped-def]
    answers = record_answers(app)
    token = make_token("reviewer", "rita")
    me = client.get("/api/v1/me", headers={"Authorization": f"Bearer {token}"})
    missing = client.get("/api/v1/runs/999", headers={"Authorization": f"Bearer {token}"})
    assert (me.status_code, missing.status_code) == (200, 404)
    assert [(a.rule, a.status) for a in answers] == [("/api/v1/me", 200), ("/api/v1/runs/<int:run_id>", 404)]
    assert contract_problems(app, answers) == []
    drifted = [
        Answer("GET", "/api/v1/me", 200, "application/json", {"name": "rita", "role": "reviewer", "teams": []}),  # a key not described
        Answer("GET", "/api/v1/me", 200, "application/json", {"name": "rita"}),  # a described key missing
        Answer("GET", "/api/v1/me", 201, "application/json", {"name": "rita", "role": "reviewer"}),  # a success not named
        Answer("GET", "/api/v1/runs/<int:run_id>", 404, "application/json", {"message": "no run"}),  # an error without its name
        Answer("GET", "/api/v1/nowhere", 200, "application/json", {}),  # a route not in the document
    ]
    problems = contract_problems(app, drifted)
    assert len(problems) == 5, problems
    assert "teams" in problems[0] and "'role' is a required property" in problems[1] and "201" in problems[2]


def test_documented_query_limits_are_the_ones_enforced(client: FlaskClient, make_token) -> None:  # type: ignore[no-untyped-def]
    """Each bounded number parameter of a GET (and ``wait``): its documented bounds pass, one step past them is a 400."""
    from tests.web.support import proposal_doc  # an invented proposal

    headers = {"Authorization": f"Bearer {make_token('admin')}"}
    assert client.post("/api/v1/proposals", json=proposal_doc("OA-2"), headers=headers).status_code == 202
    document = client.get("/api/v1/openapi.json").get_json()
    probed = []
    for path, item in document["paths"].items():
        for method, operation in item.items():
            if method not in ("get", "post"):
                continue
            for parameter in operation.get("parameters", []):
                schema = parameter["schema"]
                if parameter["in"] != "query" or schema.get("type") not in ("integer", "number") or "maximum" not in schema:
                    continue
                url = path.replace("{proposal_id}", "OA-2")
                for value, refused in ((schema["minimum"], False), (schema["maximum"], False), (schema["minimum"] - 1, True), (schema["maximum"] + 1, True)):
                    if method == "post" and not refused:
                        continue  # a valid wait would wait; only the refusals are probed
                    body = proposal_doc("OA-2") if method == "post" else None
                    status = client.open(f"{url}?{parameter['name']}={value}", method=method.upper(), json=body, headers=headers).status_code
                    assert (status == 400) is refused, (method, url, parameter["name"], value, status)
                probed.append((url, parameter["name"]))
    assert {
        ("/api/v1/proposals", "page"),
        ("/api/v1/proposals", "per_page"),
        ("/api/v1/proposals", "wait"),
        ("/api/v1/proposals/OA-2/runs", "per_page"),
        ("/api/v1/changes", "limit"),
    } <= set(probed)

"""The published document schemas over the API: public, stable URLs, the same schema the CLI prints."""

from __future__ import annotations

import json

import pytest
import yaml
from click.testing import CliRunner
from flask.testing import FlaskClient
from jsonschema import Draft202012Validator


@pytest.mark.parametrize("document", ["proposal", "observatory", "schedule"])
def test_schema_served_without_sign_in_and_equal_to_the_cli(client: FlaskClient, document: str) -> None:
    from feasibility.cli import main

    response = client.get(f"/api/v1/schemas/{document}-1.json")  # no Authorization header
    assert response.status_code == 200
    assert response.mimetype == "application/schema+json"
    served = response.get_json(force=True)
    assert served["$id"] == f"/api/v1/schemas/{document}-1.json"
    Draft202012Validator.check_schema(served)  # reference: jsonschema's meta-schema of Draft 2020-12
    printed = CliRunner().invoke(main, ["schema", document], env={"FEASIBILITY_PUBLIC_URL": ""})
    assert printed.exit_code == 0
    assert json.loads(printed.stdout) == served


def test_index_lists_every_schema(client: FlaskClient) -> None:
    body = client.get("/api/v1/schemas").get_json()
    urls = {item["document"]: item["url"] for item in body["schemas"]}
    assert urls == {name: f"/api/v1/schemas/{name}-1.json" for name in ("observatory", "proposal", "schedule")}
    for url in urls.values():
        assert client.get(url).status_code == 200


@pytest.mark.parametrize("path", ["/api/v1/schemas/proposal-2.json", "/api/v1/schemas/telescope-1.json"])
def test_unknown_schema_is_a_json_404(client: FlaskClient, path: str) -> None:
    response = client.get(path)
    assert response.status_code == 404
    assert response.get_json()["error"] == "not found"


def test_public_url_makes_the_id_absolute(client: FlaskClient) -> None:
    client.application.config["PUBLIC_URL"] = "https://feasibility.example.org/"
    served = client.get("/api/v1/schemas/proposal-1.json").get_json(force=True)
    assert served["$id"] == "https://feasibility.example.org/api/v1/schemas/proposal-1.json"


def test_served_proposal_schema_accepts_a_proposal_the_api_takes(client: FlaskClient, make_token) -> None:
    from importlib.resources import files

    text = (files("feasibility") / "data" / "proposals" / "SQ-2027A-001.yaml").read_text(encoding="utf-8")
    schema = client.get("/api/v1/schemas/proposal-1.json").get_json(force=True)
    assert Draft202012Validator(schema, format_checker=Draft202012Validator.FORMAT_CHECKER).is_valid(yaml.safe_load(text))
    token = make_token("proposer")
    answer = client.post("/api/v1/proposals", data=text, headers={"Authorization": f"Bearer {token}", "Content-Type": "application/yaml"})
    assert answer.status_code in (200, 202), answer.get_json()


def test_openapi_mentions_the_schema_urls(client: FlaskClient) -> None:
    paths = client.get("/api/v1/openapi.json").get_json()["paths"]
    assert paths["/api/v1/schemas/{document}-{version}.json"]["get"]["security"] == []
    assert "/api/v1/schemas" in paths

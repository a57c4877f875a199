"""The upload page: a valid file becomes a check run whose verdict appears; a bad file gets the API's problems."""

from __future__ import annotations

import io
import json
import time
from typing import Any

import yaml
from flask import Flask
from flask.testing import FlaskClient

from .support import csrf_from, demo_doc, engine_result, proposal_doc, sign_in


def _upload(client: FlaskClient, content: bytes, filename: str = "proposal.yaml") -> Any:
    token = csrf_from(client.get("/upload").get_data(as_text=True))
    data = {"document": (io.BytesIO(content), filename), "csrf_token": token}
    return client.post("/upload", data=data, content_type="multipart/form-data")


def _wait_finished(client: FlaskClient, status_path: str, timeout: float = 20.0) -> dict[str, Any]:
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        status = client.get(status_path).get_json()
        if status["finished"]:
            return status
        time.sleep(0.05)
    raise AssertionError(f"run did not finish: {status}")


def test_upload_runs_the_check_and_shows_the_verdict(client: FlaskClient, people: dict[str, int], engine: Any) -> None:
    from importlib import resources

    sign_in(client, "pablo")
    # The packaged demo file itself, as a proposer would upload it; the reference is the engine's result for it.
    content = (resources.files("feasibility") / "data" / "proposals" / "SQ-2027A-005.yaml").read_bytes()
    result = engine_result(demo_doc("005"))
    assert result.verdict.value == "marginal"  # the file's header
    response = _upload(client, content, "SQ-2027A-005.yaml")
    assert response.status_code == 303
    run_page = response.headers["Location"]
    assert run_page.startswith("/runs/")
    status = _wait_finished(client, run_page + "/status.json")
    assert status["state"] == "done" and status["verdict"] == "marginal" and status["proposal_id"] == "SQ-2027A-005"
    assert [(r["label"], r["verdict"]) for r in status["requests"]] == [(q.label, q.verdict.value) for q in result.requests]
    assert engine.calls == ["SQ-2027A-005"]  # the real engine ran once, through the embedded workers
    html = client.get(run_page).get_data(as_text=True)
    assert "level--marginal" in html
    page = client.get("/proposals/SQ-2027A-005")  # the uploader owns it now
    assert page.status_code == 200
    assert "Near-infrared variability near the Galactic Centre" in page.get_data(as_text=True)


def test_malformed_file_gets_the_same_problems_as_the_api(app: Flask, client: FlaskClient, people: dict[str, int], make_token: Any, engine: Any) -> None:
    document = proposal_doc("BAD-1")
    document["requests"][0]["target"]["dec"] = "+95:00:00"
    del document["requests"][0]["hours_requested"]
    text = json.dumps(document).encode()
    api = client.post(
        "/api/v1/proposals", data=text, headers={"Authorization": f"Bearer {make_token('proposer', 'api-proposer')}", "Content-Type": "application/json"}
    )
    assert api.status_code == 422
    expected = [(p["field"], p["problem"]) for p in api.get_json()["problems"]]
    assert ("requests[0].hours_requested", "is required") in expected

    sign_in(client, "pablo")
    response = _upload(client, text, "bad.json")
    assert response.status_code == 422
    html = response.get_data(as_text=True)
    for field, problem in expected:
        assert f"<code>{field}</code>" in html
        assert problem.replace("'", "&#39;").replace('"', "&#34;") in html
    assert "Nothing was stored" in html
    assert client.get("/proposals/BAD-1").status_code == 404


def test_unreadable_and_missing_files(client: FlaskClient, people: dict[str, int]) -> None:
    sign_in(client, "pablo")
    response = _upload(client, b"id: [unclosed", "broken.yaml")
    assert response.status_code == 422
    assert "is neither valid JSON nor YAML" in response.get_data(as_text=True)
    token = csrf_from(client.get("/upload").get_data(as_text=True))
    response = client.post("/upload", data={"csrf_token": token}, content_type="multipart/form-data")
    assert response.status_code == 400
    assert "choose a proposal file" in response.get_data(as_text=True)


def test_proposer_cannot_upload_over_anothers_proposal(app: Flask, client: FlaskClient, semester: dict[str, Any]) -> None:
    sign_in(client, "pablo")
    response = _upload(client, yaml.safe_dump(demo_doc("005", title="Taken over")).encode())
    assert response.status_code == 403
    assert "belongs to another user" in response.get_data(as_text=True)
    other = app.test_client()
    sign_in(other, "rita")
    assert "Taken over" not in other.get("/proposals/SQ-2027A-005").get_data(as_text=True)


def test_reviewers_do_not_upload(client: FlaskClient, people: dict[str, int]) -> None:
    sign_in(client, "rita")
    assert client.get("/upload").status_code == 403

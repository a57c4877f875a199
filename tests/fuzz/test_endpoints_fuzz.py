"""Fuzzing the submission endpoints: poisoned bodies are answered 4xx with the documents' problems, never 5xx or a traceback.

Each test sends a few hundred poisoned demo documents (see ``mutations``) as JSON or
YAML to one endpoint: ``POST /api/v1/proposals``, ``/api/v1/proposals/bulk``, the
admin uploads of an observatory description and a schedule, and the upload page.
Status codes follow RFC 9110 (400, 413, 422: the client's fault; 5xx never). The
tests use only the shared ``app``/``client``/``make_token`` fixtures, so they run on
whichever store those are given.
"""

from __future__ import annotations

import io
import json
from collections.abc import Callable
from typing import Any

from flask import Flask
from flask.testing import FlaskClient
from hypothesis import given
from hypothesis import strategies as st

from feasibility.documents.problems import MAX_PROBLEMS
from web.support import add_user, csrf_from, sign_in

from . import tally
from .mutations import fuzz, poisoned

EXAMPLES = 300


def _auth(token: str) -> dict[str, str]:
    return {"Authorization": f"Bearer {token}"}


def _content_type(text: str) -> str:
    return "application/json" if text.lstrip()[:1] in ("{", "[") else "application/yaml"


def assert_clean_refusal(target: str, response: Any, done: list[str]) -> dict[str, Any] | None:
    """No 5xx and no traceback; an API refusal in the documents' error shape with a bounded problem list."""
    body = response.get_data(as_text=True)
    tally.count(target, server_error=response.status_code >= 500)
    assert response.status_code < 500, f"{response.status_code} after {done}: {body[:500]}"
    assert "Traceback" not in body and 'File "' not in body, done
    if not response.is_json:
        return None
    answer = response.get_json()
    if answer.get("error") == "invalid document":
        assert 1 <= len(answer["problems"]) <= MAX_PROBLEMS + 1
        assert all(set(p) == {"field", "problem"} for p in answer["problems"])
    return answer


@fuzz(EXAMPLES)
@given(data=st.data())
def test_submitting_poisoned_proposals(client: FlaskClient, make_token: Callable[..., str], data: st.DataObject) -> None:
    token = make_token("proposer")
    text, done = data.draw(poisoned("proposal", data.draw(st.sampled_from(["json", "yaml"]))))
    response = client.post("/api/v1/proposals", data=text.encode("utf-8", "surrogatepass"), headers={**_auth(token), "Content-Type": _content_type(text)})
    assert_clean_refusal("POST /api/v1/proposals", response, done)
    assert response.status_code in (400, 413, 422), done


@fuzz(EXAMPLES)
@given(data=st.data())
def test_bulk_submission_of_poisoned_proposals(client: FlaskClient, make_token: Callable[..., str], data: st.DataObject) -> None:
    token = make_token("proposer")
    items = data.draw(st.lists(poisoned("proposal", "json"), min_size=1, max_size=3))
    done = [step for _, steps in items for step in steps]
    body = '{"proposals": [' + ", ".join(text for text, _ in items) + "]}"
    response = client.post("/api/v1/proposals/bulk", data=body.encode("utf-8", "surrogatepass"), headers={**_auth(token), "Content-Type": "application/json"})
    answer = assert_clean_refusal("POST /api/v1/proposals/bulk", response, done)
    if response.status_code == 200:  # read as a list: each item refused on its own
        assert answer is not None and answer["accepted"] == 0
        for item in answer["items"]:
            assert item["status"] == 422 and 1 <= len(item["problems"]) <= MAX_PROBLEMS + 1
    else:
        assert response.status_code in (400, 413, 422), done


@fuzz(EXAMPLES)
@given(data=st.data())
def test_admin_uploads_of_poisoned_observatories_and_schedules(client: FlaskClient, make_token: Callable[..., str], data: st.DataObject) -> None:
    token = make_token("admin")
    kind = data.draw(st.sampled_from(["observatory", "schedule"]))
    text, done = data.draw(poisoned(kind, data.draw(st.sampled_from(["json", "yaml"]))))
    path = "/api/v1/observatory" if kind == "observatory" else "/api/v1/schedules"
    response = client.post(path, data=text.encode("utf-8", "surrogatepass"), headers={**_auth(token), "Content-Type": _content_type(text)})
    assert_clean_refusal(f"POST {path}", response, done)
    assert response.status_code in (400, 413, 422), done


@fuzz(EXAMPLES)
@given(data=st.data())
def test_upload_page_with_poisoned_files(app: Flask, client: FlaskClient, data: st.DataObject) -> None:
    if not getattr(client, "_fuzz_signed_in", False):  # once per test: the examples share the client
        add_user(app, "fuzz-proposer", "proposer")
        sign_in(client, "fuzz-proposer")
        client._fuzz_signed_in = True  # type: ignore[attr-defined]
    text, done = data.draw(poisoned("proposal", data.draw(st.sampled_from(["json", "yaml"]))))
    token = csrf_from(client.get("/upload").get_data(as_text=True))
    form = {"document": (io.BytesIO(text.encode("utf-8", "surrogatepass")), "proposal.yaml"), "csrf_token": token}
    response = client.post("/upload", data=form, content_type="multipart/form-data")
    assert_clean_refusal("POST /upload (page)", response, done)
    assert response.status_code in (400, 413, 422), done
    assert "Nothing was stored" in response.get_data(as_text=True)


def test_a_huge_body_of_unknown_keys_is_a_small_answer(client: FlaskClient, make_token: Callable[..., str]) -> None:
    """The fuzzers' worst case: hundreds of thousands of unknown keys are refused in one short answer."""
    keys = {f"unknown_{i}": 0 for i in range(700_000)}
    response = client.post("/api/v1/proposals", data=json.dumps(keys), headers={**_auth(make_token("proposer")), "Content-Type": "application/json"})
    assert response.status_code == 413  # RFC 9110 §15.5.14 Content Too Large
    assert response.get_json()["problems"][0]["problem"].startswith("is larger than the limit")
    keys = {f"k{i}": 0 for i in range(40_000)}  # under the size limit: every key wrong, the list capped
    response = client.post("/api/v1/proposals", data=json.dumps(keys), headers={**_auth(make_token("proposer")), "Content-Type": "application/json"})
    assert response.status_code == 422
    problems = response.get_json()["problems"]
    assert len(problems) == MAX_PROBLEMS + 1 and "more problems" in problems[-1]["problem"]
    assert len(response.get_data()) < 20_000

"""The list's exports: the filtered list, every page of it, as CSV (RFC 4180) and JSON (RFC 8259).

The expected verdicts and hours are the real engine's results for the same documents
(the ``expected`` fixture) and the documents' own requested hours.
"""

from __future__ import annotations

import csv
import io
import json
from typing import Any

from flask import Flask
from flask.testing import FlaskClient

from .support import sign_in


def test_csv_export_follows_the_filters(client: FlaskClient, semester: dict[str, Any], expected: dict[str, Any]) -> None:
    sign_in(client, "rita")
    response = client.get("/proposals.csv?semester=2027A&verdict=infeasible")
    assert response.mimetype == "text/csv"
    assert "attachment" in response.headers["Content-Disposition"]
    text = response.get_data(as_text=True)
    assert "\r\n" in text  # RFC 4180: records end in CRLF
    rows = list(csv.DictReader(io.StringIO(text)))
    # The engine's verdicts: only demo proposal 002 is infeasible here (its header: sensitivity).
    assert [p for p, r in expected.items() if r.verdict.value == "infeasible"] == ["SQ-2027A-002"]
    assert [row["proposal_id"] for row in rows] == ["SQ-2027A-002"]
    assert rows[0]["verdict"] == "infeasible"
    assert rows[0]["instruments"] == "HERON"
    assert float(rows[0]["hours_requested"]) == 6.0  # the document's one request of 6 h


def test_json_export_holds_every_page(app: Flask, client: FlaskClient, semester: dict[str, Any], expected: dict[str, Any]) -> None:
    sign_in(client, "rita")
    body = json.loads(client.get("/proposals.json?semester=2027A&per_page=1&page=2").get_data(as_text=True))
    assert body["count"] == 4 and len(body["proposals"]) == 4  # paging does not limit an export
    by_id = {p["proposal_id"]: p for p in body["proposals"]}
    assert {p: by_id[p]["verdict"] for p in by_id} == {p: r.verdict.value for p, r in expected.items()}
    marginal = by_id["SQ-2027A-005"]
    assert marginal["verdict"] == "marginal"  # demo proposal 005's header
    assert marginal["instruments"] == ["OWL"]
    assert marginal["verdict_changed"] is False
    assert marginal["last_checked"] is not None


def test_json_export_with_search_and_instrument(client: FlaskClient, semester: dict[str, Any]) -> None:
    sign_in(client, "rita")
    body = client.get("/proposals.json?semester=2027A&q=red giant").get_json()
    assert [p["proposal_id"] for p in body["proposals"]] == ["SQ-2027A-002"]  # found by its target's name
    body = client.get("/proposals.json?semester=2027A&instrument=kestrel").get_json()
    assert sorted(p["proposal_id"] for p in body["proposals"]) == ["M-1", "SQ-2027A-001"]


def test_csv_download_gives_back_its_connection_read_whole_or_abandoned(app: Flask, client: FlaskClient, semester: dict[str, Any]) -> None:
    # The CSV is written after the view returns; its session must end with the body, also
    # when the client stops reading after the first line (the server then closes the body).
    pool = app.extensions["feasibility.db"]["engine"].pool
    sign_in(client, "rita")
    whole = client.get("/proposals.csv?semester=2027A").get_data(as_text=True)
    assert whole.count("\r\n") == 5  # the header and the four proposals
    assert pool.checkedout() == 0
    response = client.get("/proposals.csv?semester=2027A")  # the test client reads up to the first line
    assert pool.checkedout() == 1  # the export's session, still reading
    response.close()
    assert pool.checkedout() == 0

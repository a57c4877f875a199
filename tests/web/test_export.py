"""The list's exports: the filtered list, every page of it, as CSV (RFC 4180) and JSON (RFC 8259)."""

from __future__ import annotations

import csv
import io
import json
from typing import Any

from flask import Flask
from flask.testing import FlaskClient

from .support import sign_in


def test_csv_export_follows_the_filters(client: FlaskClient, semester: dict[str, Any]) -> None:
    sign_in(client, "rita")
    response = client.get("/proposals.csv?semester=2027A&verdict=infeasible")
    assert response.mimetype == "text/csv"
    assert "attachment" in response.headers["Content-Disposition"]
    text = response.get_data(as_text=True)
    assert "\r\n" in text  # RFC 4180: records end in CRLF
    rows = list(csv.DictReader(io.StringIO(text)))
    assert [row["proposal_id"] for row in rows] == ["P-2"]
    assert rows[0]["verdict"] == "infeasible"
    assert rows[0]["instruments"] == "HERON"
    assert float(rows[0]["hours_requested"]) == 10.0


def test_json_export_holds_every_page(app: Flask, client: FlaskClient, semester: dict[str, Any]) -> None:
    sign_in(client, "rita")
    body = json.loads(client.get("/proposals.json?semester=2027A&per_page=1&page=2").get_data(as_text=True))
    assert body["count"] == 4 and len(body["proposals"]) == 4  # paging does not limit an export
    first = {p["proposal_id"]: p for p in body["proposals"]}["Q-1"]
    assert first["verdict"] == "marginal"
    assert first["instruments"] == ["OWL"]
    assert first["verdict_changed"] is False
    assert first["last_checked"] is not None


def test_json_export_with_search_and_instrument(client: FlaskClient, semester: dict[str, Any]) -> None:
    sign_in(client, "rita")
    body = client.get("/proposals.json?semester=2027A&q=nova").get_json()
    assert [p["proposal_id"] for p in body["proposals"]] == ["P-2"]  # found by its target's name
    body = client.get("/proposals.json?semester=2027A&instrument=kestrel").get_json()
    assert sorted(p["proposal_id"] for p in body["proposals"]) == ["P-1", "U-1"]

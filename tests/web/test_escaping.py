"""Text from proposals is shown as text: markup in a target name or title never reaches the page as markup."""

from __future__ import annotations

import csv
import io
from typing import Any

from flask import Flask
from flask.testing import FlaskClient

from .support import proposal_doc, sign_in, store_checked

SCRIPT = "<script>alert(1)</script>"
# HTML's escaping of the five special characters (as MarkupSafe does it, following the HTML spec's character references).
ESCAPED = "&lt;script&gt;alert(1)&lt;/script&gt;"


def test_target_with_markup_is_escaped_on_every_page(client: FlaskClient, semester: dict[str, Any]) -> None:
    sign_in(client, "rita")
    run_id = semester["runs"]["M-1"]
    for path in ("/proposals/M-1", f"/runs/{run_id}"):
        html = client.get(path).get_data(as_text=True)
        assert SCRIPT not in html, path
        assert ESCAPED in html, path
    listing = client.get("/proposals?semester=2027A&q=script").get_data(as_text=True)
    assert "Markup &lt;b&gt;test&lt;/b&gt;" in listing
    assert "<b>test</b>" not in listing


def test_status_json_carries_text_not_markup(client: FlaskClient, semester: dict[str, Any]) -> None:
    sign_in(client, "rita")
    status = client.get(f"/runs/{semester['runs']['M-1']}/status.json")
    assert status.mimetype == "application/json"
    assert status.get_json()["requests"][0]["target"] == SCRIPT  # the script inserts it with textContent


def test_pages_forbid_inline_scripts(client: FlaskClient, semester: dict[str, Any]) -> None:
    sign_in(client, "rita")
    policy = client.get("/proposals/M-1").headers["Content-Security-Policy"]
    assert "script-src 'self'" in policy and "unsafe-inline" not in policy  # W3C CSP Level 3
    svg = client.get(f"/proposals/M-1/runs/{semester['runs']['M-1']}/requests/0/night.svg")
    assert svg.status_code == 200
    assert svg.headers["Content-Security-Policy"].startswith("default-src 'none'")
    assert "<script" not in svg.get_data(as_text=True)


def test_csv_cells_cannot_become_formulas(app: Flask, client: FlaskClient, semester: dict[str, Any]) -> None:
    store_checked(app, proposal_doc("F-1", title='=HYPERLINK("http://example.org")'), None)
    sign_in(client, "rita")
    text = client.get("/proposals.csv?semester=2027A&q=F-1").get_data(as_text=True)
    rows = list(csv.DictReader(io.StringIO(text)))
    # OWASP "CSV Injection": a cell starting with = + - @ is prefixed so spreadsheets read it as text.
    assert rows[0]["title"] == '\'=HYPERLINK("http://example.org")'

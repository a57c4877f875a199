"""The technical review on the pages, the printable report and the meeting packet's PDFs.

References: the engine's own results for the same documents (``engine_result``); the
demo proposals' headers give their verdicts (001 feasible, 002 infeasible, 005
marginal). A PDF is recognised by its header ``%PDF-`` and its page objects
(ISO 32000-1, 7.5.2 and 7.7.3.3).
"""

from __future__ import annotations

import re
from typing import Any

from flask import Flask
from flask.testing import FlaskClient

from .support import csrf_from, sign_in


def _pages(pdf: bytes) -> int:
    """How many pages a PDF holds: its /Type /Page objects (ISO 32000-1, 7.7.3.3)."""
    return len(re.findall(rb"/Type\s*/Page\b", pdf))


def _post(client: FlaskClient, path: str, data: dict[str, str]) -> Any:
    token = csrf_from(client.get("/proposals/SQ-2027A-001").get_data(as_text=True))
    return client.post(path, data={**data, "csrf_token": token})


def test_reviewer_notes_and_overrides_on_the_page(client: FlaskClient, semester: dict[str, Any], expected: dict[str, Any]) -> None:
    sign_in(client, "ada")
    assert _post(client, "/proposals/SQ-2027A-001/review/assignment", {"reviewer": "rita"}).status_code == 302
    client.post("/sign-out", data={"csrf_token": csrf_from(client.get("/proposals").get_data(as_text=True))})
    sign_in(client, "rita")
    page = client.get("/proposals/SQ-2027A-001").get_data(as_text=True)
    assert "Technical review" in page and "rita" in page and 'name="reviewer"' not in page  # only admins assign
    label = expected["SQ-2027A-001"].requests[0].label
    assert _post(client, "/proposals/SQ-2027A-001/review/notes", {"text": "Guide star faint", "request": label}).status_code == 302
    refused = _post(client, "/proposals/SQ-2027A-001/review/decision", {"decision": "override", "verdict": "marginal", "reason": ""})
    assert refused.status_code == 302
    page = client.get("/proposals/SQ-2027A-001").get_data(as_text=True)
    assert "Not recorded: reason is required" in page and "overridden by" not in page
    _post(client, "/proposals/SQ-2027A-001/review/decision", {"decision": "override", "verdict": "marginal", "reason": "Faint guide star"})
    page = client.get("/proposals/SQ-2027A-001").get_data(as_text=True)
    engine_block = page.split('class="review__engine"')[1].split("</p>")[0]
    assert "feasible" in engine_block and "marginal" not in engine_block  # the engine's verdict stays beside the reviewer's
    assert "overridden by rita" in page and "Faint guide star" in page and f"request {label}</strong> — Guide star faint" in page


def test_proposer_sees_the_verdict_that_stands_and_no_forms(app: Flask, client: FlaskClient, semester: dict[str, Any]) -> None:
    reviewer = app.test_client()
    sign_in(reviewer, "rita")
    _post(reviewer, "/proposals/SQ-2027A-001/review/notes", {"text": "Visible note"})
    _post(reviewer, "/proposals/SQ-2027A-001/review/decision", {"decision": "override", "verdict": "infeasible", "reason": "Secret reason"})
    sign_in(client, "pablo")
    page = client.get("/proposals/SQ-2027A-001").get_data(as_text=True)
    stands = page.split("Verdict that stands:")[1].split("</p>")[0]
    assert "infeasible" in stands and "Secret reason" not in page and "Visible note" not in page and "Record decision" not in page
    app.config["REVIEW_NOTES_TO_PROPOSERS"] = True
    assert "Visible note" in client.get("/proposals/SQ-2027A-001").get_data(as_text=True)
    answer = client.post("/proposals/SQ-2027A-001/review/decision", data={"decision": "confirm", "csrf_token": csrf_from(page)})
    assert answer.status_code == 403
    assert client.get("/semesters/2027A/packet.pdf").status_code == 403  # the packet is the committee's
    assert client.get("/proposals/SQ-2027A-005/report.pdf").status_code == 404  # petra's


def test_report_page_and_pdfs(client: FlaskClient, semester: dict[str, Any], expected: dict[str, Any]) -> None:
    sign_in(client, "rita")
    page = client.get("/proposals/SQ-2027A-001/report").get_data(as_text=True)
    result = expected["SQ-2027A-001"]
    for request in result.requests:
        for finding in request.findings:
            assert finding.message.replace("'", "&#39;").replace('"', "&#34;") in page
    assert "<details" not in page.split('class="request report__request"', 1)[1]  # findings' figures open, not folded
    answer = client.get("/proposals/SQ-2027A-001/report.pdf")
    assert answer.status_code == 200 and answer.mimetype == "application/pdf" and answer.data.startswith(b"%PDF-")
    single = _pages(answer.data)
    assert single >= 1
    packet = client.get("/semesters/2027A/packet.pdf")
    assert packet.status_code == 200 and packet.data.startswith(b"%PDF-")
    assert _pages(packet.data) >= 1 + 4  # the overview, then each of the four proposals on its own page(s)
    filtered = client.get("/semesters/2027A/packet.pdf?verdict=infeasible")
    assert 1 + 1 <= _pages(filtered.data) < _pages(packet.data)  # the overview and 002 (its header: infeasible)


def test_print_stylesheet_hides_navigation_and_opens_folded_parts(client: FlaskClient) -> None:
    with client.get("/assets/dashboard.css") as response:
        css = response.get_data(as_text=True)
    printing = css.split("@media print")[1]
    assert ".site-header" in printing and "display: none" in printing and "details-content" in printing

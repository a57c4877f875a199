"""The pages in headless Chromium: sign-in, the list and its filters, a proposal with plots, upload, access, escaping.

Every result shown was computed by the real engine; the expected texts are its own
results for the same documents (``engine_result``), and the demo proposals' headers
give their verdicts (001 feasible, 005 marginal, 002 and 003 infeasible).
"""

from __future__ import annotations

import threading
from pathlib import Path
from typing import Any

import pytest
import yaml

from web.support import demo_doc, engine_result, proposal_doc

from .conftest import ARTIFACTS, screenshot, sign_in

pytestmark = pytest.mark.browser


def test_sign_in_and_filter_the_list(page: Any) -> None:
    page.goto("/")
    assert "/sign-in" in page.url
    screenshot(page, "01-sign-in")
    page.get_by_label("User name").fill("rita")
    page.get_by_label("Password").fill("wrong")
    page.get_by_role("button", name="Sign in").click()
    assert page.get_by_role("alert").is_visible()
    sign_in(page, "rita")
    rows = page.locator("table.proposals tbody tr")
    assert rows.count() == 5
    screenshot(page, "02-list")
    page.get_by_label("Verdict").select_option("infeasible")
    page.get_by_role("button", name="Apply filters").click()
    page.wait_for_url("**verdict=infeasible**")
    assert rows.locator("th").all_inner_texts() == ["SQ-2027A-002", "SQ-2027A-003"]  # their headers: infeasible
    assert all("infeasible" in text for text in rows.all_inner_texts())
    screenshot(page, "03-list-filtered")
    page.get_by_label("Verdict").select_option("marginal")
    page.get_by_role("button", name="Apply filters").click()
    page.wait_for_url("**verdict=marginal**")
    assert rows.locator("th").all_inner_texts() == ["SQ-2027A-005"]  # its header: marginal


def test_sort_by_keyboard_and_skip_link(page: Any) -> None:
    sign_in(page, "rita")
    page.keyboard.press("Tab")
    focused = page.evaluate("document.activeElement.textContent")
    assert focused.strip() == "Skip to main content"  # the first stop, for keyboard users (WCAG 2.4.1)
    page.keyboard.press("Enter")
    header = page.get_by_role("link", name="Hours requested")
    header.focus()
    page.keyboard.press("Enter")
    page.wait_for_url("**sort=hours**")
    header = page.get_by_role("link", name="Hours requested")
    header.focus()
    screenshot(page, "13-keyboard-focus", full_page=False)  # the focus ring must be plain to see
    page.keyboard.press("Enter")
    page.wait_for_url("**dir=desc**")
    first = page.locator("table.proposals tbody tr").first.locator("th").inner_text()
    assert first == "SQ-2027A-001"  # 4 + 3.5 = 7.5 hours, the most (002 asks 6)


def test_proposal_page_with_plots(page: Any) -> None:
    sign_in(page, "rita")
    page.get_by_role("link", name="SQ-2027A-001").click()
    page.wait_for_url("**/proposals/SQ-2027A-001")
    images = page.locator("figure.plot img")
    assert images.count() == 6  # three plots for each of two requests
    for index in range(images.count()):
        image = images.nth(index)
        image.scroll_into_view_if_needed()
        page.wait_for_function("img => img.complete && img.naturalWidth > 0", arg=image.element_handle())
    assert page.get_by_role("heading", name="Run history").is_visible()
    assert "feasible" in page.locator(".verdict-large").inner_text()  # demo 001's header
    result = engine_result(demo_doc("001"))
    for k, request in enumerate(result.requests):
        rows = page.locator("section.request").nth(k).locator("table.findings tbody tr")
        assert rows.count() == 8  # the eight checks of the vocabulary
        shown = {row.locator("th").inner_text(): row.locator("td").nth(1).locator("p").first.inner_text() for row in rows.all()}
        assert shown == {f.check: f.message for f in request.findings}
    screenshot(page, "04-proposal")


def test_pages_with_many_and_long_findings(page: Any) -> None:
    sign_in(page, "rita")
    page.goto("/proposals/SQ-2027A-005")
    result = engine_result(demo_doc("005"))
    assert "marginal" in page.locator(".verdict-large").inner_text()  # its header
    marginal = page.locator("tr.finding--marginal")
    expected = [f.message for q in result.requests for f in q.findings if f.level.value == "marginal"]
    assert marginal.count() == len(expected) == 4
    assert sorted(row.locator("td").nth(1).locator("p").first.inner_text() for row in marginal.all()) == sorted(expected)
    screenshot(page, "14-proposal-marginal")
    page.goto("/proposals/SQ-2027A-003")
    warning = next(f for f in result_of("003").requests[1].findings if f.check == "sun-safety")
    assert warning.message.startswith("WARNING")  # demo 003's header: the second target comes within the Sun limit
    assert page.get_by_text(warning.message).is_visible()
    assert "infeasible" in page.locator(".verdict-large").inner_text()
    # Only the findings of the second request: its plots (drawn on demand) are not needed to look at long messages.
    ARTIFACTS.mkdir(exist_ok=True)
    page.locator("section.request").nth(1).locator("table.findings").screenshot(path=str(ARTIFACTS / "15-findings-infeasible.png"))


def result_of(number: str) -> Any:
    """The real engine's result for a demo proposal."""
    return engine_result(demo_doc(number))


def test_upload_shows_progress_then_verdict(page: Any, tmp_path: Path, live_server: dict[str, Any]) -> None:
    gate = threading.Event()
    live_server["engine"].gate = gate  # the check waits until the progress has been seen
    try:
        _upload_flow(page, tmp_path, gate)
    finally:
        gate.set()
        live_server["engine"].gate = None


def _upload_flow(page: Any, tmp_path: Path, gate: threading.Event) -> None:
    sign_in(page, "pablo")
    page.get_by_role("link", name="Upload a proposal").click()
    bad = tmp_path / "bad.yaml"
    broken = proposal_doc("SQ-B-900")
    broken["requests"][0]["target"]["dec"] = "+95:00:00"
    bad.write_text(yaml.safe_dump(broken))
    page.get_by_label("Proposal file (JSON or YAML)").set_input_files(str(bad))
    page.get_by_role("button", name="Upload and check").click()
    alert = page.get_by_role("alert")
    assert "requests[0].target.dec" in alert.inner_text()
    screenshot(page, "05-upload-problems")

    good = tmp_path / "good.yaml"
    document = proposal_doc("SQ-B-901", title="Uploaded in the browser", target="Field 3")
    good.write_text(yaml.safe_dump(document))
    page.get_by_label("Proposal file (JSON or YAML)").set_input_files(str(good))
    page.get_by_role("button", name="Upload and check").click()
    page.wait_for_url("**/runs/*")
    progress = page.locator("#run-progress")
    assert progress.is_visible()
    page.wait_for_timeout(800)  # at least one poll of the status while the run waits
    assert progress.is_visible() and page.locator("#run-result").is_hidden()
    screenshot(page, "06-run-progress")
    gate.set()
    page.locator("#run-result").wait_for(state="visible", timeout=20_000)
    verdict = engine_result(document).verdict.value
    assert page.locator("#run-verdict").inner_text().split() == [verdict]  # the real engine's verdict for the file
    assert "Field 3" in page.locator("#run-requests").inner_text()
    screenshot(page, "07-run-verdict")
    page.get_by_role("link", name="See every finding and plot").click()
    page.wait_for_url("**/proposals/SQ-B-901**")


def test_proposer_is_denied_anothers_proposal(page: Any) -> None:
    sign_in(page, "pablo")
    listed = page.locator("table.proposals tbody tr th").all_inner_texts()
    assert "SQ-2027A-001" in listed and "SQ-2027A-002" in listed
    assert not {"SQ-2027A-003", "SQ-2027A-005", "M-1"} & set(listed)  # petra's are not listed
    response = page.goto("/proposals/SQ-2027A-005")
    assert response is not None and response.status == 404
    assert "There is no proposal with that id that you may see." in page.inner_text("main")
    screenshot(page, "08-denied")


def test_markup_in_a_target_name_is_shown_as_text(page: Any) -> None:
    dialogs: list[str] = []
    page.on("dialog", lambda dialog: (dialogs.append(dialog.message), dialog.dismiss()))
    sign_in(page, "rita")
    page.goto("/proposals/M-1")
    target = page.locator("h2 .target").first
    assert target.inner_text() == "<script>alert(1)</script>"
    assert page.locator("h1").inner_text().endswith("Infrared <i>dust</i> lanes")
    assert page.locator("main script").count() == 0
    page.wait_for_timeout(300)
    assert dialogs == []  # no alert ran
    screenshot(page, "09-markup-as-text")


def test_overview_and_tablet_width(page: Any) -> None:
    sign_in(page, "rita")
    page.get_by_role("link", name="Semester overview").click()
    page.wait_for_url("**/semesters/**")
    for image in page.locator("img.plot-img").all():
        image.scroll_into_view_if_needed()
        page.wait_for_function("img => img.complete && img.naturalWidth > 0", arg=image.element_handle(), timeout=30_000)
    screenshot(page, "10-overview")
    page.set_viewport_size({"width": 768, "height": 1024})
    page.goto("/proposals")
    width = page.evaluate("document.documentElement.scrollWidth")
    assert width <= 768  # no sideways scrolling of the page at tablet width (the table scrolls in its own box)
    screenshot(page, "11-list-tablet")
    page.goto("/proposals/SQ-2027A-005")
    assert page.evaluate("document.documentElement.scrollWidth") <= 768
    screenshot(page, "12-proposal-tablet")

"""In a browser at tablet width: tables keep their important columns and never scroll unmarked; the schedule calendar.

At 768 and 1024 px (common tablet widths, portrait and landscape; common practice) the
proposal list must not overflow sideways unless the page says so in words (the scroll
cue), and its priority columns (proposal, verdict, title, first failing check, needed ÷
requested) stay visible, with the folded columns' values under the title. The other wide
tables (overview, changes, a proposal's findings, history and review) are held to the
same rule. The references are the documents themselves: the demo proposals' own PI
names, the packaged 2027A schedule's nights, statuses and notes, and the demo
proposals' headers for their verdicts (001 feasible, 005 marginal, 002 and 003 infeasible).
"""

from __future__ import annotations

from datetime import date, timedelta
from importlib import resources
from typing import Any

import pytest
import yaml

from web.support import demo_doc

from .conftest import MARKUP_DOC, screenshot, sign_in

pytestmark = pytest.mark.browser

TABLET_WIDTHS = (768, 1024)
#: The list's columns that must show at every width (the issue's priority columns), by their header words.
PRIORITY_HEADERS = ("Proposal", "Verdict", "Title", "First failing check", "Needed ÷ requested")

#: Overflow of the document and of every table box: [scrollWidth, clientWidth, is the scroll cue before it shown].
_OVERFLOW = """() => ({
  page: [document.documentElement.scrollWidth, document.documentElement.clientWidth],
  boxes: Array.from(document.querySelectorAll('.table-wrap')).filter(b => b.offsetParent !== null).map(b => {
    const cue = b.previousElementSibling;
    const shown = !!(cue && cue.classList.contains('scroll-cue') && !cue.hidden && cue.offsetParent !== null);
    return [b.scrollWidth, b.clientWidth, shown];
  }),
})"""


def _no_hidden_overflow(page: Any) -> None:
    """Neither the page nor any table scrolls sideways without the worded scroll cue showing."""
    state = page.evaluate(_OVERFLOW)
    width, client = state["page"]
    assert width <= client, f"the page scrolls sideways: {width} > {client}"
    for scroll, box, cue in state["boxes"]:
        assert scroll <= box + 1 or cue, f"a table scrolls sideways with no cue: {scroll} > {box}"


def _visible_headers(page: Any) -> list[str]:
    return page.evaluate("""() => Array.from(document.querySelectorAll('table.proposals thead th'))
        .filter(th => th.offsetParent !== null && th.getBoundingClientRect().width > 0)
        .map(th => th.querySelector('a').childNodes[0].textContent.trim())""")


@pytest.mark.parametrize("width", TABLET_WIDTHS)
def test_list_keeps_priority_columns_at_tablet_width(browser: Any, live_server: dict[str, Any], width: int) -> None:
    context = browser.new_context(viewport={"width": width, "height": 900}, base_url=live_server["url"])
    page = context.new_page()
    errors: list[str] = []
    page.on("pageerror", lambda error: errors.append(str(error)))
    try:
        sign_in(page, "rita")
        _no_hidden_overflow(page)
        box = page.locator(".table-wrap--list")
        assert page.evaluate("b => b.scrollWidth <= b.clientWidth + 1", box.element_handle()), "the list itself still overflows"
        assert page.locator(".scroll-cue").first.is_hidden()  # nothing scrolls, so nothing to announce
        headers = _visible_headers(page)
        for name in PRIORITY_HEADERS:
            assert name in headers, (name, headers)
        assert "Principal investigator" not in headers  # a low-priority column folded away ...
        rows = page.locator("table.proposals tbody tr")
        assert rows.count() == 5
        first = rows.filter(has=page.get_by_role("link", name="SQ-2027A-001"))
        title_cell = first.locator("td.title")
        assert demo_doc("001")["pi"]["name"] in title_cell.inner_text()  # ... and its value shows under the title
        assert first.locator("td.title .fold").is_visible()
        for index in (0, 1, 2, 8, 9):  # id, verdict, title, first failing check, needed ÷ requested
            cell = first.locator("th, td").nth(index)
            assert cell.is_visible() and cell.bounding_box()["x"] + cell.bounding_box()["width"] <= width, index
        # The verdict is a word and an icon beside its colour.
        badge = first.locator(".level")
        assert badge.locator(".level__word").inner_text() == "feasible" and badge.locator("svg").count() == 1  # its header: feasible
        infeasible = rows.filter(has=page.get_by_role("link", name="SQ-2027A-002"))
        assert infeasible.locator(".level__word").inner_text() == "infeasible"
        assert infeasible.locator("td").nth(7).inner_text() != "—"  # infeasible: a first failing check is named
        # Keyboard focus stays visible on a header link (WCAG 2.4.7).
        link = page.get_by_role("link", name="Needed ÷ requested")
        link.focus()
        outline = page.evaluate("() => { const s = getComputedStyle(document.activeElement); return [s.outlineStyle, parseFloat(s.outlineWidth)]; }")
        assert outline[0] == "solid" and outline[1] >= 2, outline
        screenshot(page, f"20-list-{width}px")
        # A folded column can still sort the list, from the form: most hours requested first.
        page.get_by_label("Sort by").select_option("hours")
        page.get_by_label("Order").select_option("desc")
        page.get_by_role("button", name="Apply filters").click()
        page.wait_for_url("**sort=hours**")
        documents = [*(demo_doc(number) for number in ("001", "002", "003", "005")), MARKUP_DOC]
        hours = {doc["id"]: sum(float(r["hours_requested"]) for r in doc["requests"]) for doc in documents}  # the documents' own hours
        shown = rows.locator("th").all_inner_texts()
        assert shown == sorted(hours, key=lambda pid: -hours[pid]), (shown, hours)
        for path in ("/overview", "/proposals/SQ-2027A-005", "/proposals/SQ-2027A-003", "/semesters/2027A/schedule", "/semesters/2027A/calendar"):
            page.goto(path)
            _no_hidden_overflow(page)
        screenshot(page, f"21-calendar-{width}px")
    finally:
        context.close()
    assert errors == [], errors


def test_narrow_list_says_it_scrolls(browser: Any, live_server: dict[str, Any]) -> None:
    """Narrower than a tablet, what still does not fit scrolls inside its box, and the page says so in words."""
    context = browser.new_context(viewport={"width": 420, "height": 900}, base_url=live_server["url"])
    page = context.new_page()
    try:
        sign_in(page, "rita")
        box = page.locator(".table-wrap--list")
        if page.evaluate("b => b.scrollWidth > b.clientWidth + 1", box.element_handle()):
            cue = page.locator(".scroll-cue").first
            assert cue.is_visible() and "scroll it sideways" in cue.inner_text()
            assert box.get_attribute("tabindex") == "0"  # reachable by keyboard, so the arrow keys scroll it
        else:  # everything folded in: then nothing may be announced
            assert page.locator(".scroll-cue").first.is_hidden()
        _no_hidden_overflow(page)
        page.set_viewport_size({"width": 1400, "height": 900})  # wider again: the cue goes
        page.wait_for_function("() => document.querySelector('.scroll-cue') === null || document.querySelector('.scroll-cue').hidden")
        assert "Principal investigator" in _visible_headers(page)
    finally:
        context.close()


def _schedule() -> dict[date, dict[str, Any]]:
    """The packaged 2027A schedule (the demo store's version in force), night by night."""
    text = (resources.files("feasibility") / "data" / "schedule-2027A.yaml").read_text(encoding="utf-8")
    nights = yaml.safe_load(text)["nights"]
    return {date.fromisoformat(str(n["night"])): n for n in nights}


def test_calendar_shows_nights_by_instrument_and_status(page: Any) -> None:
    nights = _schedule()
    sign_in(page, "rita")
    page.goto("/semesters/2027A/calendar")
    months = sorted({(d.year, d.month) for d in nights})
    captions = page.locator("table.calendar caption").all_inner_texts()
    assert captions == [date(y, m, 1).strftime("%B %Y") for y, m in months]
    cells = page.locator("td.night")
    assert cells.count() == (max(nights) - min(nights).replace(day=1)).days + 1  # every day from the first month's first
    by_status: dict[str, int] = {}
    for night, entry in nights.items():
        status = entry.get("status", "open")
        by_status[status] = by_status.get(status, 0) + 1
        cell = page.locator(f'td[data-night="{night.isoformat()}"]')
        text = cell.inner_text()
        assert str(night.day) in cell.locator(".night__date").inner_text()
        if status == "open":
            assert entry["instrument"] in text
        else:
            assert cell.locator(".night__status").inner_text() == status  # the status in words
            # ... and by a pattern, not colour alone: engineering and shutdown nights are hatched.
            assert "repeating-linear-gradient" in cell.evaluate("c => getComputedStyle(c).backgroundImage")
        if entry.get("note"):
            assert entry["note"] in cell.locator(".night__note").inner_text()
    assert by_status.get("engineering") and by_status.get("shutdown")  # the demo schedule has both
    first = min(nights).replace(day=1)
    unlisted = [(first + timedelta(days=i)).isoformat() for i in range((max(nights) - first).days + 1) if first + timedelta(days=i) not in nights]
    closed = page.locator("td.night--closed")
    assert [cell.get_attribute("data-night") for cell in closed.all()] == unlisted  # a night not listed is closed ...
    assert all(text.split("\n")[-1].strip() == "closed" for text in closed.all_inner_texts())  # ... and says so
    # Keyboard: Tab from the top reaches the first month's box; its focus ring shows.
    page.locator("body").focus()
    first_month = page.locator(".calendar-wrap").first
    for _ in range(40):
        page.keyboard.press("Tab")
        if page.evaluate("b => document.activeElement === b", first_month.element_handle()):
            break
    else:
        pytest.fail("the calendar cannot be reached with the Tab key")
    assert first_month.get_attribute("aria-labelledby") and page.evaluate("() => getComputedStyle(document.activeElement).outlineStyle") == "solid"
    page.keyboard.press("Tab")
    assert page.evaluate("() => document.activeElement.getAttribute('aria-labelledby')") == f"month-{months[1][0]:04d}-{months[1][1]:02d}"
    screenshot(page, "22-calendar", full_page=False)

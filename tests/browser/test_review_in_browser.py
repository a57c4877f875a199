"""The technical review in headless Chromium: assign, note, override, the flag after a re-check, and the packet download.

The engine's verdicts are its own (real engine); taking HERON off every night must
make a HERON request infeasible by the schedule check's definition (VOCABULARY,
"schedule"). A PDF starts with ``%PDF-`` (ISO 32000-1, 7.5.2).
"""

from __future__ import annotations

import json
from importlib import resources
from typing import Any

import pytest
import yaml

from web.support import add_user, proposal_doc, store_checked

from .conftest import screenshot, sign_in

pytestmark = pytest.mark.browser


def _sign_out(page: Any) -> None:
    page.get_by_role("button", name="Sign out").click()
    page.wait_for_url("**/sign-in**")


def _take_heron_off(app: Any) -> None:
    """Upload a schedule with every HERON night closed and run the re-checks it plans."""
    from feasibility.service.rechecks import dispatch_plan, upload_schedule
    from feasibility.store.db import session_scope

    schedule = yaml.safe_load((resources.files("feasibility") / "data" / "schedule-2027A.yaml").read_text())
    schedule = json.loads(json.dumps(schedule, default=str))
    schedule["nights"] = [dict(n, status="engineering") if n.get("instrument") == "HERON" else n for n in schedule["nights"]]
    schedule["version"] = "2027A-no-heron"
    with app.app_context():
        with session_scope() as session:
            upload = upload_schedule(session, schedule)
        dispatch_plan(upload.plan)
    assert app.extensions["feasibility.dispatch"].wait_idle(timeout=300)


def test_assign_note_override_flag_and_packet(page: Any, live_server: dict[str, Any]) -> None:
    app = live_server["app"]
    add_user(app, "ada", "admin")
    document = proposal_doc("H-1", instrument="HERON", ra="15:00:00", dec="-40:00:00", hours=2.0)
    document["requests"][0]["brightness"]["magnitude"] = 13.0
    store_checked(app, document, "pablo")

    sign_in(page, "ada")
    page.goto("/proposals/H-1")
    page.get_by_label("Technical reviewer").select_option("rita")
    page.get_by_role("button", name="Assign").click()
    assert page.locator(".review__reviewer").inner_text() == "rita"
    _sign_out(page)

    sign_in(page, "rita")
    page.goto("/proposals/H-1")
    engine_before = page.locator(".review__engine .level__word").inner_text()
    assert engine_before != "infeasible"
    page.get_by_label("Note on").select_option("a")
    page.get_by_label("Note", exact=True).fill("The slit may be too narrow for this seeing.")
    page.get_by_role("button", name="Add note").click()
    assert "The slit may be too narrow" in page.locator(".review__notes").inner_text()
    page.get_by_label("Override it with").check()
    chosen = "marginal" if engine_before == "feasible" else "feasible"
    page.get_by_label("Reviewer's verdict").select_option(chosen)
    page.get_by_label("Reason (required to override)").fill("The committee knows the site better.")
    page.get_by_role("button", name="Record decision").click()
    assert page.locator(".review__final .level__word").inner_text() == chosen
    assert page.locator(".review__again").count() == 0

    _take_heron_off(app)
    page.reload()
    assert page.locator(".review__engine .level__word").inner_text() == "infeasible"  # no open HERON night
    assert page.locator(".review__final .level__word").inner_text() == chosen  # the override survives the re-check...
    assert page.locator(".review__again").is_visible()  # ...flagged to review again
    screenshot(page, "20-review-to-review-again")

    with page.expect_download(timeout=300_000) as download:  # drawn on demand: every plot of the semester
        page.get_by_role("link", name="Semester 2027A packet (PDF)").click(no_wait_after=True)
    path = download.value.path()
    with open(path, "rb") as handle:
        assert handle.read(5) == b"%PDF-"
    assert download.value.suggested_filename == "packet-2027A.pdf"

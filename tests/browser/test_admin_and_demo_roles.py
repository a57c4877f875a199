"""In a browser: the three demo people of ``serve --demo`` and an admin's schedule upload with preview and confirm.

Runs are computed by the real engine against the demo observatory; the demo
people are made by the same code ``serve --demo`` runs (feasibility.cli.demo).
"""

from __future__ import annotations

import json
import threading
from collections.abc import Iterator
from importlib import resources
from pathlib import Path
from typing import Any

import pytest
import yaml

from web.support import demo_doc, store_checked

from .conftest import screenshot


@pytest.fixture(scope="module")
def demo_server(tmp_path_factory: pytest.TempPathFactory, grid_cache_dir: Path) -> Iterator[dict[str, Any]]:
    """The app on a free port with demo proposals 001 and 002 checked and the demo people made; their passwords."""
    from werkzeug.serving import make_server

    from feasibility.cli.demo import make_demo_people
    from feasibility.web import create_app

    home = tmp_path_factory.mktemp("demo-roles-store")
    app = create_app(
        {
            "SECRET_KEY": "browser-tests",
            "DATABASE_URL": f"sqlite:///{home / 'store.sqlite'}",
            "CREATE_TABLES": True,
            "BROKER_URL": None,
            "SWEEP_INTERVAL_S": 0,
            "SESSION_COOKIE_SECURE": False,
        }
    )
    for number in ("001", "002"):
        store_checked(app, demo_doc(number), None)
    with app.app_context():
        passwords = make_demo_people()
    server = make_server("127.0.0.1", 0, app, threaded=True)
    thread = threading.Thread(target=server.serve_forever, daemon=True)
    thread.start()
    try:
        yield {"url": f"http://127.0.0.1:{server.server_port}", "passwords": passwords, "app": app}
    finally:
        server.shutdown()
        thread.join(10)
        server.server_close()
        app.extensions["feasibility.dispatch"].shutdown()
        app.extensions["feasibility.db"]["engine"].dispose()


@pytest.fixture
def tab(browser: Any, demo_server: dict[str, Any]) -> Iterator[Any]:
    context = browser.new_context(viewport={"width": 1280, "height": 860}, base_url=demo_server["url"])
    page = context.new_page()
    yield page
    context.close()


def _sign_in(page: Any, name: str, password: str) -> None:
    page.goto("/sign-in")
    page.get_by_label("User name").fill(name)
    page.get_by_label("Password").fill(password)
    page.get_by_role("button", name="Sign in").click()
    page.wait_for_url("**/proposals**")


def test_three_demo_roles(browser: Any, demo_server: dict[str, Any]) -> None:
    passwords = demo_server["passwords"]
    for name, sees, refused in (("demo-proposer", 1, "/overview"), ("demo-reviewer", 2, "/admin/schedule"), ("demo-admin", 2, None)):
        context = browser.new_context(base_url=demo_server["url"])
        page = context.new_page()
        _sign_in(page, name, passwords[name])
        assert page.locator("table.proposals tbody tr").count() == sees, name
        if refused:
            page.goto(refused)
            assert page.get_by_role("heading", name="Not open to your role").is_visible(), name
            assert "demo-admin" in page.locator("main").inner_text()
        else:
            page.goto("/overview")
            assert page.get_by_role("heading", name="Pressure by instrument and lunar time").is_visible()
        context.close()


def test_admin_previews_then_confirms_a_schedule(tab: Any, demo_server: dict[str, Any], tmp_path: Path) -> None:
    data = resources.files("feasibility") / "data" / "schedule-2027A.yaml"
    schedule = yaml.safe_load(data.read_text(encoding="utf-8"))
    schedule["version"] = "2027A-browser"
    schedule["nights"] = [n for n in schedule["nights"] if n.get("instrument") != "HERON"]
    path = tmp_path / "schedule.json"
    path.write_text(json.dumps(schedule, default=str))
    _sign_in(tab, "demo-admin", demo_server["passwords"]["demo-admin"])
    tab.get_by_role("link", name="Upload a schedule").click()
    tab.get_by_label("Schedule file (JSON or YAML)").set_input_files(str(path))
    tab.get_by_role("button", name="Preview the changes").click()
    preview = tab.locator("#preview")
    assert "HERON" in preview.inner_text() and "SQ-2027A-002" in tab.locator("#preview-proposals").inner_text()
    assert "SQ-2027A-001" not in tab.locator("#preview-proposals").inner_text()  # KESTREL only: untouched
    screenshot(tab, "admin-schedule-preview")
    tab.locator("#confirm").click()
    tab.wait_for_url("**/semesters/2027A/schedule")
    assert "2027A-browser" in tab.locator("main").inner_text()
    assert "stored" in tab.locator(".notice").inner_text()

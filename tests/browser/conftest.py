"""A live server and headless Chromium for the browser tests.

The app runs from a real werkzeug server thread on 127.0.0.1 with a temporary
SQLite store and the embedded pool. Every run is computed by the real engine,
wrapped in a gate a test can close to see the progress display; the sky grid is
cached in the session's temporary directory, shared with the page tests. Chromium
is Debian's package at /usr/bin/chromium, driven by Playwright; without it the
tests are skipped, except under CI=true where they fail.
"""

from __future__ import annotations

import os
import threading
from collections.abc import Iterator, Mapping
from pathlib import Path
from typing import Any

import pytest

from web.support import GatedEngine, add_user, demo_doc, private_grid_cache, proposal_doc, store_checked

CHROMIUM = "/usr/bin/chromium"
CHROMIUM_ARGS = ["--no-sandbox", "--disable-gpu", "--disable-background-networking", "--disable-component-update", "--disable-sync", "--no-first-run"]
ARTIFACTS = Path(__file__).resolve().parents[2] / "test-artifacts"


def require_chromium(path: str = CHROMIUM, environ: Mapping[str, str] = os.environ) -> str:
    """``path`` when Chromium is there; otherwise skip the test, or fail it under CI=true (CI must run these)."""
    if not (os.path.exists(path) and os.access(path, os.X_OK)):
        message = f"headless Chromium is not installed at {path} (apt-get install chromium)"
        if environ.get("CI", "").strip().lower() == "true":
            pytest.fail(message)
        pytest.skip(message)
    return path


@pytest.fixture(scope="session")
def chromium_path() -> str:
    return require_chromium()


#: Invented proposals with markup in the title and target, and an unowned one (besides demo proposals 001, 002, 003, 005).
MARKUP_DOC = proposal_doc("M-1", title="Infrared <i>dust</i> lanes", instrument="OWL", target="<script>alert(1)</script>", hours=3.5, ra="17:45:00")


@pytest.fixture(scope="session", autouse=True)
def grid_cache_dir(tmp_path_factory: pytest.TempPathFactory) -> Iterator[Path]:
    """The session's FEASIBILITY_CACHE_DIR (the same directory as the page tests')."""
    with private_grid_cache(tmp_path_factory.getbasetemp()) as directory:
        yield directory


@pytest.fixture(scope="module")
def live_server(tmp_path_factory: pytest.TempPathFactory, grid_cache_dir: Path) -> Iterator[dict[str, Any]]:
    """The app on a free port, with users and five proposals checked by the real engine; yields its base URL and the engine's gate wrapper.

    pablo owns demo proposals 001 (feasible, two requests) and 002 (infeasible); petra owns
    003 (infeasible, long Sun-safety warning), 005 (marginal, three requests) and M-1 (markup).
    """
    from werkzeug.serving import make_server

    from feasibility.web import create_app

    home = tmp_path_factory.mktemp("browser-store")
    engine = GatedEngine()
    with pytest.MonkeyPatch.context() as patch:
        patch.setattr("feasibility.service.runs.check", engine)
        app = create_app(
            {
                "SECRET_KEY": "browser-tests",
                "DATABASE_URL": f"sqlite:///{home / 'store.sqlite'}",
                "CREATE_TABLES": True,
                "BROKER_URL": None,
                "SWEEP_INTERVAL_S": 0,
            }
        )
        for name, role in (("rita", "reviewer"), ("pablo", "proposer"), ("petra", "proposer")):
            add_user(app, name, role)
        for number, owner in (("001", "pablo"), ("002", "pablo"), ("003", "petra"), ("005", "petra")):
            store_checked(app, demo_doc(number), owner)
        store_checked(app, MARKUP_DOC, "petra")
        server = make_server("127.0.0.1", 0, app, threaded=True)
        thread = threading.Thread(target=server.serve_forever, name="browser-test-server", daemon=True)
        thread.start()
        try:
            yield {"url": f"http://127.0.0.1:{server.server_port}", "engine": engine, "app": app}
        finally:
            if engine.gate is not None:
                engine.gate.set()
            server.shutdown()
            thread.join(10)
            server.server_close()
            app.extensions["feasibility.dispatch"].shutdown()
            app.extensions["feasibility.db"]["engine"].dispose()


@pytest.fixture(scope="session")
def browser(chromium_path: str) -> Iterator[Any]:
    from playwright.sync_api import sync_playwright

    with sync_playwright() as playwright:
        chromium = playwright.chromium.launch(executable_path=chromium_path, args=CHROMIUM_ARGS, headless=True)
        yield chromium
        chromium.close()


@pytest.fixture
def page(browser: Any, live_server: dict[str, Any]) -> Iterator[Any]:
    """A fresh browser context (no cookies) at laptop width; script errors fail the test."""
    context = browser.new_context(viewport={"width": 1280, "height": 860}, base_url=live_server["url"])
    tab = context.new_page()
    errors: list[str] = []
    tab.on("pageerror", lambda error: errors.append(str(error)))
    # Script errors count; "failed to load resource" notes for pages that answer 401/404 on purpose do not.
    tab.on("console", lambda m: errors.append(m.text) if m.type == "error" and not m.text.startswith("Failed to load resource") else None)
    yield tab
    context.close()
    assert errors == [], errors


def screenshot(page: Any, name: str, full_page: bool = True) -> Path:
    """Save a screenshot under test-artifacts/ (git-ignored) for a person to look at, once every image has loaded."""
    for image in page.locator("img").all():
        if image.is_visible():
            image.scroll_into_view_if_needed()
            page.wait_for_function("img => img.complete", arg=image.element_handle(), timeout=30_000)
    page.evaluate("window.scrollTo(0, 0)")
    ARTIFACTS.mkdir(exist_ok=True)
    path = ARTIFACTS / f"{name}.png"
    page.screenshot(path=str(path), full_page=full_page)
    return path


def sign_in(page: Any, name: str, password: str | None = None) -> None:
    """Sign in through the form, as a person would."""
    from web.support import PASSWORD

    page.goto("/sign-in")
    page.get_by_label("User name").fill(name)
    page.get_by_label("Password").fill(password or PASSWORD)
    page.get_by_role("button", name="Sign in").click()
    page.wait_for_url("**/proposals**")


__all__ = ["ARTIFACTS", "screenshot", "sign_in"]

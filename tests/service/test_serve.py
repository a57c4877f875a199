"""``feasibility serve`` on a fresh home directory: SQLite, embedded workers, the real engine, over HTTP.

The served tests are about the embedded default (no DATABASE_URL: an SQLite file in
FEASIBILITY_HOME), so they run on SQLite only; the same API on PostgreSQL is tested
through the ``app`` fixture and in tests/integration.
"""

from __future__ import annotations

import os
import re
import signal
import subprocess
import sys
import time
from pathlib import Path

import requests

from .helpers import proposal


def _start_serve(tmp_path: Path, *options: str) -> subprocess.Popen[str]:
    env = {k: v for k, v in os.environ.items() if k not in ("DATABASE_URL", "BROKER_URL") and not k.startswith("FEASIBILITY_")}
    env["FEASIBILITY_HOME"] = str(tmp_path / "home")
    if "FEASIBILITY_CACHE_DIR" in os.environ:
        env["FEASIBILITY_CACHE_DIR"] = os.environ["FEASIBILITY_CACHE_DIR"]
    command = [sys.executable, "-c", "from feasibility.cli import main; main()", "serve", "--port", "0", *options]
    return subprocess.Popen(command, env=env, stdout=subprocess.PIPE, stderr=subprocess.STDOUT, text=True, cwd=tmp_path)


def _stop(process: subprocess.Popen[str]) -> None:
    process.send_signal(signal.SIGINT)
    try:
        process.wait(20)
    except subprocess.TimeoutExpired:
        process.kill()
        process.wait(10)
    if process.stdout:
        process.stdout.close()


def _read_until_serving(process: subprocess.Popen[str], patterns: dict[str, str]) -> dict[str, str]:
    """Read the start-up lines until the address is printed; return the named groups found."""
    found: dict[str, str] = {}
    lines: list[str] = []
    deadline = time.monotonic() + 60
    while "base_url" not in found and time.monotonic() < deadline:
        line = process.stdout.readline() if process.stdout else ""
        if not line:
            assert process.poll() is None, "".join(lines)
            continue
        lines.append(line)
        for pattern in patterns.values():
            if match := re.search(pattern, line):
                found.update(match.groupdict())
        if match := re.search(r"Serving on (?P<base_url>http://127\.0\.0\.1:\d+)/", line):
            found.update(match.groupdict())
    assert "base_url" in found, "".join(lines)
    return found


def test_serve_demo_signs_a_reviewer_in_to_the_checked_demo_proposals(tmp_path: Path) -> None:
    process = _start_serve(tmp_path, "--demo")
    try:
        found = _read_until_serving(
            process,
            {
                "sign_in": r"user 'demo-reviewer', password '(?P<password>[^']+)'",
                "proposer": r"user 'demo-proposer', password '(?P<proposer_password>[^']+)'",
                "admin": r"user 'demo-admin', password '(?P<admin_password>[^']+)'",
            },
        )
        assert "password" in found and "proposer_password" in found and "admin_password" in found
        base_url = found["base_url"]
        browser = requests.Session()
        form = browser.get(f"{base_url}/sign-in", timeout=10).text
        csrf = re.search(r'name="csrf_token" value="([^"]+)"', form)
        assert csrf is not None
        signed_in = browser.post(
            f"{base_url}/sign-in",
            data={"csrf_token": csrf.group(1), "name": "demo-reviewer", "password": found["password"]},
            timeout=10,
        )
        assert signed_in.status_code == 200 and "Sign out" in signed_in.text
        # The eight demo proposals and the generated semester are checked by the embedded workers; each gets its stored verdict.
        from feasibility.demo_semester import demo_semester

        expected = 8 + len(demo_semester())
        deadline = time.monotonic() + 90
        while time.monotonic() < deadline:
            listed = browser.get(f"{base_url}/proposals.json", params={"semester": "2027A"}, timeout=10).json()
            rows = listed["proposals"] if isinstance(listed, dict) else listed
            if len(rows) == expected and all(row.get("verdict") for row in rows):
                break
            time.sleep(1)
        assert len(rows) == expected and all(row.get("verdict") for row in rows), rows
        wrong = browser.post(f"{base_url}/sign-in", data={"name": "demo-reviewer", "password": "wrong"}, timeout=10)
        assert wrong.status_code in (400, 403)  # no CSRF token: refused before the password is even looked at
    finally:
        _stop(process)


def test_serve_on_a_fresh_machine_checks_a_proposal_end_to_end(tmp_path: Path) -> None:
    process = _start_serve(tmp_path)
    try:
        lines: list[str] = []
        base_url = token = None
        deadline = time.monotonic() + 60
        while base_url is None and time.monotonic() < deadline:
            line = process.stdout.readline() if process.stdout else ""
            if not line:
                assert process.poll() is None, "".join(lines)
                continue
            lines.append(line)
            if found := re.search(r"Admin API token \(shown once; keep it\): (\S+)", line):
                token = found.group(1)
            if found := re.search(r"Serving on (http://127\.0\.0\.1:\d+)/", line):
                base_url = found.group(1)
        assert base_url and token, "".join(lines)
        assert (tmp_path / "home" / "feasibility.sqlite").is_file()  # the store lives in FEASIBILITY_HOME
        health = requests.get(f"{base_url}/api/v1/health", timeout=10).json()
        assert health == {"status": "ok", "mode": "embedded"}
        # Spherical astronomy (textbook): a star culminates at altitude 90° − |φ − δ|; from the demo site's
        # latitude −26.4° a star at δ = +70° culminates at −6.4°, so it is never observable.
        answer = requests.post(
            f"{base_url}/api/v1/proposals",
            params={"wait": 30},
            json=proposal("SERVE-1", dec="+70:00:00"),
            headers={"Authorization": f"Bearer {token}"},
            timeout=60,
        )
        run = answer.json()["run"]
        assert run["state"] == "done", run
        assert run["verdict"] == "infeasible"
        assert run["result"]["requests"][0]["figures"]["hours_observable"] == 0
    finally:
        _stop(process)


def test_without_a_configured_key_sessions_are_signed_with_a_random_kept_key(tmp_path: Path, monkeypatch, database_url: str) -> None:
    # A fixed fallback key would let anyone forge a signed-in session cookie (Flask's docs: SECRET_KEY must be secret).
    from feasibility.web import create_app

    monkeypatch.delenv("FEASIBILITY_SECRET_KEY", raising=False)
    monkeypatch.setenv("FEASIBILITY_HOME", str(tmp_path))
    settings = {"DATABASE_URL": database_url, "CREATE_TABLES": True, "SEED_DEMO": False}
    first = create_app(settings)
    second = create_app(settings)
    for app in (first, second):
        app.extensions["feasibility.db"]["engine"].dispose()
    key = first.config["SECRET_KEY"]
    assert len(key) >= 48 and key not in ("dev", "test")
    assert second.config["SECRET_KEY"] == key  # processes sharing the instance folder agree
    assert (tmp_path / "secret_key").stat().st_mode & 0o077 == 0  # readable by the owner only

"""``feasibility serve`` on a fresh home directory: SQLite, embedded workers, the real engine, over HTTP."""

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


def test_serve_on_a_fresh_machine_checks_a_proposal_end_to_end(tmp_path: Path) -> None:
    env = {k: v for k, v in os.environ.items() if k not in ("DATABASE_URL", "BROKER_URL") and not k.startswith("FEASIBILITY_")}
    env["FEASIBILITY_HOME"] = str(tmp_path / "home")
    if "FEASIBILITY_CACHE_DIR" in os.environ:
        env["FEASIBILITY_CACHE_DIR"] = os.environ["FEASIBILITY_CACHE_DIR"]
    command = [sys.executable, "-c", "from feasibility.cli import main; main()", "serve", "--port", "0"]
    process = subprocess.Popen(command, env=env, stdout=subprocess.PIPE, stderr=subprocess.STDOUT, text=True, cwd=tmp_path)
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
            f"{base_url}/api/v1/proposals", params={"wait": 30}, json=proposal("SERVE-1", dec="+70:00:00"),
            headers={"Authorization": f"Bearer {token}"}, timeout=60,
        )
        run = answer.json()["run"]
        assert run["state"] == "done", run
        assert run["verdict"] == "infeasible"
        assert run["result"]["requests"][0]["figures"]["hours_observable"] == 0
    finally:
        process.send_signal(signal.SIGINT)
        try:
            process.wait(20)
        except subprocess.TimeoutExpired:
            process.kill()
            process.wait(10)
        if process.stdout:
            process.stdout.close()

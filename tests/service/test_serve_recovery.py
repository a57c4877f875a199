"""``feasibility serve`` killed (SIGKILL) while it checks a bulk submission, and started again: every run finishes.

Real processes, the real engine and SQLite: the second start takes over the runs
the killed process had claimed (their holder is a dead process of this host) and
queues the rest, at once. The bound (60 s after the restart) is the service's
recovery promise (README, "Reliability"), not a performance figure.
"""

from __future__ import annotations

import json
import os
import re
import signal
import subprocess
import sys
import time
from pathlib import Path

import requests

from .helpers import proposal

RECOVERY_BOUND_S = 60.0


def _start(home: Path, log: Path) -> tuple[subprocess.Popen[bytes], str]:
    env = {k: v for k, v in os.environ.items() if k not in ("DATABASE_URL", "BROKER_URL") and not k.startswith("FEASIBILITY_")}
    env["FEASIBILITY_HOME"] = str(home)
    # A sky-grid cache of this test's own, empty at the start: the first check builds the semester's grid
    # (seconds), so the kill lands while a run is computing, not after a millisecond check has finished.
    env["FEASIBILITY_CACHE_DIR"] = str(home / "sky-cache")
    command = [sys.executable, "-c", "from feasibility.cli import main; main()", "serve", "--port", "0"]
    handle = log.open("ab")
    process = subprocess.Popen(command, env=env, stdout=handle, stderr=subprocess.STDOUT, cwd=home.parent)
    handle.close()
    deadline = time.monotonic() + 60
    while time.monotonic() < deadline:
        found = re.findall(rb"Serving on (http://127\.0\.0\.1:\d+)/", log.read_bytes())
        if len(found) > log.read_bytes().count(b"--- killed ---"):
            return process, found[-1].decode()
        assert process.poll() is None, log.read_text()[-3000:]
        time.sleep(0.1)
    raise AssertionError(log.read_text()[-3000:])


def _running_in_store(home: Path) -> set[int]:
    """Ids of the runs left ``running`` in the embedded store (SQLite in the home folder)."""
    import sqlite3
    from contextlib import closing

    with closing(sqlite3.connect(home / "feasibility.sqlite")) as connection:
        return {row[0] for row in connection.execute("SELECT id FROM check_runs WHERE state = 'running'")}


def _states(base_url: str, token: str, run_ids: list[int]) -> dict[int, str]:
    headers = {"Authorization": f"Bearer {token}"}
    return {i: requests.get(f"{base_url}/api/v1/runs/{i}", headers=headers, timeout=10).json()["state"] for i in run_ids}


def test_serve_killed_mid_bulk_finishes_every_run_after_a_restart(tmp_path: Path) -> None:
    home, log = tmp_path / "home", tmp_path / "serve.log"
    process, base_url = _start(home, log)
    try:
        token = re.search(rb"Admin API token \(shown once; keep it\): (\S+)", log.read_bytes())
        assert token is not None
        admin = token.group(1).decode()
        body = {"proposals": [proposal(f"KILL-{i}", ra=f"{10 + i}:15:00", hours=2.0) for i in range(6)]}
        answer = requests.post(f"{base_url}/api/v1/proposals/bulk", json=body, headers={"Authorization": f"Bearer {admin}"}, timeout=60)
        assert answer.status_code == 200 and answer.json()["accepted"] == 6, answer.text
        run_ids = [item["run_id"] for item in answer.json()["items"]]
        deadline = time.monotonic() + 60
        while "running" not in _states(base_url, admin, run_ids).values():  # kill it mid-check
            assert time.monotonic() < deadline, "no run started"
            time.sleep(0.05)
        process.send_signal(signal.SIGKILL)
        process.wait(10)
        held = _running_in_store(home)  # what the killed process was computing, read from the store itself
        assert held, "the kill landed after every run had finished"
        with log.open("ab") as handle:
            handle.write(b"\n--- killed ---\n")

        process, base_url = _start(home, log)
        restarted = time.monotonic()
        states = _states(base_url, admin, run_ids)
        while set(states.values()) != {"done"} and time.monotonic() - restarted < RECOVERY_BOUND_S:
            time.sleep(0.5)
            states = _states(base_url, admin, run_ids)
        recovery = time.monotonic() - restarted
        print(json.dumps({"fault": "serve SIGKILL mid-bulk", "runs": len(run_ids), "recovery_s": round(recovery, 1)}))
        assert set(states.values()) == {"done"}, (states, log.read_text()[-3000:])
        runs = [requests.get(f"{base_url}/api/v1/runs/{i}", headers={"Authorization": f"Bearer {admin}"}, timeout=10).json() for i in run_ids]
        assert all(len(r["result"]["requests"]) == 1 for r in runs)  # one stored result per run
        assert all(r["attempts"] >= 2 for r in runs if r["id"] in held)  # what the killed process held was taken over
    finally:
        if process.poll() is None:
            process.send_signal(signal.SIGINT)
            try:
                process.wait(20)
            except subprocess.TimeoutExpired:
                process.kill()
                process.wait(10)

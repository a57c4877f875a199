"""Re-checks on the real services: PostgreSQL, Redis and Celery worker processes, the real engine.

Uses the service's integration fixtures (tests/integration/conftest.py): without the
services the test is skipped, except with CI=true, where it fails. Expected outcomes
follow from the schedule change (VOCABULARY: the schedule check counts only nights
when the instrument is mounted and the telescope open); the signature is checked with
Python's standard ``hmac``. The proposals are invented test input.
"""

from __future__ import annotations

import copy
import hashlib
import hmac
import json
import time
from typing import Any

import pytest
import requests
from integration.conftest import LiveService, live, postgres_url, redis_prefix  # noqa: F401 - fixtures

from .conftest import make_proposal
from .test_admin_api import _without_heron
from .test_changes_webhooks import SECRET, Receiver

pytestmark = pytest.mark.integration


def test_schedule_change_rechecks_on_real_workers(live: LiveService, demo_schedule: dict[str, Any]) -> None:  # noqa: F811
    base, admin = live.base_url, live.headers("admin")
    receiver = Receiver()
    try:
        put = requests.put(f"{base}/api/v1/users/portal/webhook", json={"url": receiver.url, "secret": SECRET}, headers=admin, timeout=10)
        assert put.status_code == 200, put.text
        runs = {}
        for pid, instrument in (("INT-RH", "HERON"), ("INT-RK", "KESTREL")):
            answer = requests.post(f"{base}/api/v1/proposals", json=make_proposal(pid, instrument), headers=live.headers("portal"), timeout=30)
            assert answer.status_code == 202, answer.text
            runs[pid] = answer.json()["run"]["id"]
        for run_id in runs.values():
            assert live.wait_for_run(run_id, who="admin")["state"] == "done"

        upload = requests.post(f"{base}/api/v1/schedules", json=_without_heron(copy.deepcopy(demo_schedule)), headers=admin, timeout=30)
        assert upload.status_code == 201, upload.text
        rechecks = upload.json()["rechecks"]
        assert rechecks["proposals"] == ["INT-RH"] and rechecks["by_instrument"] == {"HERON": 1}  # only the HERON proposal
        rerun = live.wait_for_run(rechecks["run_ids"][0], who="admin")
        assert rerun["state"] == "done" and rerun["verdict"] == "infeasible"  # no open HERON night left
        history = requests.get(f"{base}/api/v1/proposals/INT-RK/runs", headers=admin, timeout=10).json()["items"]
        assert len(history) == 1  # the KESTREL proposal was not re-run

        again = requests.post(f"{base}/api/v1/schedules", json=_without_heron(copy.deepcopy(demo_schedule)), headers=admin, timeout=30)
        assert again.status_code == 200 and again.json()["rechecks"]["queued"] == 0  # same content: nothing
        nightly = [requests.post(f"{base}/api/v1/rechecks", json={}, headers=admin, timeout=30).json()["queued"] for _ in range(2)]
        assert nightly == [0, 0]  # nothing else changed: idempotent

        deadline = time.monotonic() + 60  # sent by a worker process's notice task
        while not receiver.received and time.monotonic() < deadline:
            time.sleep(0.2)
        headers, raw = receiver.received[0]
        assert hmac.compare_digest(headers["X-Feasibility-Signature"], hmac.new(SECRET.encode(), raw, hashlib.sha256).hexdigest())
        assert json.loads(raw)["proposal_id"] == "INT-RH"
    finally:
        receiver.close()

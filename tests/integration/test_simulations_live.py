"""A semester simulation asked for over HTTP and computed by a real Celery worker, on PostgreSQL and Redis."""

from __future__ import annotations

import time
from importlib import resources
from pathlib import Path
from typing import Any

import pytest
import requests
import yaml

from .conftest import LiveService

pytestmark = pytest.mark.integration

DEMO = Path(str(resources.files("feasibility") / "data"))


def _documents() -> list[dict[str, Any]]:
    """Two demo proposals moved to semester 2027B (which no other test here uses, and which has no schedule)."""
    documents = []
    for name in ("SQ-2027A-001.yaml", "SQ-2027A-005.yaml"):
        document = yaml.safe_load((DEMO / "proposals" / name).read_text(encoding="utf-8"))
        document["id"] = document["id"].replace("2027A", "2027B-SIM")
        document["semester"] = "2027B"
        for request in document["requests"]:
            request.pop("windows", None)
        documents.append(document)
    return documents


def test_a_celery_worker_computes_the_simulation(live: LiveService) -> None:
    documents = _documents()
    for document in documents:
        answer = requests.post(f"{live.base_url}/api/v1/proposals", json=document, headers=live.headers("alice"), timeout=60)
        assert answer.status_code in (200, 201, 202), answer.text
    forbidden = requests.post(f"{live.base_url}/api/v1/semesters/2027B/simulations", json={}, headers=live.headers("alice"), timeout=10)
    assert forbidden.status_code == 403

    answer = requests.post(
        f"{live.base_url}/api/v1/semesters/2027B/simulations", json={"realisations": 150, "seed": 3}, headers=live.headers("reviewer"), timeout=10
    )
    assert answer.status_code == 202, answer.text
    url = f"{live.base_url}{answer.json()['url']}"
    deadline = time.monotonic() + 180
    while True:
        state = requests.get(url, headers=live.headers("reviewer"), timeout=10).json()
        if state["state"] in ("done", "failed") or time.monotonic() > deadline:
            break
        time.sleep(0.3)
    assert state["state"] == "done", state

    from feasibility.documents import Observatory, Proposal, load_document, parse_document
    from feasibility.engine.simulate import simulate_semester

    direct = simulate_semester(
        sorted((parse_document(Proposal, d) for d in documents), key=lambda p: p.id),
        load_document(Observatory, DEMO / "observatory.yaml"),
        None,
        realisations=150,
        seed=3,
    )
    assert state["result"]["requests"] == direct["requests"]
    assert state["result"]["schedule_version"] is None and state["result"]["notes"] == direct["notes"]

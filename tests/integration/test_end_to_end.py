"""Proposals pushed through the HTTP API to real Celery workers, PostgreSQL and Redis, with the real engine."""

from __future__ import annotations

import copy
import time
from datetime import timedelta
from importlib import resources
from typing import Any

import pytest
import requests
import yaml
from sqlalchemy import func, select, update

from feasibility.store.db import session_scope
from feasibility.store.models import CheckRun, ProposalVersion, RequestOutcome, utcnow

from .conftest import LiveService

pytestmark = pytest.mark.integration


def _proposal(proposal_id: str, dec: str = "-30:00:00", ra: str = "14:30:00") -> dict[str, Any]:
    """An invented one-request proposal on the demo observatory (test input, not a reference)."""
    return {
        "id": proposal_id,
        "semester": "2027A",
        "title": "Invented integration-test programme",
        "pi": {"name": "Test Person", "email": "test.person@example.org"},
        "requests": [
            {
                "label": "a",
                "target": {"name": f"Field {proposal_id}", "ra": ra, "dec": dec},
                "instrument": "KESTREL",
                "setup": {"filter": "V"},
                "brightness": {"magnitude": 17.0, "band": "V"},
                "goal": {"snr": 30},
                "hours_requested": 2.0,
            }
        ],
    }


def _post(live: LiveService, who: str, body: Any, path: str = "/api/v1/proposals", **params: Any) -> requests.Response:
    return requests.post(f"{live.base_url}{path}", json=body, headers=live.headers(who), params=params, timeout=60)


def _outcomes(live: LiveService, run_id: int) -> int:
    with live.app.app_context(), session_scope() as session:
        return int(session.scalar(select(func.count()).select_from(RequestOutcome).where(RequestOutcome.run_id == run_id)) or 0)


def test_demo_proposals_get_verdicts_with_figures(live: LiveService) -> None:
    folder = resources.files("feasibility") / "data" / "proposals"
    documents = [yaml.safe_load(p.read_text()) for p in sorted(folder.iterdir(), key=lambda p: p.name) if p.name.endswith(".yaml")]
    assert documents, "the demo proposals are packaged"
    run_ids = []
    for document in documents:
        answer = _post(live, "alice", document)
        assert answer.status_code == 202, answer.text
        run_ids.append(answer.json()["run"]["id"])
    for run_id, document in zip(run_ids, documents):
        run = live.wait_for_run(run_id)
        assert run["state"] == "done", run.get("error")
        result = run["result"]
        assert result["proposal_id"] == document["id"]
        assert len(result["requests"]) == len(document["requests"])
        for request in result["requests"]:
            for figure in ("hours_requested", "hours_observable", "hours_needed", "snr_expected"):
                assert figure in request["figures"], figure
        assert _outcomes(live, run_id) == len(document["requests"])  # one stored row per request, no duplicates


def test_a_target_that_never_rises_is_infeasible(live: LiveService) -> None:
    # Spherical astronomy (textbook): the highest altitude of a star is 90° − |φ − δ|.
    # From latitude −26.4° a star at δ = +70° culminates at 90 − 96.4 = −6.4°: never above the horizon.
    answer = _post(live, "alice", _proposal("INT-NORTH", dec="+70:00:00"), wait=30)
    run = answer.json()["run"]
    run = run if run["state"] == "done" else live.wait_for_run(run["id"])
    assert run["verdict"] == "infeasible"
    request = run["result"]["requests"][0]
    assert request["figures"]["hours_observable"] == 0
    visibility = [f for f in request["findings"] if f["check"] == "visibility"]
    assert visibility and visibility[0]["level"] == "infeasible"


def test_resubmitting_identical_content_returns_the_same_run(live: LiveService) -> None:
    first = _post(live, "alice", _proposal("INT-SAME"))
    assert first.status_code == 202
    second = _post(live, "alice", _proposal("INT-SAME"))
    assert second.status_code == 200 and second.json()["created"] is False
    assert second.json()["run"]["id"] == first.json()["run"]["id"]
    run = live.wait_for_run(first.json()["run"]["id"])
    assert run["state"] == "done"


def test_running_the_task_twice_stores_one_result(live: LiveService) -> None:
    answer = _post(live, "alice", _proposal("INT-TWICE", ra="15:10:00"))
    run_id = answer.json()["run"]["id"]
    celery = live.app.extensions["celery"]
    dispatcher = live.app.extensions["feasibility.dispatch"]
    dispatcher.enqueue([run_id])  # a duplicate message while the first may be running
    dispatcher.enqueue([run_id])
    run = live.wait_for_run(run_id)
    assert run["state"] == "done"
    dispatcher.enqueue([run_id])  # and once more after it is done
    time.sleep(2)
    assert _outcomes(live, run_id) == 1
    assert live.wait_for_run(run_id)["finished_at"] == run["finished_at"]  # not recomputed
    assert celery.conf.task_acks_late and celery.conf.worker_prefetch_multiplier == 1


def test_the_sweeper_requeues_a_lost_run(live: LiveService) -> None:
    with live.app.app_context():
        from feasibility.service.submissions import submit

        with session_scope() as session:  # stored, but its message "lost": never enqueued
            run_id = submit(session, _proposal("INT-LOST", ra="13:00:00"), None).run.id
        with session_scope() as session:
            session.execute(update(CheckRun).where(CheckRun.id == run_id).values(queued_at=utcnow() - timedelta(minutes=5)))
        live.app.extensions["celery"].send_task("feasibility.sweep_runs", queue=live.app.extensions["feasibility.dispatch"].queue)
    assert live.wait_for_run(run_id)["state"] == "done"


def test_a_message_for_a_run_held_by_a_live_worker_elsewhere_waits_for_its_lease(live: LiveService) -> None:
    with live.app.app_context():
        from feasibility.service.submissions import submit

        with session_scope() as session:
            run_id = submit(session, _proposal("INT-HELD", ra="16:40:00"), None).run.id
        now = utcnow()
        with session_scope() as session:  # claimed by a worker on another host, whose lease still has 4 s to run
            session.execute(
                update(CheckRun)
                .where(CheckRun.id == run_id)
                .values(state="running", attempts=1, started_at=now, lease_owner="another-host:4242", lease_expires_at=now + timedelta(seconds=4))
            )
        live.app.extensions["feasibility.dispatch"].enqueue([run_id])
    time.sleep(2)
    with live.app.app_context(), session_scope() as session:
        assert session.get_one(CheckRun, run_id).attempts == 1  # the message was not used to take over a live claim...
    run = live.wait_for_run(run_id, timeout=60)
    assert run["state"] == "done" and run["attempts"] == 2  # ...nor dropped: tried again once the lease lapsed
    assert _outcomes(live, run_id) == 1


def test_bad_input_is_rejected_and_nothing_stored_is_lost(live: LiveService) -> None:
    good = _post(live, "bob", _proposal("INT-BAD"))
    assert good.status_code == 202
    bad = copy.deepcopy(_proposal("INT-BAD"))
    bad["requests"][0]["setup"]["filter"] = "Z"
    answer = _post(live, "bob", bad)
    assert answer.status_code == 422
    assert answer.json()["problems"][0]["field"] == "requests[0].setup.filter"
    with live.app.app_context(), session_scope() as session:
        versions = session.scalars(select(ProposalVersion).join(ProposalVersion.proposal).where(ProposalVersion.document["id"].as_string() == "INT-BAD")).all()
    assert len(versions) == 1


def test_roles_over_http(live: LiveService) -> None:
    _post(live, "alice", _proposal("INT-ALICE"))
    url = f"{live.base_url}/api/v1/proposals/INT-ALICE"
    assert requests.get(url, timeout=10).status_code == 401  # RFC 6750 §3: no token, no access
    assert requests.get(url, headers=live.headers("bob"), timeout=10).status_code == 404
    assert requests.get(url, headers=live.headers("reviewer"), timeout=10).status_code == 200
    assert _post(live, "reviewer", _proposal("INT-REV")).status_code == 403
    on_behalf = _post(live, "portal", _proposal("INT-PORTAL"), on_behalf_of="bob")
    assert on_behalf.status_code == 202
    assert requests.get(f"{live.base_url}/api/v1/proposals/INT-PORTAL", headers=live.headers("bob"), timeout=10).status_code == 200


def test_bulk_submission_over_http(live: LiveService) -> None:
    body = {"proposals": [_proposal(f"INT-BULK-{i}", ra=f"{12 + i}:00:00") for i in range(4)]}
    answer = _post(live, "portal", body, path="/api/v1/proposals/bulk")
    assert answer.status_code == 200 and answer.json()["accepted"] == 4
    for item in answer.json()["items"]:
        assert live.wait_for_run(item["run_id"])["state"] == "done"


def test_a_large_bulk_is_computed_in_batches_each_run_once(live: LiveService) -> None:
    from feasibility.documents import InstrumentSchedule, Observatory, Proposal, load_document, parse_document
    from feasibility.engine import check_proposal
    from feasibility.service.dispatch import BATCH_FROM, batches

    count = BATCH_FROM + 4  # enough to be sent several runs a message
    documents = [_proposal(f"INT-BATCH-{i}", ra=f"{(10 + i) % 24:02d}:20:00") for i in range(count)]
    answer = _post(live, "portal", {"proposals": documents}, path="/api/v1/proposals/bulk")
    assert answer.status_code == 200 and answer.json()["accepted"] == count
    ids = [item["run_id"] for item in answer.json()["items"]]
    assert len(batches(ids)) < count  # the bulk went in batch messages
    # A duplicate batch (a redelivered message) while the first may be running: each run is still stored once.
    live.app.extensions["celery"].send_task("feasibility.check_runs", args=[ids], queue=live.app.extensions["feasibility.dispatch"].queue)
    data = resources.files("feasibility") / "data"
    observatory = load_document(Observatory, str(data / "observatory.yaml"))
    schedule = load_document(InstrumentSchedule, str(data / "schedule-2027A.yaml"))
    for run_id, document in zip(ids, documents, strict=True):
        run = live.wait_for_run(run_id)
        assert run["state"] == "done" and run["attempts"] == 1
        # Reference: the engine called directly on the same documents gives the same verdicts.
        assert run["result"]["verdict"] == check_proposal(parse_document(Proposal, document), observatory, schedule).verdict.value
    time.sleep(2)  # the duplicate message has been through by now
    assert [_outcomes(live, run_id) for run_id in ids] == [1] * count

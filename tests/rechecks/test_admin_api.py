"""The schedule, observatory, re-check and changes API, end to end on the embedded pool.

The engine is replaced by a schedule-aware stand-in (a request is feasible when its
instrument has at least one open night, and its observable hours are its open nights),
so the expectations follow from the schedule edits alone; the real engine is used in
test_engine_recheck.py. Signatures are checked with Python's standard ``hmac``.
"""

from __future__ import annotations

import hashlib
import hmac
import json
from collections.abc import Callable
from typing import Any

import pytest
from flask import Flask
from flask.testing import FlaskClient
from sqlalchemy import func, select

from feasibility.results import Finding, Level, ProposalResult, RequestResult
from feasibility.store.db import session_scope
from feasibility.store.models import CheckRun, ScheduleVersion, WebhookDelivery

from .test_changes_webhooks import SECRET, Receiver


def scheduled_engine(proposal: Any, observatory: Any, schedule: Any) -> ProposalResult:
    """A stand-in engine whose verdict depends only on the nights the schedule gives each instrument."""
    requests = []
    for r in proposal.requests:
        nights = sum(1 for n in (schedule.nights if schedule else []) if n.status == "open" and (n.instrument or "").upper() == r.instrument.upper())
        level = Level.FEASIBLE if nights else Level.INFEASIBLE
        requests.append(
            RequestResult(
                label=r.label,
                instrument=r.instrument,
                target=r.target.name,
                verdict=level,
                findings=[Finding(check="schedule", level=level, message=f"{nights} nights", figures={"nights": nights})],
                figures={"hours_requested": r.hours_requested, "hours_observable": float(nights), "hours_needed": 1.0, "snr_expected": 30.0},
            )
        )
    verdict = max((r.verdict for r in requests), key=lambda level: level.rank)
    return ProposalResult(
        proposal_id=proposal.id,
        semester=proposal.semester,
        verdict=verdict,
        requests=requests,
        engine_version="stand-in",
        observatory=observatory.name,
        observatory_version=observatory.version,
        schedule_version=schedule.version if schedule else None,
        computed_at="2027-01-01T00:00:00+00:00",
    )


@pytest.fixture
def stand_in(monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setattr("feasibility.service.runs.check", scheduled_engine)


def _auth(token: str) -> dict[str, str]:
    return {"Authorization": f"Bearer {token}"}


def _wait(app: Flask) -> None:
    assert app.extensions["feasibility.dispatch"].wait_idle(timeout=30)


def _without_heron(schedule: dict[str, Any]) -> dict[str, Any]:
    """Every HERON night becomes an engineering night (HERON off for repair all semester)."""
    nights = [dict(n, status="engineering") if n.get("instrument") == "HERON" else dict(n) for n in schedule["nights"]]
    return dict(schedule, version="2027A-noheron", nights=nights)


def _open_heron(schedule: dict[str, Any]) -> int:
    """Open HERON nights, counted straight from the YAML mapping (not by the code under test)."""
    return sum(1 for n in schedule["nights"] if n.get("instrument") == "HERON" and n.get("status", "open") == "open")


def _submit(client: FlaskClient, token: str, document: dict[str, Any]) -> int:
    answer = client.post("/api/v1/proposals", json=document, headers=_auth(token))
    assert answer.status_code in (200, 202), answer.get_json()
    return answer.get_json()["run"]["id"]


def test_schedule_upload_rechecks_affected_and_notifies(
    app: Flask,
    client: FlaskClient,
    make_token: Callable[..., str],
    stand_in: None,
    demo_schedule: dict[str, Any],
    proposal: Any,
) -> None:
    admin, portal, reviewer = make_token("admin"), make_token("portal", "portal-a"), make_token("reviewer")
    app.set_settings(WEBHOOK_ALLOW_PRIVATE=True)  # the receiver listens on 127.0.0.1
    receiver = Receiver()
    try:
        assert client.put("/api/v1/users/portal-a/webhook", json={"url": receiver.url, "secret": SECRET}, headers=_auth(admin)).status_code == 200
        heron_run = _submit(client, portal, proposal("H1", "HERON"))
        kestrel_run = _submit(client, portal, proposal("K1", "KESTREL"))
        _wait(app)
        with app.app_context(), session_scope() as session:
            assert session.get(CheckRun, heron_run).verdict == "feasible"  # the demo schedule has HERON nights

        answer = client.post("/api/v1/schedules", data=json.dumps(_without_heron(demo_schedule)), headers=_auth(admin))
        assert answer.status_code == 201, answer.get_json()
        body = answer.get_json()
        assert body["rechecks"]["queued"] == 1 and body["rechecks"]["proposals"] == ["H1"]  # only the HERON proposal
        assert body["rechecks"]["by_instrument"] == {"HERON": 1}
        assert body["diff"]["affected_instruments"] == {"HERON": _open_heron(demo_schedule)}  # 50 in the demo YAML (grep)
        _wait(app)

        with app.app_context(), session_scope() as session:
            # K1 was not re-run: still one run.
            k1_runs = session.scalar(
                select(func.count()).select_from(CheckRun).where(CheckRun.proposal_version_id == session.get(CheckRun, kestrel_run).proposal_version_id)
            )
            assert k1_runs == 1
        changes = client.get("/api/v1/changes?since=2000-01-01T00:00:00Z", headers=_auth(reviewer)).get_json()
        assert [(c["proposal_id"], c["verdict_before"], c["verdict_after"]) for c in changes["items"]] == [("H1", "feasible", "infeasible")]
        assert changes["items"][0]["requests"][0]["changed_figures"] == ["hours_observable"]

        # The same schedule again: nothing stored, nothing queued.
        again = client.post("/api/v1/schedules", data=json.dumps(_without_heron(demo_schedule)), headers=_auth(admin))
        assert again.status_code == 200 and again.get_json()["rechecks"]["queued"] == 0
        with app.app_context(), session_scope() as session:
            assert session.scalar(select(func.count()).select_from(ScheduleVersion)) == 2

        # The notice went to the portal's receiver, signed (sent by the embedded sender thread).
        import time

        deadline = time.monotonic() + 10
        while not receiver.received and time.monotonic() < deadline:
            time.sleep(0.05)
        headers, raw = receiver.received[0]
        assert hmac.compare_digest(headers["X-Feasibility-Signature"], hmac.new(SECRET.encode(), raw, hashlib.sha256).hexdigest())
        assert json.loads(raw)["verdict_after"] == "infeasible"
        # The receiver records the notice before it answers, and the sender marks the delivery sent after the
        # answer: wait for the mark rather than race it.
        states: list[str] = []
        while time.monotonic() < deadline:
            with app.app_context(), session_scope() as session:
                states = list(session.scalars(select(WebhookDelivery.state)).all())
            if states != ["pending"]:
                break
            time.sleep(0.05)
        assert states == ["sent"]
    finally:
        receiver.close()


def test_schedule_read_and_versions(client: FlaskClient, make_token: Callable[..., str], demo_schedule: dict[str, Any]) -> None:
    admin, reviewer = make_token("admin"), make_token("reviewer")
    assert client.post("/api/v1/schedules", json=_without_heron(demo_schedule), headers=_auth(admin)).status_code == 201
    current = client.get("/api/v1/schedules/2027A", headers=_auth(reviewer)).get_json()
    assert current["version"]["version"] == "2027A-noheron"
    assert len(current["changes"]["status_changed"]) == _open_heron(demo_schedule)  # every open HERON night of the demo
    versions = client.get("/api/v1/schedules/2027A/versions", headers=_auth(reviewer)).get_json()["items"]
    assert [v["version"] for v in versions] == ["2027A-noheron", "2027A-1"]
    back = client.get(f"/api/v1/schedules/2027A/changes?from={versions[0]['id']}&to={versions[1]['id']}", headers=_auth(reviewer)).get_json()
    assert back["changes"]["affected_instruments"] == {"HERON": _open_heron(demo_schedule)}
    assert client.get("/api/v1/schedules/2031B", headers=_auth(reviewer)).status_code == 404


def test_uploads_need_admin_and_valid_documents(
    client: FlaskClient, make_token: Callable[..., str], demo_schedule: dict[str, Any], demo_observatory: dict[str, Any]
) -> None:
    reviewer, admin = make_token("reviewer"), make_token("admin")
    assert client.post("/api/v1/schedules", json=demo_schedule).status_code == 401
    assert client.post("/api/v1/schedules", json=demo_schedule, headers=_auth(reviewer)).status_code == 403
    assert client.post("/api/v1/observatory", json=demo_observatory, headers=_auth(make_token("portal"))).status_code == 403
    bad = dict(demo_schedule, nights=[dict(n) for n in demo_schedule["nights"]])
    bad["nights"][2]["instrument"] = "PELICAN"
    answer = client.post("/api/v1/schedules", json=bad, headers=_auth(admin))
    assert answer.status_code == 422
    assert {"field": "nights[2].instrument", "problem": "unknown instrument 'PELICAN'"} in answer.get_json()["problems"]
    answer = client.post("/api/v1/schedules", data=b"nights: [", headers=_auth(admin))
    assert answer.status_code == 422 and answer.get_json()["problems"][0]["problem"].startswith("is neither valid JSON nor YAML")
    answer = client.post("/api/v1/observatory", json=dict(demo_observatory, telescope={"name": "x"}), headers=_auth(admin))
    assert answer.status_code == 422 and any(p["field"] == "telescope.aperture_m" for p in answer.get_json()["problems"])
    assert client.put("/api/v1/users/nobody/webhook", json={"url": "ftp://x", "secret": "s"}, headers=_auth(admin)).status_code == 422


def test_observatory_upload_and_same_again(client: FlaskClient, make_token: Callable[..., str], demo_observatory: dict[str, Any], stand_in: None) -> None:
    admin = make_token("admin")
    changed = dict(demo_observatory, version="2026.2")
    first = client.post("/api/v1/observatory", json=changed, headers=_auth(admin))
    assert first.status_code == 201 and first.get_json()["version"]["version"] == "2026.2"
    assert client.post("/api/v1/observatory", json=changed, headers=_auth(admin)).status_code == 200
    assert client.get("/api/v1/observatory", headers=_auth(admin)).get_json()["version"]["version"] == "2026.2"


def test_changes_are_filtered_by_role(
    app: Flask,
    client: FlaskClient,
    make_token: Callable[..., str],
    stand_in: None,
    demo_schedule: dict[str, Any],
    proposal: Any,
) -> None:
    admin, portal_a, portal_b = make_token("admin"), make_token("portal", "portal-a"), make_token("portal", "portal-b")
    _submit(client, portal_a, proposal("HA", "HERON"))
    _submit(client, portal_b, proposal("HB", "HERON"))
    _wait(app)
    client.post("/api/v1/schedules", json=_without_heron(demo_schedule), headers=_auth(admin))
    _wait(app)
    seen_a = [c["proposal_id"] for c in client.get("/api/v1/changes", headers=_auth(portal_a)).get_json()["items"]]
    seen_admin = sorted(c["proposal_id"] for c in client.get("/api/v1/changes", headers=_auth(admin)).get_json()["items"])
    assert seen_a == ["HA"] and seen_admin == ["HA", "HB"]
    assert client.get("/api/v1/changes?since=yesterday", headers=_auth(admin)).status_code == 400
    assert client.get("/api/v1/changes?since=2999-01-01T00:00:00Z", headers=_auth(admin)).get_json()["count"] == 0


def test_recheck_endpoint_is_idempotent(
    app: Flask, client: FlaskClient, make_token: Callable[..., str], stand_in: None, proposal: Any, monkeypatch: pytest.MonkeyPatch
) -> None:
    admin = make_token("admin")
    _submit(client, admin, proposal("K1", "KESTREL"))
    _wait(app)
    assert client.post("/api/v1/rechecks", json={}, headers=_auth(admin)).get_json()["queued"] == 0  # nothing changed
    monkeypatch.setattr("feasibility.service.rechecks.engine_version", lambda: "99.0")
    monkeypatch.setattr("feasibility.service.submissions.engine_version", lambda: "99.0")
    assert client.post("/api/v1/rechecks", json={}, headers=_auth(admin)).get_json()["by_reason"] == {"engine": 1}
    _wait(app)
    assert client.post("/api/v1/rechecks", json={}, headers=_auth(admin)).get_json()["queued"] == 0
    assert client.post("/api/v1/rechecks", json={"stale_days": -1}, headers=_auth(admin)).status_code == 400

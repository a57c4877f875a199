"""A schedule change re-checked with the real engine: HERON taken off every night.

Reference: the schedule check's definition (shared/VOCABULARY.md: "of the usable hours,
how many fall on nights when the instrument is mounted and the telescope open?"). With
no open HERON night left in the semester, a HERON request has no usable hours, so its
schedule finding and its verdict must be infeasible; a KESTREL request, whose nights did
not change, must not be re-run at all. The proposals are invented test input.
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

from flask import Flask
from flask.testing import FlaskClient
from sqlalchemy import func, select

from feasibility.store.db import session_scope
from feasibility.store.models import CheckRun, ProposalRecord, ProposalVersion

from .test_admin_api import _auth, _submit, _without_heron


def _runs_of(session: Any, proposal_id: str) -> list[CheckRun]:
    return list(
        session.scalars(select(CheckRun).join(ProposalVersion).join(ProposalRecord).where(ProposalRecord.proposal_id == proposal_id).order_by(CheckRun.id))
    )


def test_heron_off_makes_heron_request_infeasible(
    app: Flask,
    client: FlaskClient,
    make_token: Callable[..., str],
    demo_schedule: dict[str, Any],
    proposal: Any,
) -> None:
    admin = make_token("admin")
    _submit(client, admin, proposal("ENG-H", "HERON"))
    _submit(client, admin, proposal("ENG-K", "KESTREL"))
    assert app.extensions["feasibility.dispatch"].wait_idle(timeout=300)
    with app.app_context(), session_scope() as session:
        before = _runs_of(session, "ENG-H")[-1]
        assert before.state == "done", before.error
        heron_before = before.result["requests"][0]
        schedule_before = [f for f in heron_before["findings"] if f["check"] == "schedule"]
        # With the demo schedule's HERON nights, the schedule check is not the obstacle.
        assert schedule_before and schedule_before[0]["level"] != "infeasible"
        assert before.verdict != "infeasible"

    answer = client.post("/api/v1/schedules", json=_without_heron(demo_schedule), headers=_auth(admin))
    assert answer.status_code == 201 and answer.get_json()["rechecks"]["proposals"] == ["ENG-H"]
    assert app.extensions["feasibility.dispatch"].wait_idle(timeout=300)

    with app.app_context(), session_scope() as session:
        runs = _runs_of(session, "ENG-H")
        after = runs[-1]
        assert len(runs) == 2 and after.state == "done", after.error
        heron_after = after.result["requests"][0]
        schedule_after = [f for f in heron_after["findings"] if f["check"] == "schedule"]
        assert schedule_after[0]["level"] == "infeasible"  # no open HERON night left (VOCABULARY: schedule check)
        assert heron_after["verdict"] == "infeasible" and after.verdict == "infeasible"
        assert len(_runs_of(session, "ENG-K")) == 1  # KESTREL nights unchanged: not re-run
        changes = client.get("/api/v1/changes", headers=_auth(admin)).get_json()["items"]
        assert [(c["proposal_id"], c["verdict_after"]) for c in changes] == [("ENG-H", "infeasible")]
        assert session.scalar(select(func.count()).select_from(CheckRun)) == 3

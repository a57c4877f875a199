"""Which proposals a schedule, observatory, engine or age change re-checks (the store only; no engine run).

References: the expected proposals follow from the schedule edits made here
(a proposal is affected exactly when one of its instruments gains or loses an
open night), counted independently of the code under test.
"""

from __future__ import annotations

from datetime import timedelta
from typing import Any

import pytest
from sqlalchemy import func, select

from feasibility.documents import InstrumentSchedule
from feasibility.documents.loading import DocumentError
from feasibility.service import rechecks
from feasibility.service.rechecks import plan_rechecks, upload_observatory, upload_schedule
from feasibility.store.db import session_scope
from feasibility.store.hashing import document_hash
from feasibility.store.models import CheckRun, ScheduleVersion, utcnow


def _heron_week_off(schedule: dict[str, Any]) -> dict[str, Any]:
    """HERON off for repair: its first five open nights become engineering nights."""
    edited = dict(schedule, version="2027A-2", nights=[dict(n) for n in schedule["nights"]])
    for night in [n for n in edited["nights"] if n.get("instrument") == "HERON"][:5]:
        night["status"] = "engineering"
    return edited


@pytest.fixture
def three(store: str, proposal: Any, done: Any) -> dict[str, int]:
    """Three checked proposals, one per instrument, plus one using HERON and OWL; their first run ids."""
    ids = {}
    with session_scope() as session:
        for pid, instruments in (("K1", ["KESTREL"]), ("H1", ["HERON"]), ("O1", ["OWL"]), ("HO1", ["HERON", "OWL"])):
            ids[pid] = done(session, proposal(pid, *instruments)).id
    return ids


def test_schedule_change_rechecks_only_affected(three: dict[str, int], demo_schedule: dict[str, Any]) -> None:
    with session_scope() as session:
        upload = upload_schedule(session, _heron_week_off(demo_schedule))
        plan = upload.plan
    assert upload.created
    assert upload.diff is not None and upload.diff.affected_instruments == {"HERON"}  # only HERON nights edited
    assert sorted(plan.proposals) == ["H1", "HO1"]  # the two proposals with a HERON request
    assert plan.by_instrument == {"HERON": 2} and plan.by_reason == {"schedule": 2}
    with session_scope() as session:
        new_runs = session.scalars(select(CheckRun).where(CheckRun.id.in_(plan.run_ids))).all()
        assert {r.state for r in new_runs} == {"queued"}
        assert all(r.priority == rechecks.RECHECK_PRIORITY and "HERON nights changed" in r.reason for r in new_runs)
        # Unaffected proposals keep their single, old run: not re-run.
        for pid in ("K1", "O1"):
            count = session.scalar(select(func.count()).select_from(CheckRun).where(CheckRun.proposal_version_id == _version(session, three[pid])))
            assert count == 1


def test_same_schedule_again_queues_nothing(three: dict[str, int], demo_schedule: dict[str, Any]) -> None:
    with session_scope() as session:
        first = upload_schedule(session, _heron_week_off(demo_schedule))
    with session_scope() as session:
        versions = session.scalar(select(func.count()).select_from(ScheduleVersion))
        again = upload_schedule(session, _heron_week_off(demo_schedule))  # same content, same hash
        assert not again.created and again.plan.queued == 0 and again.version.id == first.version.id
        assert session.scalar(select(func.count()).select_from(ScheduleVersion)) == versions  # nothing stored
    # The demo schedule as first seeded, re-uploaded in YAML form: same content as its stored version.
    with session_scope() as session:
        back = upload_schedule(session, demo_schedule)
        assert back.created  # differs from the version in force (HERON week off)
        assert sorted(back.plan.proposals) == ["H1", "HO1"]


def test_nightly_recheck_is_idempotent(three: dict[str, int], demo_schedule: dict[str, Any]) -> None:
    with session_scope() as session:
        session.add(
            ScheduleVersion(
                semester="2027A", version_label="2027A-2", content_hash=_hash(_heron_week_off(demo_schedule)), document=_heron_week_off(demo_schedule)
            )
        )  # stored without planning
    with session_scope() as session:
        first = plan_rechecks(session, stale_after=timedelta(days=30))
    with session_scope() as session:
        second = plan_rechecks(session, stale_after=timedelta(days=30))
    assert sorted(first.proposals) == ["H1", "HO1"]  # HERON nights changed
    assert second.queued == 0 and second.already_queued == 0  # the re-checks are the new basis


def test_changed_since_ignores_older_schedule_changes(three: dict[str, int], demo_schedule: dict[str, Any]) -> None:
    with session_scope() as session:
        session.add(
            ScheduleVersion(
                semester="2027A",
                version_label="2027A-2",
                content_hash=_hash(_heron_week_off(demo_schedule)),
                document=_heron_week_off(demo_schedule),
                uploaded_at=utcnow() - timedelta(days=3),
            )
        )
    with session_scope() as session:
        assert plan_rechecks(session, changed_since=utcnow() - timedelta(days=1)).queued == 0
    with session_scope() as session:
        assert plan_rechecks(session, changed_since=utcnow() - timedelta(days=4)).queued == 2


def test_engine_version_rechecks_everything_once(three: dict[str, int], monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setattr("feasibility.service.rechecks.engine_version", lambda: "99.0")
    monkeypatch.setattr("feasibility.service.submissions.engine_version", lambda: "99.0")
    with session_scope() as session:
        first = plan_rechecks(session)
    with session_scope() as session:
        second = plan_rechecks(session)
    assert first.queued == 4 and first.by_reason == {"engine": 4}  # every run was made by 0.x
    assert second.queued == 0


def test_stale_results_rechecked_once(store: str, proposal: Any, done: Any) -> None:
    with session_scope() as session:
        old = done(session, proposal("OLD", "KESTREL"), finished_days_ago=40).id
        done(session, proposal("NEW", "KESTREL"), finished_days_ago=2)
    with session_scope() as session:
        plan = plan_rechecks(session, stale_after=timedelta(days=30))
        assert plan.proposals == ["OLD"] and plan.run_ids == [old]  # same inputs: the same run again
        assert session.get(CheckRun, old).state == "queued"
    with session_scope() as session:
        again = plan_rechecks(session, stale_after=timedelta(days=30))
    assert again.queued == 0 and again.already_queued == 0


def test_observatory_change_rechecks_all(three: dict[str, int], demo_observatory: dict[str, Any]) -> None:
    with session_scope() as session:
        upload = upload_observatory(session, dict(demo_observatory, version="2026.2", telescope=dict(demo_observatory["telescope"], aperture_m=3.0)))
    assert upload.created and upload.plan.queued == 4 and upload.plan.by_reason == {"observatory": 4}
    with session_scope() as session:
        again = upload_observatory(session, dict(demo_observatory, version="2026.2", telescope=dict(demo_observatory["telescope"], aperture_m=3.0)))
    assert not again.created and again.plan.queued == 0


def test_bad_schedule_names_the_field(store: str, demo_schedule: dict[str, Any]) -> None:
    bad = dict(demo_schedule, nights=[dict(n) for n in demo_schedule["nights"]])
    bad["nights"][3]["instrument"] = "PELICAN"
    bad["nights"][4]["night"] = "2027-12-01"
    with session_scope() as session, pytest.raises(DocumentError) as caught:
        upload_schedule(session, bad)
    fields = {p.field for p in caught.value.problems}
    assert "nights[3].instrument" in fields  # unknown instrument (the demo observatory has KESTREL, HERON, OWL)
    assert any(f.endswith(".night") for f in fields)  # a night outside 2027A (2027-04-01 to 2027-09-30)
    with session_scope() as session, pytest.raises(DocumentError) as caught:
        upload_schedule(session, "nights: [1, 2")
    assert caught.value.problems[0].message.startswith("is neither valid JSON nor YAML")


def test_observatory_that_drops_a_scheduled_instrument_is_refused(store: str, demo_observatory: dict[str, Any]) -> None:
    without_heron = dict(demo_observatory, instruments=[i for i in demo_observatory["instruments"] if i["name"] != "HERON"])
    with session_scope() as session, pytest.raises(DocumentError) as caught:
        upload_observatory(session, without_heron)
    assert {p.field for p in caught.value.problems} == {"instruments"}
    assert "HERON" in caught.value.problems[0].message


def _hash(schedule: dict[str, Any]) -> str:
    return document_hash(InstrumentSchedule.model_validate(schedule))


def _version(session: Any, run_id: int) -> int:
    return session.get(CheckRun, run_id).proposal_version_id

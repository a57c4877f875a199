"""The periodic tasks of re-checking: in the Celery beat schedule, and idempotent when run.

Reference: the task must do nothing the second time when nothing changed (the
issue's idempotence requirement); expected proposals follow from the schedule edit.
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

from celery.schedules import crontab
from flask import Flask

from feasibility.documents import InstrumentSchedule
from feasibility.store.db import session_scope
from feasibility.store.hashing import document_hash
from feasibility.store.models import ScheduleVersion

from .test_admin_api import _without_heron


def test_beat_schedule_has_the_rechecks(app: Flask) -> None:
    beat = app.extensions["celery"].conf.beat_schedule
    assert beat["nightly-recheck"]["task"] == "feasibility.nightly_recheck"
    assert isinstance(beat["nightly-recheck"]["schedule"], crontab)
    assert beat["deliver-notices"]["task"] == "feasibility.deliver_notices"


def test_nightly_task_twice_queues_once(app: Flask, demo_schedule: dict[str, Any], proposal: Any, done: Any, make_token: Callable[..., str]) -> None:
    from worker.recheck_tasks import deliver_notices, nightly_recheck

    with app.app_context(), session_scope() as session:
        done(session, proposal("H1", "HERON"))
        done(session, proposal("K1", "KESTREL"))
        edited = InstrumentSchedule.model_validate(_without_heron(demo_schedule))
        session.add(
            ScheduleVersion(semester="2027A", version_label=edited.version, content_hash=document_hash(edited), document=edited.model_dump(mode="json"))
        )  # stored without planning, as by another tool
    app.extensions["feasibility.dispatch"].workers = 0  # leave the runs queued: planning only
    first, second = nightly_recheck(), nightly_recheck()
    assert first["proposals"] == ["H1"] and first["by_instrument"] == {"HERON": 1}  # only the HERON proposal
    assert second["queued"] == 0  # nothing changed since: idempotent
    assert deliver_notices() == {"sent": 0, "retrying": 0, "failed": 0, "refused": 0}

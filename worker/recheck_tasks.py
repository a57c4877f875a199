"""The periodic tasks of re-checking: the nightly re-check and sending verdict-change notices."""

from __future__ import annotations

from datetime import timedelta
from typing import Any

from celery import shared_task

from feasibility.service.recheck_answers import plan_answer
from feasibility.service.rechecks import dispatch_plan, plan_rechecks
from feasibility.service.runtime import current_settings
from feasibility.service.webhooks import NOTICE_TASK, deliver_due
from feasibility.store.db import session_factory, session_scope

__all__ = ["RECHECK_TASK", "WEBHOOK_TASK", "deliver_notices", "nightly_recheck"]

RECHECK_TASK = "feasibility.nightly_recheck"
WEBHOOK_TASK = NOTICE_TASK


@shared_task(name=RECHECK_TASK)
def nightly_recheck() -> dict[str, Any]:
    """Queue what schedule or observatory changes, a new engine version or stale results call for; idempotent."""
    days = float(current_settings().stale_days)
    with session_scope() as session:
        plan = plan_rechecks(session, stale_after=timedelta(days=days))
    dispatch_plan(plan)  # after commit
    return plan_answer(plan)


@shared_task(name=WEBHOOK_TASK)
def deliver_notices() -> dict[str, int]:
    """Send the verdict-change notices that are due; failures are retried later with back-off."""
    return deliver_due(session_factory).as_dict()

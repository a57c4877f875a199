"""Finding check runs that were queued or started long ago and never finished, and queueing them again.

A message can be lost (a broker restart without persistence, a web process that
died between commit and enqueue) and a worker can die mid-run. The sweeper is
the backstop: Celery beat runs it periodically; the embedded pool on a timer.
Re-queueing is safe because the task is idempotent.
"""

from __future__ import annotations

from datetime import timedelta

from sqlalchemy import and_, or_, select, update

from feasibility.store.db import session_scope
from feasibility.store.models import CheckRun, utcnow

__all__ = ["stale_runs"]


def stale_runs(queued_for: timedelta, running_for: timedelta, *, exclude: set[int] | None = None, limit: int = 1000) -> tuple[list[int], list[int]]:
    """Runs queued longer than ``queued_for`` or running longer than ``running_for``, made queued again.

    Returns (fresh, bulk) run ids by their priority. Their ``queued_at`` is reset so
    the next sweep does not send them again straight away.
    """
    now = utcnow()
    with session_scope() as session:
        stale = or_(
            and_(CheckRun.state == "queued", CheckRun.queued_at < now - queued_for),
            and_(CheckRun.state == "running", CheckRun.started_at < now - running_for),
        )
        query = (
            select(CheckRun.id, CheckRun.priority)
            .where(stale)
            .order_by(CheckRun.priority, CheckRun.id)
            .limit(limit)
        )
        rows = [(i, p) for i, p in session.execute(query) if not exclude or i not in exclude]
        if not rows:
            return [], []
        ids = [i for i, _ in rows]
        session.execute(
            update(CheckRun)
            .where(CheckRun.id.in_(ids), stale)
            .values(state="queued", queued_at=now, started_at=None)
            .execution_options(synchronize_session=False)
        )
    return [i for i, p in rows if p <= 0], [i for i, p in rows if p > 0]

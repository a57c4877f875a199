"""The relay: sends the runs that still need a message, and takes back runs whose worker is gone.

Runs are stored first and their messages sent after the commit (an outbox):
``dispatched_at`` stays NULL until a message for the run has been handed to the
broker. The relay — a Celery beat task every ``SWEEP_INTERVAL_S`` seconds, or the
embedded pool's timer — does three things in each pass:

1. Takes back claims whose lease lapsed (their worker died or hung) or whose
   holder is a dead process of this host: the run is queued again, unsent.
2. Decides which queued runs' messages may be lost. A message is lost when the
   broker lost its data (a Redis restart without persistence): the relay keeps a
   marker key in the broker and, when it is gone, every queued run is sent again.
   Short of that, the broker is asked for how many runs it holds messages (waiting and
   delivered-but-unacknowledged; a batch message carries several runs); when, on two
   passes in a row, that is fewer than the runs that should have one (queued and sent, or running), some
   messages are gone, and every run sent longer than a grace (twice the relay
   interval) ago is sent again. (One pass could catch a message between the
   broker's list and its unacknowledged set.) As a last backstop a run sent
   longer than ``QUEUED_TIMEOUT_S`` ago is sent again anyway.
3. Sends the unsent runs (and those from step 2), fresh submissions before bulk,
   then marks them sent.

Sending twice is safe: the task is idempotent (a done run is skipped, a run
being computed waits for its lease). The embedded pool's queue lives in memory,
so there every queued run not waiting in the pool counts as unsent.
"""

from __future__ import annotations

import logging
from collections.abc import Iterable
from dataclasses import dataclass, field
from datetime import datetime, timedelta
from typing import Any, cast

from sqlalchemy import CursorResult, Table, and_, func, or_, select, update
from sqlalchemy.orm import Session

from feasibility.service.leases import holder_is_gone, owner_id
from feasibility.settings import Settings
from feasibility.store.db import session_scope
from feasibility.store.models import CheckRun, utcnow

__all__ = ["RelayPass", "mark_sent", "mark_unsent", "relay", "take_back_lapsed"]

log = logging.getLogger(__name__)

#: A run created this recently is left to the request that created it (it sends right after its commit).
_CREATOR_GRACE = timedelta(seconds=1)


@dataclass
class RelayPass:
    """What one pass did: runs taken back from dead workers, and runs sent (by priority)."""

    taken_back: list[int] = field(default_factory=list)
    fresh: list[int] = field(default_factory=list)
    bulk: list[int] = field(default_factory=list)
    lost_messages: bool = False

    @property
    def sent(self) -> int:
        return len(self.fresh) + len(self.bulk)


def relay(dispatcher: Any, settings: Settings, *, exclude: set[int] | None = None, limit: int = 1000) -> RelayPass:
    """One pass of the relay (on the bound store); see the module's description."""
    now = utcnow()
    lease = timedelta(seconds=float(settings.lease_s))
    done = RelayPass(taken_back=take_back_lapsed(now, lease))
    durable = bool(getattr(dispatcher, "durable", False))
    with session_scope() as session:
        if durable:
            resend_before, done.lost_messages = _resend_horizon(session, dispatcher, settings, now)
            rows = _to_send(session, now - _CREATOR_GRACE, resend_before, exclude or set(), limit)
        else:  # the pool's memory is its queue: every queued run not waiting there is unsent
            rows = _to_send(session, now, now, exclude or set(), limit)
    done.fresh = [i for i, p in rows if p <= 0]
    done.bulk = [i for i, p in rows if p > 0]
    for ids, bulk in ((done.fresh, False), (done.bulk, True)):
        if ids:
            dispatcher.enqueue(ids, bulk=bulk)  # a broker fault propagates: the runs stay unsent for the next pass
            if durable:
                mark_sent(ids)
    if done.taken_back or done.sent:
        log.info(
            "relay: %d runs taken back from gone workers, %d sent%s", len(done.taken_back), done.sent, " (messages were lost)" if done.lost_messages else ""
        )
    return done


def take_back_lapsed(now: datetime, lease: timedelta) -> list[int]:
    """Queue again (unsent) the running runs whose lease lapsed or whose holder on this host is dead."""
    runs = cast(Table, CheckRun.__table__)  # a declarative class's table (typed as the wider FromClause)
    lapsed = or_(runs.c.lease_expires_at < now, and_(runs.c.lease_expires_at.is_(None), runs.c.started_at < now - lease))
    back = {"state": "queued", "started_at": None, "lease_expires_at": None, "lease_owner": None, "dispatched_at": None}
    with session_scope() as session:
        taken = list(session.scalars(update(runs).where(runs.c.state == "running", lapsed).values(**back).returning(runs.c.id)))
        host = owner_id().rpartition(":")[0]
        local = session.execute(
            select(runs.c.id, runs.c.attempts, runs.c.lease_owner).where(runs.c.state == "running", runs.c.lease_owner.like(f"{host}:%"))
        ).all()
        for run_id, attempts, owner in local:
            if holder_is_gone(owner, run_id):
                statement = update(runs).where(runs.c.id == run_id, runs.c.state == "running", runs.c.attempts == attempts).values(**back)
                if cast(CursorResult[Any], session.execute(statement)).rowcount:
                    taken.append(run_id)
    return taken


def mark_sent(run_ids: Iterable[int]) -> None:
    """Note that the runs' messages are with the broker now."""
    ids = list(run_ids)
    if not ids:
        return
    with session_scope() as session:
        session.execute(
            update(CheckRun)
            .where(CheckRun.id.in_(ids), CheckRun.state.in_(("queued", "running")))
            .values(dispatched_at=utcnow())
            .execution_options(synchronize_session=False)
        )


def mark_unsent(run_ids: Iterable[int]) -> None:
    """Put queued runs back in the outbox: the message they were marked sent with never reached the broker."""
    ids = list(run_ids)
    if not ids:
        return
    with session_scope() as session:
        session.execute(
            update(CheckRun).where(CheckRun.id.in_(ids), CheckRun.state == "queued").values(dispatched_at=None).execution_options(synchronize_session=False)
        )


def _resend_horizon(session: Session, dispatcher: Any, settings: Settings, now: datetime) -> tuple[datetime, bool]:
    """Runs sent before the returned moment are sent again; True when messages were found lost."""
    interval = float(settings.sweep_interval_s or 5)
    grace = timedelta(seconds=max(2 * interval, 5.0))
    backstop = now - timedelta(seconds=float(settings.queued_timeout_s))
    if hasattr(dispatcher, "broker_kept_data") and not dispatcher.broker_kept_data():
        log.warning("relay: the broker lost its messages (restarted without persistence); sending every queued run again")
        return now, True
    if hasattr(dispatcher, "message_count"):
        with_message = or_(CheckRun.state == "running", and_(CheckRun.state == "queued", CheckRun.dispatched_at.is_not(None)))
        waiting = session.scalar(select(func.count()).select_from(CheckRun).where(with_message)) or 0
        held = dispatcher.message_count(at_least=waiting)  # runs the messages carry (a batch message carries several)
    else:
        held = None
    if held is not None:
        short = held < waiting
        if dispatcher.noted_twice("message-deficit", short, seconds=3 * interval + 5):
            log.warning("relay: the broker holds %d messages for %d runs; sending the waiting runs again", held, waiting)
            return now - grace, True
    return backstop, False


def _to_send(session: Session, created_before: datetime, resend_before: datetime, exclude: set[int], limit: int) -> list[tuple[int, int]]:
    """Queued runs unsent (new ones only once created before ``created_before``) or sent before ``resend_before``; by priority."""
    unsent = and_(CheckRun.dispatched_at.is_(None), or_(CheckRun.queued_at <= created_before, CheckRun.attempts > 0))
    query = (
        select(CheckRun.id, CheckRun.priority)
        .where(CheckRun.state == "queued", or_(unsent, CheckRun.dispatched_at < resend_before))
        .order_by(CheckRun.priority, CheckRun.id)
        .limit(limit + len(exclude))
    )
    return [(i, p) for i, p in session.execute(query) if i not in exclude][:limit]

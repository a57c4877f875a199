"""Handing check runs to whatever computes them: Celery workers, or the embedded pool.

With ``BROKER_URL`` set the runtime has a :class:`CeleryDispatcher`; without, an
:class:`~feasibility.service.pool.EmbeddedPool` of threads in this process.
Either way the work is :func:`feasibility.service.runs.execute_run`, and either
way :func:`enqueue` must be called only after the transaction that created the
runs has committed, or a fast worker could look for a run that is not there yet.

Runs are an outbox (:mod:`feasibility.service.relay`): a run stays marked unsent
until its message is with the broker, so :func:`enqueue` never fails a request
that has stored its runs — when the broker cannot be reached the relay sends
them later.
"""

from __future__ import annotations

import logging
from collections.abc import Iterable
from typing import Any, Protocol

from feasibility.service.runtime import current_runtime
from feasibility.settings import Settings

__all__ = ["BULK_PRIORITY", "CHECK_TASK", "SUBMISSION_PRIORITY", "CeleryDispatcher", "Dispatcher", "control_queue_name", "enqueue", "queue_names"]

#: Message priorities. With the Redis transport 0 is the highest priority (the opposite of AMQP).
SUBMISSION_PRIORITY = 0
BULK_PRIORITY = 6

#: The registered name of the Celery task (sent by name so the web app need not import ``worker``).
CHECK_TASK = "feasibility.check_run"

#: Where the web app keeps its dispatcher (``app.extensions``), as tests and the commands that serve look it up.
EXTENSION = "feasibility.dispatch"

#: The marker key the relay keeps in the broker: gone means the broker lost its data (and its messages).
BROKER_MARKER = "feasibility-relay-marker"

log = logging.getLogger(__name__)


class Dispatcher(Protocol):
    """Something that accepts run ids to compute."""

    mode: str

    def enqueue(self, run_ids: list[int], *, bulk: bool = False) -> None: ...


def enqueue(run_ids: Iterable[int], *, bulk: bool = False) -> bool:
    """Queue check runs for computing; ``bulk=True`` (re-checks) runs after fresh submissions.

    Call only after the transaction that created the runs has committed. Returns False
    when the broker could not take them: they stay unsent and the relay sends them
    within seconds of the broker being back. Needs a runtime bound (an application context, a worker, a command).
    """
    ids = [int(i) for i in run_ids]
    if not ids:
        return True
    runtime = current_runtime()
    if runtime is None or runtime.dispatcher is None:
        raise RuntimeError("enqueue() needs a runtime with a dispatcher: an application context (`with app.app_context():`), a worker or a command")
    dispatcher = runtime.dispatcher
    try:
        dispatcher.enqueue(ids, bulk=bulk)
    except Exception as exc:  # noqa: BLE001 - whatever the broker's client raises, the runs are safe in the outbox
        log.warning("could not queue %d check runs (%s: %s); the relay sends them later", len(ids), type(exc).__name__, exc)
        return False
    if getattr(dispatcher, "durable", False):
        from feasibility.service.relay import mark_sent

        try:
            mark_sent(ids)
        except Exception as exc:  # noqa: BLE001 - unmarked, they are sent once more: harmless
            log.warning("could not mark %d check runs as sent (%s); the relay may send them again", len(ids), type(exc).__name__)
    return True


def queue_names(settings: Settings) -> str:
    """The Celery queue of check runs (a prefix lets tests and deployments share one Redis)."""
    return f"{settings.queue_prefix or 'feasibility'}.checks"


def control_queue_name(settings: Settings) -> str:
    """The Celery queue of the periodic tasks (relay, re-checks, notices), apart from the check runs."""
    return f"{settings.queue_prefix or 'feasibility'}.control"


class CeleryDispatcher:
    """Sends one message per run to the Celery queue, with the submission or bulk priority."""

    mode = "celery"
    #: Messages live in the broker, outside this process: what was sent stays sent (unless the broker loses it).
    durable = True

    def __init__(self, celery_app: Any, queue: str) -> None:
        self.celery = celery_app
        self.queue = queue

    def enqueue(self, run_ids: list[int], *, bulk: bool = False) -> None:
        priority = BULK_PRIORITY if bulk else SUBMISSION_PRIORITY
        # One producer (one broker connection) for the whole batch: a bulk re-check sends thousands.
        with self.celery.producer_or_acquire() as producer:
            for run_id in run_ids:
                self.celery.send_task(CHECK_TASK, args=[run_id], queue=self.queue, priority=priority, producer=producer)

    def message_count(self) -> int | None:
        """Messages the broker holds for the workers: waiting (every priority) and delivered but unacknowledged.

        None when the transport cannot tell (only Redis is asked). Counts every task's
        messages on the shared keys, so it errs high: a loss is then seen a pass later.
        """
        with self.celery.connection_for_write() as connection:
            channel = connection.default_channel
            if not hasattr(channel, "priority_steps") or not hasattr(channel, "unacked_key"):
                return None
            with channel.conn_or_acquire() as client:
                pipe = client.pipeline()
                for priority in channel.priority_steps:
                    pipe.llen(channel._q_for_pri(self.queue, priority))
                pipe.hlen(channel.unacked_key)
                return int(sum(pipe.execute()))

    def broker_kept_data(self) -> bool:
        """False when the marker key the last pass left in the broker is gone: the broker lost its data.

        Sets the marker for the next pass. The first pass ever sees no marker either,
        and so sends every queued run once more, which is harmless.
        """
        with self.celery.connection_for_write() as connection:
            channel = connection.default_channel
            if not hasattr(channel, "conn_or_acquire"):
                return True
            with channel.conn_or_acquire() as client:
                return bool(client.getset(f"{self.queue}.{BROKER_MARKER}", "1"))

    def noted_twice(self, name: str, seen: bool, *, seconds: float) -> bool:
        """Whether ``seen`` holds now and held on the previous pass too (within ``seconds``); notes it in the broker.

        The relay runs in whichever worker takes its message, so what it noted last
        time is kept where every worker sees it: in the broker, for a short while.
        """
        key = f"{self.queue}.{BROKER_MARKER}.{name}"
        with self.celery.connection_for_write() as connection:
            channel = connection.default_channel
            with channel.conn_or_acquire() as client:
                # GETSET and EXPIRE only: commands the transport's key prefixing leaves alone, as for the marker.
                pipe = client.pipeline()
                pipe.getset(key, "1" if seen else "0")
                pipe.expire(key, max(int(seconds), 1))
                before, _ = pipe.execute()
                return seen and before == b"1"

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

import json
import logging
from collections.abc import Iterable
from typing import Any, Protocol

from feasibility.service.runtime import current_runtime
from feasibility.settings import Settings

__all__ = [
    "BATCH_FROM",
    "BULK_PRIORITY",
    "CHECK_BATCH_TASK",
    "CHECK_TASK",
    "RUNS_HEADER",
    "RUNS_PER_MESSAGE",
    "SUBMISSION_PRIORITY",
    "CeleryDispatcher",
    "Dispatcher",
    "batches",
    "control_queue_name",
    "enqueue",
    "marks_with_commit",
    "queue_names",
]

#: Message priorities. With the Redis transport 0 is the highest priority (the opposite of AMQP).
SUBMISSION_PRIORITY = 0
BULK_PRIORITY = 6

#: The registered name of the Celery task (sent by name so the web app need not import ``worker``).
CHECK_TASK = "feasibility.check_run"

#: The task computing several runs one after the other, for many runs queued at once (a bulk submission, a re-check, the relay).
CHECK_BATCH_TASK = "feasibility.check_runs"

#: At most this many runs in one message. The worker claims, computes and stores a batch together
#: (service/runs.execute_runs), each run finished only while its own claim holds, so a batch cut short by a dead
#: worker loses nothing: its message comes back, the runs done are skipped. A batch of 16 runs takes well under
#: a second: a fresh submission waits behind at most that.
RUNS_PER_MESSAGE = 16

#: Runs queued at once below this go one a message, so that a few runs are spread over every worker process.
BATCH_FROM = 8

#: The message header saying how many runs a batch message carries (the relay counts runs, not messages).
RUNS_HEADER = "runs"

#: Where the web app keeps its dispatcher (``app.extensions``), as tests and the commands that serve look it up.
EXTENSION = "feasibility.dispatch"

#: The marker key the relay keeps in the broker: gone means the broker lost its data (and its messages).
BROKER_MARKER = "feasibility-relay-marker"

log = logging.getLogger(__name__)


class Dispatcher(Protocol):
    """Something that accepts run ids to compute."""

    mode: str

    def enqueue(self, run_ids: list[int], *, bulk: bool = False) -> None: ...


def enqueue(run_ids: Iterable[int], *, bulk: bool = False, marked: bool = False) -> bool:
    """Queue check runs for computing; ``bulk=True`` (re-checks) runs after fresh submissions.

    Call only after the transaction that created the runs has committed. Returns False
    when the broker could not take them: they stay unsent and the relay sends them
    within seconds of the broker being back. ``marked``: the runs were marked sent in
    the transaction that stored them (:func:`marks_with_commit`), so a request costs one
    transaction; they are unmarked should the broker refuse them. Needs a runtime bound
    (an application context, a worker, a command).
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
        if marked:
            _unmark(ids)
        return False
    if getattr(dispatcher, "durable", False) and not marked:
        from feasibility.service.relay import mark_sent

        try:
            mark_sent(ids)
        except Exception as exc:  # noqa: BLE001 - unmarked, they are sent once more: harmless
            log.warning("could not mark %d check runs as sent (%s); the relay may send them again", len(ids), type(exc).__name__)
    return True


def marks_with_commit() -> bool:
    """Whether runs sent right after their commit are marked sent in the transaction that stores them (``dispatched_at``).

    So when the dispatcher's messages go to a broker. The caller then sends them after the
    commit with ``enqueue(..., marked=True)``: one transaction per submission instead of a
    second one to mark them. Should the process die between the commit and the send, the
    runs are marked but have no message: the relay finds the broker short of messages and
    sends them again (:mod:`feasibility.service.relay`).
    """
    runtime = current_runtime()
    return runtime is not None and bool(getattr(runtime.dispatcher, "durable", False))


def _unmark(run_ids: list[int]) -> None:
    """Put runs marked sent in advance back in the outbox: their message never reached the broker."""
    from feasibility.service.relay import mark_unsent

    try:
        mark_unsent(run_ids)
    except Exception as exc:  # noqa: BLE001 - left marked, the relay's count of the broker's messages finds them
        log.warning("could not put %d check runs back in the outbox (%s); the relay finds them", len(run_ids), type(exc).__name__)


def queue_names(settings: Settings) -> str:
    """The Celery queue of check runs (a prefix lets tests and deployments share one Redis)."""
    return f"{settings.queue_prefix or 'feasibility'}.checks"


def control_queue_name(settings: Settings) -> str:
    """The Celery queue of the periodic tasks (relay, re-checks, notices), apart from the check runs."""
    return f"{settings.queue_prefix or 'feasibility'}.control"


class CeleryDispatcher:
    """Sends the runs to the Celery queue with the submission or bulk priority: one a message, or batches when many."""

    mode = "celery"
    #: Messages live in the broker, outside this process: what was sent stays sent (unless the broker loses it).
    durable = True

    def __init__(self, celery_app: Any, queue: str) -> None:
        self.celery = celery_app
        self.queue = queue

    def enqueue(self, run_ids: list[int], *, bulk: bool = False) -> None:
        priority = BULK_PRIORITY if bulk else SUBMISSION_PRIORITY
        # One producer (one broker connection) for the whole lot: a bulk re-check sends thousands of runs.
        with self.celery.producer_or_acquire() as producer:
            for batch in batches(run_ids):
                if len(batch) == 1:
                    self.celery.send_task(CHECK_TASK, args=batch, queue=self.queue, priority=priority, producer=producer)
                else:
                    self.celery.send_task(
                        CHECK_BATCH_TASK, args=[batch], queue=self.queue, priority=priority, producer=producer, headers={RUNS_HEADER: len(batch)}
                    )

    def message_count(self, at_least: int | None = None) -> int | None:
        """Runs the broker holds messages for: waiting (every priority) and delivered but unacknowledged.

        A message counts one run, or the runs a batch message says it carries: the messages
        are read for that only when there are fewer of them than ``at_least`` (the runs that
        should have one), so the common case costs one count per list. None when the transport
        cannot tell (only Redis is asked). Counts every task's messages on the shared keys,
        so it errs high: a loss is then seen a pass later.
        """
        with self.celery.connection_for_write() as connection:
            channel = connection.default_channel
            if not hasattr(channel, "priority_steps") or not hasattr(channel, "unacked_key"):
                return None
            lists = [channel._q_for_pri(self.queue, priority) for priority in channel.priority_steps]
            with channel.conn_or_acquire() as client:
                pipe = client.pipeline()
                for key in lists:
                    pipe.llen(key)
                pipe.hlen(channel.unacked_key)
                messages = int(sum(pipe.execute()))
                if at_least is None or messages >= at_least:
                    return messages
                # LRANGE and HVALS are not among the commands the transport prefixes with its key prefix: add it here.
                prefix = getattr(client, "global_keyprefix", None) or ""
                pipe = client.pipeline()
                for key in lists:
                    pipe.lrange(prefix + key, 0, -1)
                pipe.hvals(prefix + channel.unacked_key)
                return sum(_runs_in(raw) for found in pipe.execute() for raw in found)

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


def batches(run_ids: list[int]) -> list[list[int]]:
    """``run_ids`` cut into messages: one run each when fewer than :data:`BATCH_FROM`, else batches of at most
    :data:`RUNS_PER_MESSAGE` (at least four batches, so every worker process gets some), in their order."""
    size = 1 if len(run_ids) < BATCH_FROM else min(RUNS_PER_MESSAGE, max(2, len(run_ids) // 4))
    return [run_ids[i : i + size] for i in range(0, len(run_ids), size)]


def _runs_in(raw: bytes | str) -> int:
    """How many runs one message held by the broker carries (a message kombu's Redis transport keeps as JSON)."""
    try:
        payload = json.loads(raw)
        if isinstance(payload, list) and payload:  # unacknowledged: [message, exchange, routing key]
            payload = payload[0]
        runs = payload.get("headers", {}).get(RUNS_HEADER, 1)
        return max(int(runs), 1)
    except (ValueError, TypeError, AttributeError):
        return 1

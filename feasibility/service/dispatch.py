"""Handing check runs to whatever computes them: Celery workers, or the embedded pool.

With ``BROKER_URL`` set the app has a :class:`CeleryDispatcher`; without, an
:class:`~feasibility.service.pool.EmbeddedPool` of threads in this process.
Either way the work is :func:`feasibility.service.runs.execute_run`, and either
way :func:`enqueue` must be called only after the transaction that created the
runs has committed, or a fast worker could look for a run that is not there yet.
"""

from __future__ import annotations

from collections.abc import Iterable
from typing import Any, Protocol

from flask import current_app, has_app_context

__all__ = ["BULK_PRIORITY", "CHECK_TASK", "SUBMISSION_PRIORITY", "CeleryDispatcher", "Dispatcher", "enqueue", "queue_names"]

#: Message priorities. With the Redis transport 0 is the highest priority (the opposite of AMQP).
SUBMISSION_PRIORITY = 0
BULK_PRIORITY = 6

#: The registered name of the Celery task (sent by name so the web app need not import ``worker``).
CHECK_TASK = "feasibility.check_run"

EXTENSION = "feasibility.dispatch"


class Dispatcher(Protocol):
    """Something that accepts run ids to compute."""

    mode: str

    def enqueue(self, run_ids: list[int], *, bulk: bool = False) -> None: ...


def enqueue(run_ids: Iterable[int], *, bulk: bool = False) -> None:
    """Queue check runs for computing; ``bulk=True`` (re-checks) runs after fresh submissions.

    Call only after the transaction that created the runs has committed.
    Needs an app context (``with app.app_context():``).
    """
    ids = [int(i) for i in run_ids]
    if not ids:
        return
    if not has_app_context():
        raise RuntimeError("enqueue() needs an application context: use `with create_app().app_context():`")
    current_app.extensions[EXTENSION].enqueue(ids, bulk=bulk)


def queue_names(config: dict[str, Any]) -> str:
    """The Celery queue of check runs (a prefix lets tests and deployments share one Redis)."""
    return f"{config.get('QUEUE_PREFIX') or 'feasibility'}.checks"


class CeleryDispatcher:
    """Sends one message per run to the Celery queue, with the submission or bulk priority."""

    mode = "celery"

    def __init__(self, celery_app: Any, queue: str) -> None:
        self.celery = celery_app
        self.queue = queue

    def enqueue(self, run_ids: list[int], *, bulk: bool = False) -> None:
        priority = BULK_PRIORITY if bulk else SUBMISSION_PRIORITY
        # One producer (one broker connection) for the whole batch: a bulk re-check sends thousands.
        with self.celery.producer_or_acquire() as producer:
            for run_id in run_ids:
                self.celery.send_task(CHECK_TASK, args=[run_id], queue=self.queue, priority=priority, producer=producer)

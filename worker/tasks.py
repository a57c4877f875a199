"""The Celery tasks: compute one check run, or a batch of them; relay unsent runs and take back lapsed ones. All take ids only."""

from __future__ import annotations

import logging
import random
from typing import Any

from celery import shared_task
from celery.signals import worker_init, worker_process_init
from sqlalchemy.exc import SQLAlchemyError

from feasibility.service.dispatch import CHECK_BATCH_TASK, CHECK_TASK, RUNS_HEADER
from feasibility.service.relay import relay
from feasibility.service.runs import LeaseHeld, execute_run, execute_runs
from feasibility.service.runtime import current_runtime
from feasibility.service.startup import settle_for_serving
from feasibility.store.db import dispose_pools_after_fork

__all__ = ["RELAY_TASK", "check_run", "check_runs", "sweep_runs"]

log = logging.getLogger(__name__)

#: The relay's registered name (kept from when it was only a sweeper, so beat schedules and scripts still work).
RELAY_TASK = "feasibility.sweep_runs"

#: Database faults: back-off doubling from 1 s up to this, jittered; given up after _DB_RETRIES tries (about an hour),
#: after which the relay's count of the broker's messages finds the run without one and sends it again.
_DB_BACKOFF_MAX_S = 30.0
_DB_RETRIES = 120


@shared_task(bind=True, name=CHECK_TASK, max_retries=None)
def check_run(task: Any, run_id: int) -> str:
    """Compute and store check run ``run_id``; running it twice stores one result.

    A run whose lease a live worker holds is tried again when the lease would lapse
    (never acknowledged and forgotten): by then it is done, and this message is
    skipped, or its worker is gone, and this message takes it over. A passing
    database fault is retried with back-off (the claim was given back first).
    """
    try:
        return execute_run(run_id)
    except LeaseHeld as held:
        raise task.retry(countdown=held.retry_in) from held
    except SQLAlchemyError as exc:
        tries = task.request.retries
        if tries >= _DB_RETRIES:
            log.error("check run %s: database faults on %d tries; left for the relay", run_id, tries)
            return "given up"
        raise task.retry(exc=exc, countdown=_backoff(tries)) from exc


@shared_task(bind=True, name=CHECK_BATCH_TASK, max_retries=None)
def check_runs(task: Any, run_ids: list[int]) -> dict[str, int]:
    """Compute and store several check runs together (:func:`~feasibility.service.runs.execute_runs`): one claim, one
    heartbeat and one store for the batch, each run finished only while its own claim is ours.

    The message is acknowledged once the batch is through (late ack): a worker that dies
    mid-batch leaves it to be delivered again, and the runs already done are then skipped.
    Runs whose lease a live worker holds are sent again as one message when the last of
    those leases would lapse; a passing database fault sends the batch again with back-off
    (its claims were given back first; the runs already done are skipped then). Returns
    how many runs ended each way.
    """
    try:
        batch = execute_runs(run_ids)
    except SQLAlchemyError as exc:  # the store is away: the whole batch again, later
        tries = task.request.retries
        if tries >= _DB_RETRIES:
            log.error("check runs %s: database faults on %d tries; left for the relay", run_ids, tries)
            return {}
        raise task.retry(args=[list(run_ids)], exc=exc, countdown=_backoff(tries), headers={RUNS_HEADER: len(run_ids)}) from exc
    if batch.held:
        held = list(batch.held)
        raise task.retry(args=[held], countdown=max(batch.held.values()), headers={RUNS_HEADER: len(held)})
    return dict(batch.ended)


def _backoff(tries: int) -> float:
    """Seconds before the next try after a database fault: doubling from 1 s up to a cap, jittered."""
    return min(2.0 ** min(tries, 10), _DB_BACKOFF_MAX_S) * random.uniform(0.5, 1.0)


@shared_task(name=RELAY_TASK, acks_late=False)
def sweep_runs() -> int:
    """The relay (periodic, from Celery beat): take back runs of dead workers, send unsent and lost runs.

    Acknowledged on receipt: a lost pass is replaced by the next one, and it is then
    not counted among the broker's unacknowledged messages.
    """
    try:
        runtime = current_runtime()
        if runtime is None or runtime.dispatcher is None:
            raise RuntimeError("the relay needs the worker's runtime")
        return relay(runtime.dispatcher, runtime.settings).sent
    except Exception as exc:  # noqa: BLE001 - the store or the broker away: the next pass, seconds later, does it
        log.warning("relay pass skipped: %s: %s", type(exc).__name__, str(exc).splitlines()[0] if str(exc) else "")
        return 0


@worker_init.connect
def _load_engine(**_: object) -> None:
    """Import the engine (NumPy, astropy) in the worker's main process, before its pool forks.

    Every child then starts with it loaded instead of spending seconds on imports in its first check,
    and with what start-up made kept out of the garbage collector's full passes (``settle_for_serving``).
    """
    import feasibility.engine  # noqa: F401

    settle_for_serving()


@worker_process_init.connect
def _fresh_pool_per_process(**_: object) -> None:
    """A forked worker process must not share the parent's database connections: drop them (without closing)."""
    dispose_pools_after_fork()

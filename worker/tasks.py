"""The Celery tasks: compute one check run; sweep for stale runs. Both take ids only."""

from __future__ import annotations

from datetime import timedelta

from celery import shared_task
from celery.signals import worker_init, worker_process_init
from flask import current_app
from sqlalchemy.exc import OperationalError

from feasibility.service.dispatch import CHECK_TASK, enqueue
from feasibility.service.runs import execute_run
from feasibility.service.sweeper import stale_runs
from feasibility.store.db import dispose_pools_after_fork

__all__ = ["check_run", "sweep_runs"]


@shared_task(
    name=CHECK_TASK,
    # A database fault (connection dropped, server restarting, SQLite busy) passes;
    # retry with exponential back-off (1, 2, 4 ... s, jittered, at most 5 min), then give up
    # and leave the run to the sweeper.
    autoretry_for=(OperationalError,),
    retry_backoff=1,
    retry_backoff_max=300,
    retry_jitter=True,
    max_retries=8,
)
def check_run(run_id: int) -> str:
    """Compute and store check run ``run_id``; running it twice stores one result."""
    return execute_run(run_id)


@shared_task(name="feasibility.sweep_runs")
def sweep_runs() -> int:
    """Re-queue runs queued or running for too long (periodic, from Celery beat)."""
    config = current_app.config
    fresh, bulk = stale_runs(timedelta(seconds=float(config["QUEUED_TIMEOUT_S"])), timedelta(seconds=float(config["RUN_TIMEOUT_S"])))
    enqueue(fresh)
    enqueue(bulk, bulk=True)
    return len(fresh) + len(bulk)


@worker_init.connect
def _load_engine(**_: object) -> None:
    """Import the engine (NumPy, astropy) in the worker's main process, before its pool forks.

    Every child then starts with it loaded instead of spending seconds on imports in its first check.
    """
    import feasibility.engine  # noqa: F401


@worker_process_init.connect
def _fresh_pool_per_process(**_: object) -> None:
    """A forked worker process must not share the parent's database connections: drop them (without closing)."""
    dispose_pools_after_fork()

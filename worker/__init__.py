"""The Celery workers: their app is built from the settings and the service layer, never from the web app.

:func:`worker_runtime` makes the service's runtime with the task modules included;
the Celery configuration is :func:`feasibility.service.celery_setup.celery_config`,
the same the web app sends with.
"""

from __future__ import annotations

from feasibility.service.runtime import Runtime, set_process_runtime
from feasibility.service.startup import start_runtime
from feasibility.settings import Settings

__all__ = ["TASK_MODULES", "worker_runtime"]

#: The modules whose tasks a worker runs.
TASK_MODULES = ("worker.tasks", "worker.recheck_tasks", "worker.simulation_tasks")


def worker_runtime(settings: Settings) -> Runtime:
    """The runtime of a worker process (its Celery app is ``runtime.celery``), used by every task and thread of it."""
    runtime = start_runtime(settings, celery_include=TASK_MODULES, embedded_pool=False)
    set_process_runtime(runtime)
    return runtime

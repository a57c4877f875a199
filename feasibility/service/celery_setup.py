"""The Celery app of the service, built from the settings: the web app's client for sending, and the workers' app.

Both are made by :func:`make_celery` with the same configuration (:func:`celery_config`),
so what the web app sends and what the workers consume agree. Every task runs with
the runtime it was made for bound (:class:`~feasibility.service.runtime.Runtime`), so it
sees that runtime's store and settings; tasks take ids, never ORM objects.
"""

from __future__ import annotations

from collections.abc import Sequence
from typing import Any

from celery import Celery, Task
from celery.schedules import crontab
from kombu import Queue

from feasibility.service.dispatch import SUBMISSION_PRIORITY, control_queue_name, queue_names
from feasibility.service.runtime import Runtime
from feasibility.settings import Settings

__all__ = ["celery_config", "make_celery"]


def make_celery(runtime: Runtime, include: Sequence[str] = ()) -> Celery:
    """A Celery app for ``runtime`` (made the default app): its tasks run with the runtime bound; ``include``: task modules."""

    class RuntimeTask(Task):
        def __call__(self, *args: object, **kwargs: object) -> object:
            with runtime.bound():
                return self.run(*args, **kwargs)

    celery_app = Celery("feasibility", task_cls=RuntimeTask, include=list(include))
    celery_app.config_from_object(celery_config(runtime.settings))
    celery_app.set_default()
    return celery_app


def celery_config(settings: Settings) -> dict[str, Any]:
    """Celery settings from the service's settings; each reliability setting is chosen on purpose."""
    run_timeout = float(settings.run_timeout_s)
    relay_interval = float(settings.sweep_interval_s or 5)
    control = control_queue_name(settings)
    transport: dict[str, Any] = {
        # Redis re-delivers a message not acknowledged within this time. With late acks a
        # message is acknowledged only when its run is stored, so this must be longer than
        # the longest check (RUN_TIMEOUT_S): otherwise a slow but healthy run would be handed
        # to a second worker (which would only wait for its lease). A worker that dies
        # does not wait for this: its runs' leases lapse and the relay sends them again.
        "visibility_timeout": int(run_timeout * 4),
        # Priorities on one queue: Redis keeps one list per step and workers pop the lists
        # in order, lowest number first. Fresh submissions go at 0, bulk re-checks at 6,
        # so a submission waits only for the runs already being computed, never behind a
        # thousand queued re-checks. (Chosen over two queues, because kombu polls several
        # queues round-robin, which would let bulk work take every other turn.)
        "priority_steps": [0, 3, 6, 9],
        "queue_order_strategy": "priority",
    }
    if settings.queue_prefix and settings.queue_prefix != "feasibility":
        transport["global_keyprefix"] = f"{settings.queue_prefix}:"  # tests and deployments can share one Redis
    return {
        "broker_url": settings.broker_url or "memory://",
        "broker_transport_options": transport,
        "broker_connection_retry_on_startup": True,
        # Verdicts are stored in the database by the task itself; no result backend is needed.
        "task_ignore_result": True,
        "task_default_queue": queue_names(settings),
        "task_default_priority": SUBMISSION_PRIORITY,
        # Check runs on one queue; the periodic tasks (relay, re-checks, notices) on a second,
        # so the relay is not queued behind a thousand checks. Workers consume both; kombu's
        # Redis transport pops by priority first, then round-robin over the queues.
        "task_queues": (Queue(queue_names(settings)), Queue(control)),
        "task_routes": {name: {"queue": control} for name in ("feasibility.sweep_runs", "feasibility.nightly_recheck", "feasibility.deliver_notices")},
        # Acknowledge a message after the task finishes, not when it starts: a worker that
        # dies mid-run leaves the message to be delivered again (the task is idempotent).
        "task_acks_late": True,
        # ... and when a worker child is killed (out of memory, SIGKILL) the message is
        # rejected and re-queued rather than acknowledged as failed.
        "task_reject_on_worker_lost": True,
        # A worker connection lost mid-run cancels the running task so the broker's
        # re-delivery is not computed twice at once.
        "worker_cancel_long_running_tasks_on_connection_loss": True,
        # Each worker process reserves one message at a time: checks take seconds, so
        # prefetching more would let a busy process sit on work another process could
        # do, and would take bulk messages ahead of later fresh submissions.
        "worker_prefetch_multiplier": 1,
        # A check that hangs is stopped well before it would count as lost.
        "task_soft_time_limit": int(run_timeout * 0.8),
        "task_time_limit": int(run_timeout * 0.9),
        "task_track_started": False,
        # The relay (feasibility.service.relay): send runs stored but not yet sent, and those
        # whose message was lost or whose worker died. Every few seconds; a pass that waits
        # longer than a few intervals is dropped (the next one does the same work).
        "beat_schedule": {
            "sweep-stale-runs": {
                "task": "feasibility.sweep_runs",
                "schedule": relay_interval,
                "options": {"queue": control, "priority": SUBMISSION_PRIORITY, "expires": max(4 * relay_interval, 20.0)},
            },
            # Re-checks (worker/recheck_tasks.py): nightly at RECHECK_HOUR UTC; notices every minute.
            "nightly-recheck": {"task": "feasibility.nightly_recheck", "schedule": crontab(minute=0, hour=settings.recheck_hour)},
            "deliver-notices": {"task": "feasibility.deliver_notices", "schedule": float(settings.notice_interval_s)},
        },
        "worker_hijack_root_logger": False,
    }

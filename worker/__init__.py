"""Celery, joined to the Flask app factory (the pattern of Flask's own Celery example).

Every task runs inside the Flask app's context, so it sees the app's database
engine and settings; tasks take ids, never ORM objects.
"""

from __future__ import annotations

from typing import Any

from celery import Celery, Task
from celery.schedules import crontab
from flask import Flask
from kombu import Queue

from feasibility.service.dispatch import SUBMISSION_PRIORITY, control_queue_name, queue_names

__all__ = ["celery_config", "celery_init_app"]


def celery_init_app(app: Flask) -> Celery:
    """Make the Celery app of ``app``: tasks run in its app context; kept in ``app.extensions['celery']``."""

    class FlaskTask(Task):
        def __call__(self, *args: object, **kwargs: object) -> object:
            with app.app_context():
                return self.run(*args, **kwargs)

    celery_app = Celery(app.name, task_cls=FlaskTask, include=["worker.tasks", "worker.recheck_tasks", "worker.simulation_tasks"])
    celery_app.config_from_object(celery_config(app.config))
    celery_app.set_default()
    app.extensions["celery"] = celery_app
    return celery_app


def celery_config(config: Any) -> dict[str, Any]:
    """Celery settings from the Flask config; each reliability setting is chosen on purpose."""
    run_timeout = float(config["RUN_TIMEOUT_S"])
    relay_interval = float(config["SWEEP_INTERVAL_S"] or 5)
    control = control_queue_name(config)
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
    if config.get("QUEUE_PREFIX") and config["QUEUE_PREFIX"] != "feasibility":
        transport["global_keyprefix"] = f"{config['QUEUE_PREFIX']}:"  # tests and deployments can share one Redis
    return {
        "broker_url": config.get("BROKER_URL") or "memory://",
        "broker_transport_options": transport,
        "broker_connection_retry_on_startup": True,
        # Verdicts are stored in the database by the task itself; no result backend is needed.
        "task_ignore_result": True,
        "task_default_queue": queue_names(config),
        "task_default_priority": SUBMISSION_PRIORITY,
        # Check runs on one queue; the periodic tasks (relay, re-checks, notices) on a second,
        # so the relay is not queued behind a thousand checks. Workers consume both; kombu's
        # Redis transport pops by priority first, then round-robin over the queues.
        "task_queues": (Queue(queue_names(config)), Queue(control)),
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
            "nightly-recheck": {"task": "feasibility.nightly_recheck", "schedule": crontab(minute=0, hour=int(config.get("RECHECK_HOUR", 3)))},
            "deliver-notices": {"task": "feasibility.deliver_notices", "schedule": float(config.get("NOTICE_INTERVAL_S", 60))},
        },
        "worker_hijack_root_logger": False,
    }

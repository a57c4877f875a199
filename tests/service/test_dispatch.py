"""Dispatching to Celery: one message per run, fresh submissions ahead of bulk re-checks."""

from __future__ import annotations

from collections.abc import Iterator
from contextlib import contextmanager
from typing import Any

import pytest
from flask import Flask

from feasibility.service.dispatch import BULK_PRIORITY, CHECK_TASK, SUBMISSION_PRIORITY, CeleryDispatcher, enqueue


class RecordingCelery:
    """Records what would be sent to the broker."""

    def __init__(self) -> None:
        self.sent: list[dict[str, Any]] = []

    @contextmanager
    def producer_or_acquire(self) -> Iterator[object]:
        yield object()

    def send_task(self, name: str, **options: Any) -> None:
        self.sent.append({"name": name, **options})


def test_bulk_runs_get_a_lower_priority_than_submissions() -> None:
    celery = RecordingCelery()
    dispatcher = CeleryDispatcher(celery, "test.checks")
    dispatcher.enqueue([1, 2])
    dispatcher.enqueue([3], bulk=True)
    assert [(m["args"], m["priority"], m["queue"]) for m in celery.sent] == [
        ([1], SUBMISSION_PRIORITY, "test.checks"),
        ([2], SUBMISSION_PRIORITY, "test.checks"),
        ([3], BULK_PRIORITY, "test.checks"),
    ]
    assert {m["name"] for m in celery.sent} == {CHECK_TASK}
    # kombu's Redis transport serves lower numbers first (its documentation: priority 0 is the highest).
    assert SUBMISSION_PRIORITY < BULK_PRIORITY


def test_the_celery_app_is_configured_for_reliability(app: Flask) -> None:
    conf = app.extensions["celery"].conf
    assert conf.task_acks_late and conf.task_reject_on_worker_lost
    assert conf.worker_prefetch_multiplier == 1
    # Redis re-delivers unacknowledged messages after visibility_timeout: it must outlast a run's time limit.
    assert conf.broker_transport_options["visibility_timeout"] > conf.task_time_limit
    assert "sweep-stale-runs" in conf.beat_schedule


def test_enqueue_needs_an_app_context() -> None:
    with pytest.raises(RuntimeError, match="application context"):
        enqueue([1])

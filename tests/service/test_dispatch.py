"""Dispatching to Celery: one message per run, or batches when many are queued at once; fresh submissions ahead of bulk re-checks."""

from __future__ import annotations

from collections.abc import Iterator
from contextlib import contextmanager
from typing import Any

import pytest
from flask import Flask

from feasibility.service.dispatch import (
    BATCH_FROM,
    BULK_PRIORITY,
    CHECK_BATCH_TASK,
    CHECK_TASK,
    RUNS_HEADER,
    RUNS_PER_MESSAGE,
    SUBMISSION_PRIORITY,
    CeleryDispatcher,
    batches,
    enqueue,
)


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


def test_many_runs_queued_at_once_go_several_to_a_message() -> None:
    celery = RecordingCelery()
    dispatcher = CeleryDispatcher(celery, "test.checks")
    ids = list(range(1, 101))
    dispatcher.enqueue(ids, bulk=True)
    assert {m["name"] for m in celery.sent} == {CHECK_BATCH_TASK}
    carried = [m["args"][0] for m in celery.sent]
    assert [i for batch in carried for i in batch] == ids  # every run once, in the order queued
    assert all(1 < len(batch) <= RUNS_PER_MESSAGE for batch in carried)
    assert [m["headers"][RUNS_HEADER] for m in celery.sent] == [len(batch) for batch in carried]
    assert {m["priority"] for m in celery.sent} == {BULK_PRIORITY}
    # A few runs (fewer than BATCH_FROM) still go one a message, so they spread over the worker processes.
    assert batches([1, 2, 3]) == [[1], [2], [3]]
    assert len(batches(list(range(BATCH_FROM)))) >= 4

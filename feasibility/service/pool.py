"""The embedded pool: check runs computed by a few threads inside the web process.

Used when no ``BROKER_URL`` is set, so ``feasibility serve`` needs no Redis. A
priority queue puts fresh submissions before bulk re-checks; the task body is
the same :func:`~feasibility.service.runs.execute_run` the Celery workers run.
Database faults are retried with exponential back-off; a run whose lease another
worker holds is tried again when that lease would lapse. A timer runs the relay
(:mod:`feasibility.service.relay`) every ``sweep_interval_s`` — at once when the
pool starts, so runs left by a process that was killed (queued, or claimed by the
dead process) are taken over straight away — and queues runs stored by other
processes (the command line).
"""

from __future__ import annotations

import itertools
import logging
import queue
import threading

from sqlalchemy.exc import SQLAlchemyError

from feasibility.service.dispatch import BULK_PRIORITY, SUBMISSION_PRIORITY
from feasibility.service.relay import relay
from feasibility.service.runs import LeaseHeld, execute_run
from feasibility.service.runtime import Runtime

__all__ = ["EmbeddedPool"]

log = logging.getLogger(__name__)


class EmbeddedPool:
    """A few daemon threads taking run ids from a priority queue; started on first use."""

    mode = "embedded"
    #: Its queue is this process's memory: a run is sent again whenever it is queued in the store but not here.
    durable = False

    def __init__(self, runtime: Runtime, workers: int = 2, sweep_interval_s: float = 30.0, max_retries: int = 5, retry_base_s: float = 0.5) -> None:
        self.runtime = runtime  # bound in each thread: threads start with an empty context
        self.workers = workers
        self.sweep_interval_s = sweep_interval_s
        self.max_retries = max_retries
        self.retry_base_s = retry_base_s
        self._queue: queue.PriorityQueue[tuple[int, int, int]] = queue.PriorityQueue()
        self._pending: set[int] = set()
        self._busy = 0
        self._retries: dict[int, int] = {}
        self._lock = threading.Lock()
        self._idle = threading.Condition(self._lock)
        self._order = itertools.count()
        self._stop = threading.Event()
        self._threads: list[threading.Thread] = []

    def enqueue(self, run_ids: list[int], *, bulk: bool = False) -> None:
        """Queue ``run_ids``; ids already waiting here are not queued twice."""
        self.start()
        priority = BULK_PRIORITY if bulk else SUBMISSION_PRIORITY
        with self._lock:
            for run_id in run_ids:
                if run_id not in self._pending:
                    self._pending.add(run_id)
                    self._queue.put((priority, next(self._order), run_id))

    def start(self) -> None:
        """Start the worker threads and the sweeper timer (once)."""
        with self._lock:
            if self._threads or self.workers <= 0:
                return
            for n in range(self.workers):
                self._threads.append(threading.Thread(target=self._work, name=f"feasibility-worker-{n}", daemon=True))
            if self.sweep_interval_s > 0:
                self._threads.append(threading.Thread(target=self._sweep_loop, name="feasibility-sweeper", daemon=True))
        for thread in self._threads:
            thread.start()

    def wait_idle(self, timeout: float = 30.0) -> bool:
        """Block until nothing is queued or running here; False on timeout (tests and the serve command use it)."""
        with self._idle:
            return self._idle.wait_for(lambda: not self._pending and self._busy == 0, timeout=timeout)

    def shutdown(self, timeout: float = 10.0) -> None:
        """Stop the threads after their current run."""
        self._stop.set()
        for _ in range(self.workers):
            self._queue.put((-1, -1, -1))
        for thread in self._threads:
            thread.join(timeout)

    def sweep(self) -> int:
        """One relay pass: take back runs of dead workers; queue runs that wait in the store but not here."""
        with self.runtime.bound():
            with self._lock:
                waiting = set(self._pending)
            return relay(self, self.runtime.settings, exclude=waiting).sent

    def _work(self) -> None:
        while not self._stop.is_set():
            priority, _, run_id = self._queue.get()
            if run_id < 0:
                return
            with self._lock:
                self._busy += 1
            retry = False
            try:
                with self.runtime.bound():
                    execute_run(run_id)
            except LeaseHeld as held:  # computed elsewhere: look again when its lease would lapse
                retry = True
                self._put_later(run_id, priority, held.retry_in)
            except SQLAlchemyError:
                retry = self._retry_later(run_id, priority)
            except Exception:  # keep the thread alive; the run stays queued or running for the relay
                log.exception("check run %s could not be computed", run_id)
            finally:
                with self._idle:
                    self._busy -= 1
                    if not retry:
                        self._pending.discard(run_id)
                        self._retries.pop(run_id, None)
                    self._idle.notify_all()

    def _retry_later(self, run_id: int, priority: int) -> bool:
        """Put ``run_id`` back after an exponentially growing delay; False when out of retries."""
        with self._lock:
            n = self._retries.get(run_id, 0) + 1
            self._retries[run_id] = n
        if n > self.max_retries:
            log.error("check run %s: database faults on %d attempts; left for the relay", run_id, n - 1)
            return False
        delay = self.retry_base_s * 2 ** (n - 1)
        log.warning("check run %s: database fault, retry %d in %.1f s", run_id, n, delay)
        self._put_later(run_id, priority, delay)
        return True

    def _put_later(self, run_id: int, priority: int, delay: float) -> None:
        timer = threading.Timer(delay, lambda: self._queue.put((priority, next(self._order), run_id)))
        timer.daemon = True
        timer.start()

    def _sweep_loop(self) -> None:
        wait = 0.0  # the first pass at once: take over what a killed predecessor left
        while not self._stop.wait(wait):
            wait = self.sweep_interval_s
            try:
                self.sweep()
            except Exception:
                log.exception("relaying check runs failed")

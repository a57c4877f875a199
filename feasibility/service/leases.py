"""Leases on check runs: a claim lasts ``LEASE_S`` seconds and a heartbeat renews it while the run computes (one for a batch).

A worker that dies stops renewing, so its claim lapses within one lease and the
run can be taken over then — not after the longest a check could ever take.
Every claim names its holder (``host:pid``); a holder on this host whose process
is gone (a killed worker child, a ``serve`` killed and started again) is known
dead at once, so its runs are taken over without waiting for the lease. The
heartbeat stops after ``RUN_TIMEOUT_S`` of computing, so a hung check loses its
lease too.
"""

from __future__ import annotations

import logging
import os
import socket
import threading
from collections.abc import Iterator, Mapping
from contextlib import contextmanager
from datetime import datetime, timedelta

from sqlalchemy import Table, tuple_, update
from sqlalchemy.exc import SQLAlchemyError

from feasibility.logs import run_context
from feasibility.service.runtime import Runtime, current_runtime, current_settings
from feasibility.store.db import session_scope
from feasibility.store.models import CheckRun, utcnow

__all__ = ["DEFAULT_LEASE", "Heartbeat", "active_here", "holder_is_gone", "lease_length", "owner_id", "working_on"]

log = logging.getLogger(__name__)

#: How long a claim lasts without renewal by default; the settings' ``lease_s`` decides.
DEFAULT_LEASE = timedelta(seconds=30)

_RUNS: Table = CheckRun.__table__  # type: ignore[assignment]

#: Runs this process is claiming or computing now (run id -> how many threads): a claim of ours on any other run is stale.
_active: dict[int, int] = {}
_active_lock = threading.Lock()


def owner_id() -> str:
    """This process, as written into the claims it holds (the pid is read each time: workers fork)."""
    return f"{socket.gethostname()[:80]}:{os.getpid()}"


def lease_length() -> timedelta:
    """How long a claim lasts without renewal: the current settings' ``lease_s``."""
    return timedelta(seconds=float(current_settings().lease_s))


def active_here(run_id: int) -> bool:
    with _active_lock:
        return run_id in _active


@contextmanager
def working_on(*run_ids: int) -> Iterator[None]:
    """Mark ``run_ids`` as being claimed or computed by this process, from before their claim until they are left.

    So another thread here (the relay, a second message) never takes a claim of ours
    for a stale one while it is being made or used.
    """
    with _active_lock:
        for run_id in run_ids:
            _active[run_id] = _active.get(run_id, 0) + 1
    try:
        yield
    finally:
        with _active_lock:
            for run_id in run_ids:
                if _active[run_id] <= 1:
                    del _active[run_id]
                else:
                    _active[run_id] -= 1


def holder_is_gone(owner: str | None, run_id: int, *, ours: int = 0) -> bool:
    """True when the claim's holder is a process of this host that no longer runs (or is us, not computing it).

    ``ours``: how many of this process's marks on the run (:func:`working_on`) are the caller's own.

    Only a holder on this host can be checked; elsewhere the lease has to lapse. A
    re-used pid only makes us wait for the lease; two hosts with the same name and
    separate pid spaces could make us take over a live claim, which costs a
    recomputation, never a second result (finishing needs the claim's attempt).
    """
    if not owner or ":" not in owner:
        return False
    host, _, pid_text = owner.rpartition(":")
    if host != socket.gethostname()[:80] or not pid_text.isdigit():
        return False
    pid = int(pid_text)
    if pid == os.getpid():
        with _active_lock:
            return _active.get(run_id, 0) <= ours
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return True
    except PermissionError:  # a live process of another user
        return False
    return _is_zombie(pid)


def _is_zombie(pid: int) -> bool:
    """A killed process its parent has not reaped yet is dead all the same."""
    try:
        with open(f"/proc/{pid}/stat", "rb") as handle:
            return handle.read().rsplit(b")", 1)[1].split()[0] == b"Z"
    except (OSError, IndexError):
        return False


class Heartbeat:
    """Renews the claims of a batch of runs every third of a lease, in one thread and one UPDATE, while they compute (a context manager).

    ``claims``: run id → our attempt. It stops renewing when one run has computed for
    longer than ``max_running`` (each run's time counts from :meth:`computing`), and
    notes the runs whose claim was taken over in ``lost`` (their results will then be
    dropped by the finish); the others are still renewed.
    """

    def __init__(self, claims: Mapping[int, int], lease: timedelta, max_running: timedelta) -> None:
        self.claims, self.lease, self.max_running = dict(claims), lease, max_running
        self.deadline = utcnow() + max_running
        self.lost: set[int] = set()
        self._stop = threading.Event()
        self._runtime: Runtime | None = current_runtime()  # the heartbeat's thread starts with an empty context
        self._thread = threading.Thread(target=self._run, name=f"lease-{min(self.claims, default=0)}", daemon=True)

    def __enter__(self) -> Heartbeat:
        self._thread.start()
        return self

    def computing(self) -> None:
        """The next run of the batch starts computing: it may take ``max_running`` from now (a hung one loses the leases)."""
        self.deadline = utcnow() + self.max_running

    def __exit__(self, *_: object) -> None:
        self._stop.set()
        self._thread.join(1.0)  # a renewal stuck on an unreachable store need not hold the runs up: it matches nothing later

    def _run(self) -> None:
        with run_context(min(self.claims, default=0)):  # the heartbeat's thread logs as the (first) run's too
            self._beat()

    def _beat(self) -> None:
        interval = max(self.lease.total_seconds() / 3, 0.05)
        while not self._stop.wait(interval):
            now = utcnow()
            if now > self.deadline:
                log.warning("check runs %s have computed longer than allowed; their leases are left to lapse", sorted(self.claims))
                return
            try:
                kept = self._renew(now + self.lease)
            except SQLAlchemyError as exc:  # the store restarting: try again at the next beat
                log.warning("check runs %s: leases not renewed (%s)", sorted(self.claims), exc.__class__.__name__)
                continue
            for run_id in set(self.claims) - kept:
                log.warning("check run %s: claim %s was taken over", run_id, self.claims.pop(run_id))
                self.lost.add(run_id)
            if not self.claims:
                return

    def _renew(self, until: datetime) -> set[int]:
        if self._runtime is None:
            return self._renew_here(until)
        with self._runtime.bound():
            return self._renew_here(until)

    def _renew_here(self, until: datetime) -> set[int]:
        """Extend every claim still ours; the run ids renewed."""
        with session_scope() as session:
            statement = (
                update(_RUNS)
                .where(tuple_(_RUNS.c.id, _RUNS.c.attempts).in_(list(self.claims.items())), _RUNS.c.state == "running")
                .values(lease_expires_at=until)
                .returning(_RUNS.c.id)
            )
            return set(session.execute(statement).scalars())

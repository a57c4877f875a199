"""The sign-in throttle: too many failed sign-ins for one account, or from one client address, wait a growing delay.

Every refused sign-in is stored as a :class:`~feasibility.store.models.SignInFailure`
row (the name tried and the client address), so the count holds across every
web process sharing the store, not per process. Once an account has
``per_account`` failures within the window (or an address ``per_address``), the
next attempt must wait ``first_delay`` after the latest failure, doubling with
each failure beyond the limit up to ``max_delay`` (OWASP Authentication Cheat
Sheet, "Login Throttling"; see docs/references.md). While it must wait, no
password is checked at all. A successful sign-in clears the account's failures;
the address's stay until they leave the window.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass
from datetime import datetime, timedelta
from typing import Any

from sqlalchemy import delete, func, select
from sqlalchemy.orm import InstrumentedAttribute, Session

from feasibility.store.models import SignInFailure, utcnow

__all__ = ["Limits", "clear_account", "delay_after", "record_failure", "seconds_to_wait"]


@dataclass(frozen=True)
class Limits:
    """How many failures are let through, over what window, and how long to wait after."""

    per_account: int = 5
    per_address: int = 20
    window: timedelta = timedelta(hours=1)
    first_delay: timedelta = timedelta(seconds=30)
    max_delay: timedelta = timedelta(minutes=15)

    @classmethod
    def from_config(cls, config: Mapping[str, Any]) -> Limits:
        """The limits set in the app's configuration (``SIGN_IN_*``; see ``create_app``)."""
        return cls(
            per_account=int(config.get("SIGN_IN_FAILURES_PER_ACCOUNT", cls.per_account)),
            per_address=int(config.get("SIGN_IN_FAILURES_PER_ADDRESS", cls.per_address)),
            window=timedelta(seconds=float(config.get("SIGN_IN_WINDOW_S", cls.window.total_seconds()))),
            first_delay=timedelta(seconds=float(config.get("SIGN_IN_FIRST_DELAY_S", cls.first_delay.total_seconds()))),
            max_delay=timedelta(seconds=float(config.get("SIGN_IN_MAX_DELAY_S", cls.max_delay.total_seconds()))),
        )


def delay_after(failures: int, limit: int, limits: Limits) -> timedelta:
    """The wait after the latest of ``failures`` failures: none below ``limit``, then first_delay, doubling, capped."""
    if limit <= 0 or failures < limit:
        return timedelta(0)
    return min(limits.first_delay * (2 ** min(failures - limit, 32)), limits.max_delay)


def seconds_to_wait(db: Session, account: str, address: str, limits: Limits, *, now: datetime | None = None) -> int:
    """Whole seconds before this account may try again from this address (0: it may try now)."""
    now = now or utcnow()
    wait = timedelta(0)
    for column, key, limit in ((SignInFailure.account, account, limits.per_account), (SignInFailure.address, address, limits.per_address)):
        count, latest = _failures(db, column, key, now - limits.window)
        if count and latest is not None:
            wait = max(wait, latest + delay_after(count, limit, limits) - now)
    return math.ceil(wait.total_seconds()) if wait > timedelta(0) else 0


def record_failure(db: Session, account: str, address: str, limits: Limits, *, now: datetime | None = None) -> None:
    """Store one failed sign-in; forget failures that have left the window."""
    now = now or utcnow()
    db.execute(delete(SignInFailure).where(SignInFailure.failed_at < now - limits.window).execution_options(synchronize_session=False))
    db.add(SignInFailure(account=account[:200], address=address[:64], failed_at=now))
    db.flush()


def clear_account(db: Session, account: str) -> None:
    """Forget the account's failures (after it signed in)."""
    db.execute(delete(SignInFailure).where(SignInFailure.account == account[:200]).execution_options(synchronize_session=False))


def _failures(db: Session, column: InstrumentedAttribute[str], key: str, since: datetime) -> tuple[int, datetime | None]:
    count, latest = db.execute(select(func.count(), func.max(SignInFailure.failed_at)).where(column == key[:200], SignInFailure.failed_at > since)).one()
    # max() of a UTCDateTime column has the column's type, so it comes back timezone-aware on every store.
    return int(count or 0), latest

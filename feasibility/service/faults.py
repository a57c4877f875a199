"""Telling a database fault that passes from one that will not change: one rule for the whole service.

A fault that passes (the server restarting, a dropped connection, a lock or a
deadlock, SQLite busy) is retried: the run is given back and computed again
soon. A fault that will not change however often it is retried (a value the
column cannot hold, a broken constraint, a result that cannot be serialised)
makes the run ``failed`` with the reason, so it is never re-queued forever.
"""

from __future__ import annotations

from sqlalchemy.exc import DataError, DBAPIError, IntegrityError, InterfaceError, OperationalError

__all__ = ["is_lasting", "is_passing"]

#: SQLSTATE classes that say the statement itself is wrong for these values (PostgreSQL, Appendix A):
#: 22 data exception, 23 integrity constraint violation, 54 program limit exceeded.
_LASTING_SQLSTATE_CLASSES = ("22", "23", "54")


def is_passing(exc: BaseException) -> bool:
    """A database fault worth retrying: the server or the connection, not the data."""
    if isinstance(exc, DBAPIError) and exc.connection_invalidated:
        return True
    if isinstance(exc, (OperationalError, InterfaceError)):
        return not _lasting_sqlstate(exc)
    return False


def is_lasting(exc: BaseException) -> bool:
    """A fault that retrying will not cure: bad data for the store, or a result that cannot be written."""
    if is_passing(exc):
        return False
    if isinstance(exc, (DataError, IntegrityError)) or _lasting_sqlstate(exc):
        return True
    # Serialising the result (pydantic, json) or binding its values: the same result fails the same way.
    return isinstance(exc, (ValueError, TypeError, OverflowError, UnicodeError))


def _lasting_sqlstate(exc: BaseException) -> bool:
    state = getattr(getattr(exc, "orig", None), "sqlstate", None)
    return isinstance(state, str) and state[:2] in _LASTING_SQLSTATE_CLASSES

"""Server-side sessions of the dashboard: the browser's cookie carries only a random session id.

The id (32 random bytes, URL-safe text) sits in Flask's signed session cookie;
the store keeps only its SHA-256 in a :class:`~feasibility.store.models.PageSession`
row with the user, an expiry time and, once ended, a revocation time. Signing out
revokes the row and a password change revokes every row of the user, so a cookie
copied before either no longer signs anyone in. The row also keeps a digest of
the password hash at sign-in, so a password changed by any other path ends the
session as well.
"""

from __future__ import annotations

import hashlib
import secrets
from datetime import datetime, timedelta
from typing import Any, cast

from sqlalchemy import CursorResult, delete, or_, select, update
from sqlalchemy.orm import Session

from feasibility.service.accounts import revoke_user_sessions
from feasibility.store.models import PageSession, User, utcnow

__all__ = [
    "COOKIE_KEY",
    "end_session",
    "hash_session_id",
    "new_session_id",
    "password_stamp",
    "purge_old_sessions",
    "revoke_user_sessions",
    "start_session",
    "user_for_session",
]

#: The one key of Flask's session cookie: the random session id (signed in or not).
COOKIE_KEY = "sid"


def new_session_id() -> str:
    """A fresh random session id (256 bits), for the cookie."""
    return secrets.token_urlsafe(32)


def hash_session_id(raw: str) -> str:
    """The stored form of a session id: its SHA-256, so a copy of the store opens no session."""
    return hashlib.sha256(raw.encode("utf-8")).hexdigest()


def password_stamp(password_hash: str | None) -> str:
    """A digest of the user's stored password hash; a session ends when it no longer matches."""
    return hashlib.sha256((password_hash or "").encode("utf-8")).hexdigest()


def start_session(db: Session, user: User, raw_id: str, *, lifetime: timedelta, address: str | None = None) -> PageSession:
    """Store a new session for ``user`` under ``raw_id``, good for ``lifetime`` unless ended before."""
    now = utcnow()
    row = PageSession(
        id_hash=hash_session_id(raw_id),
        user_id=user.id,
        password_stamp=password_stamp(user.password_hash),
        address=(address or "")[:64] or None,
        created_at=now,
        expires_at=now + lifetime,
    )
    db.add(row)
    db.flush()
    return row


def user_for_session(db: Session, raw_id: str, *, now: datetime | None = None) -> User | None:
    """The user of the live session ``raw_id`` (not revoked, not expired, password unchanged), or None."""
    now = now or utcnow()
    found = db.execute(
        select(PageSession, User)
        .join(User, User.id == PageSession.user_id)
        .where(PageSession.id_hash == hash_session_id(raw_id), PageSession.revoked_at.is_(None), PageSession.expires_at > now)
    ).first()
    if found is None:
        return None
    row, user = found
    if not user.password_hash or not secrets.compare_digest(row.password_stamp, password_stamp(user.password_hash)):
        return None
    return user


def end_session(db: Session, raw_id: str) -> bool:
    """Revoke the session ``raw_id`` (signing out); whether a live one was found."""
    result = cast(
        CursorResult[Any],
        db.execute(
            update(PageSession)
            .where(PageSession.id_hash == hash_session_id(raw_id), PageSession.revoked_at.is_(None))
            .values(revoked_at=utcnow())
            .execution_options(synchronize_session=False)
        ),
    )
    return bool(result.rowcount)


def purge_old_sessions(db: Session, *, now: datetime | None = None, keep: timedelta = timedelta(days=1)) -> None:
    """Delete sessions expired or revoked more than ``keep`` ago (they can never sign anyone in again)."""
    cutoff = (now or utcnow()) - keep
    db.execute(delete(PageSession).where(or_(PageSession.expires_at < cutoff, PageSession.revoked_at < cutoff)).execution_options(synchronize_session=False))

"""Accounts: users with roles, their passwords, and API tokens stored only as hashes.

The one place where users are made, passwords set and checked, and tokens made,
revoked and looked up, so the web app and the commands (``user create``,
``token create``...) follow the same rules without a command building the web app.
A token is a high-entropy random string shown once; the store keeps its SHA-256,
which is enough for a secret that is not guessable (unlike a password, it needs
no slow hash). Tokens are revoked, never deleted (:func:`revoke_tokens`); a
password change (:func:`set_password`) ends the user's dashboard sessions.
"""

from __future__ import annotations

import hashlib
import secrets
from datetime import datetime
from typing import Any, cast

from sqlalchemy import CursorResult, bindparam, select, update
from sqlalchemy.orm import Session
from werkzeug.security import check_password_hash, generate_password_hash

from feasibility.service.access import ROLES
from feasibility.store.models import ApiToken, PageSession, User, utcnow

__all__ = [
    "MAX_PASSWORD_LENGTH",
    "MIN_PASSWORD_LENGTH",
    "check_password",
    "create_token",
    "create_user",
    "hash_password",
    "hash_token",
    "password_problem",
    "revoke_tokens",
    "revoke_user_sessions",
    "set_password",
    "user_for_token",
]

#: Shortest password accepted (NIST SP 800-63B, 5.1.1.2: at least 8 characters; see docs/references.md).
MIN_PASSWORD_LENGTH = 8
#: Longest password accepted: enough for any passphrase, short enough that hashing it costs nothing extra.
MAX_PASSWORD_LENGTH = 1000


def create_user(session: Session, name: str, role: str, *, password: str | None = None, email: str | None = None) -> User:
    """Store a new user; the password, when given, is kept as a werkzeug salted hash."""
    if role not in ROLES:
        raise ValueError(f"unknown role {role!r} (known: {', '.join(ROLES)})")
    if session.scalar(select(User).where(User.name == name)) is not None:
        raise ValueError(f"a user named {name!r} exists already")
    if password is not None and (problem := password_problem(password)) is not None:
        raise ValueError(f"the password {problem}")
    user = User(name=name, role=role, email=email, password_hash=hash_password(password) if password else None)
    session.add(user)
    session.flush()
    return user


def hash_password(password: str) -> str:
    """A salted hash of ``password`` to store in ``User.password_hash`` (werkzeug's default method)."""
    return generate_password_hash(password)


def password_problem(password: str) -> str | None:
    """Why ``password`` cannot be used (None when it can): the one rule for every way a password is set."""
    if len(password) < MIN_PASSWORD_LENGTH:
        return f"must be at least {MIN_PASSWORD_LENGTH} characters long"
    if len(password) > MAX_PASSWORD_LENGTH:
        return f"must be at most {MAX_PASSWORD_LENGTH} characters long"
    if password.strip() == "":
        return "must not be only spaces"
    return None


def set_password(session: Session, user: User, password: str) -> int:
    """Give ``user`` a new password and end every one of their dashboard sessions; how many were ended.

    Raises ValueError naming the problem when the password is not acceptable.
    """
    if (problem := password_problem(password)) is not None:
        raise ValueError(f"the password {problem}")
    user.password_hash = hash_password(password)
    session.flush()
    return revoke_user_sessions(session, user.id)


def revoke_tokens(session: Session, *, token_id: int | None = None, user: User | None = None) -> list[ApiToken]:
    """Revoke one token (by id) or every token of ``user``; the tokens revoked now (already revoked ones are left out)."""
    if (token_id is None) == (user is None):
        raise ValueError("give a token id or a user, not both")
    query = select(ApiToken).where(ApiToken.revoked_at.is_(None)).order_by(ApiToken.id)
    if token_id is not None:
        query = query.where(ApiToken.id == token_id)
    elif user is not None:
        query = query.where(ApiToken.user_id == user.id)
    tokens = list(session.scalars(query))
    now: datetime = utcnow()
    for token in tokens:
        token.revoked_at = now
    session.flush()
    return tokens


def check_password(user: User, password: str) -> bool:
    """Whether ``password`` is the user's (False for users without a password)."""
    if not user.password_hash:
        return False
    return check_password_hash(user.password_hash, password)


def create_token(session: Session, user: User, label: str | None = None) -> str:
    """A new API token for ``user``: returned once, stored only as its SHA-256."""
    raw = "fz_" + secrets.token_urlsafe(32)
    session.add(ApiToken(user_id=user.id, token_hash=hash_token(raw), label=label))
    session.flush()
    return raw


def hash_token(raw: str) -> str:
    """The stored form of a token."""
    return hashlib.sha256(raw.encode("utf-8")).hexdigest()


def user_for_token(session: Session, raw: str) -> User | None:
    """The user holding the (not revoked) token ``raw``, or None (asked of every API request: the query is built once)."""
    return session.scalar(_USER_FOR_TOKEN, {"token_hash": hash_token(raw)})


_USER_FOR_TOKEN = select(User).join(ApiToken, ApiToken.user_id == User.id).where(ApiToken.token_hash == bindparam("token_hash"), ApiToken.revoked_at.is_(None))


def revoke_user_sessions(db: Session, user_id: int) -> int:
    """Revoke every live dashboard session of the user (after a password change); how many were live."""
    result = cast(
        CursorResult[Any],
        db.execute(
            update(PageSession)
            .where(PageSession.user_id == user_id, PageSession.revoked_at.is_(None), PageSession.expires_at > utcnow())
            .values(revoked_at=utcnow())
            .execution_options(synchronize_session=False)
        ),
    )
    return int(result.rowcount or 0)

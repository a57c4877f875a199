"""API access: users with roles, and bearer tokens stored only as hashes.

What each role may do is :mod:`feasibility.service.access`'s table; views say
which of its actions they are with :func:`require`. A token is a high-entropy random string shown once; the store
keeps its SHA-256, which is enough for a secret that is not guessable (unlike a
password, it needs no slow hash). Tokens are revoked, never deleted
(:func:`revoke_tokens`); a password change (:func:`set_password`) ends the
user's dashboard sessions.
"""

from __future__ import annotations

import hashlib
import secrets
from collections.abc import Callable
from datetime import datetime
from functools import wraps
from typing import Any, TypeVar

from flask import abort, g, request, session
from sqlalchemy import select
from sqlalchemy.orm import Session
from werkzeug.security import check_password_hash, generate_password_hash

from feasibility.service import access
from feasibility.store.db import session_scope
from feasibility.store.models import ApiToken, User, utcnow
from feasibility.web.page_sessions import COOKIE_KEY, revoke_user_sessions

__all__ = [
    "authenticate",
    "check_password",
    "create_token",
    "create_user",
    "current_user",
    "hash_password",
    "hash_token",
    "password_problem",
    "require",
    "revoke_tokens",
    "set_password",
    "user_for_token",
]

#: Shortest password accepted (NIST SP 800-63B, 5.1.1.2: at least 8 characters; see docs/references.md).
MIN_PASSWORD_LENGTH = 8
#: Longest password accepted: enough for any passphrase, short enough that hashing it costs nothing extra.
MAX_PASSWORD_LENGTH = 1000

F = TypeVar("F", bound=Callable[..., Any])


def create_user(session: Session, name: str, role: str, *, password: str | None = None, email: str | None = None) -> User:
    """Store a new user; the password, when given, is kept as a werkzeug salted hash."""
    if role not in access.ROLES:
        raise ValueError(f"unknown role {role!r} (known: {', '.join(access.ROLES)})")
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
    """The user holding the (not revoked) token ``raw``, or None."""
    query = select(User).join(ApiToken, ApiToken.user_id == User.id).where(
        ApiToken.token_hash == hash_token(raw), ApiToken.revoked_at.is_(None)
    )
    return session.scalar(query)


def authenticate() -> User | None:
    """The user of this request: a bearer token, or (for reads only) a signed-in dashboard session."""
    if "api_user" in g:
        return g.api_user
    user: User | None = None
    header = request.headers.get("Authorization", "")
    scheme, _, credentials = header.partition(" ")
    if scheme.lower() == "bearer" and credentials.strip():
        with session_scope(read_only=True) as db:
            user = user_for_token(db, credentials.strip())
    elif not header and request.method in ("GET", "HEAD") and session.get(COOKIE_KEY) is not None:
        # The pages' own test: a live server-side session (ended by signing out or a password change).
        from feasibility.web.auth_pages import current_user as signed_in_user

        user = signed_in_user()
    g.api_user = user
    return user


def current_user() -> User | None:
    """The authenticated user of this request (after :func:`require`)."""
    return g.get("api_user")


def require(action: str | None = None) -> Callable[[F], F]:
    """Decorate a view: 401 without valid credentials, 403 when the access table refuses ``action`` (any user if None).

    The action is kept on the view (``access_action``) so the tests can walk every endpoint against the table.
    """

    def decorate(view: F) -> F:
        @wraps(view)
        def wrapped(*args: Any, **kwargs: Any) -> Any:
            user = authenticate()
            if user is None:
                abort(401, description="send a valid API token: 'Authorization: Bearer <token>'")
            if action is not None and not access.may(user, action):
                abort(403, description=access.refusal(user, action))
            return view(*args, **kwargs)

        wrapped.access_action = action  # type: ignore[attr-defined]
        return wrapped  # type: ignore[return-value]

    return decorate

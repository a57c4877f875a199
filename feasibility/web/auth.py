"""API access: who a request is (bearer token or dashboard session) and whether its role may do it.

The accounts themselves (users, passwords, tokens) are :mod:`feasibility.service.accounts`;
their functions are named here too for the pages and the API.

What each role may do is :mod:`feasibility.service.access`'s table; views say
which of its actions they are with :func:`require`. A token is a high-entropy random string shown once; the store
keeps its SHA-256, which is enough for a secret that is not guessable (unlike a
password, it needs no slow hash). Tokens are revoked, never deleted
(:func:`revoke_tokens`); a password change (:func:`set_password`) ends the
user's dashboard sessions.
"""

from __future__ import annotations

from collections.abc import Callable
from functools import wraps
from typing import Any, TypeVar

from flask import abort, g, request, session

from feasibility.service import access
from feasibility.service.accounts import (
    check_password,
    create_token,
    create_user,
    hash_password,
    hash_token,
    password_problem,
    revoke_tokens,
    set_password,
    user_for_token,
)
from feasibility.store.db import session_scope
from feasibility.store.models import User
from feasibility.web.page_sessions import COOKIE_KEY

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

F = TypeVar("F", bound=Callable[..., Any])


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

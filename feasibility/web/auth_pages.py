"""Signing in to the dashboard's pages: sessions, roles and protection of forms against CSRF.

Passwords are checked with :mod:`werkzeug.security` (salted scrypt hashes made by
``generate_password_hash``). The session is Flask's signed cookie, HTTP-only,
``SameSite=Lax``, and ``Secure`` when ``SESSION_COOKIE_SECURE`` is set in the
environment (or the app's configuration). It holds the user's id and a digest of
their password hash, so changing a password ends every other session.

CSRF: our own synchroniser token (OWASP CSRF Prevention Cheat Sheet). A random
token is kept in the session; every form posts it back in ``csrf_token`` (or a
script sends it in the ``X-CSRF-Token`` header) and the pages' blueprints reject
an unsafe request whose token is missing or different, compared in constant
time. The JSON API (bearer tokens, no cookies) is not affected.
"""

from __future__ import annotations

import functools
import hashlib
import hmac
import os
import secrets
from collections.abc import Callable
from typing import Any, TypeVar
from urllib.parse import urlsplit

from flask import Blueprint, Flask, Response, abort, current_app, flash, g, redirect, render_template, request, session, url_for
from sqlalchemy import select
from werkzeug.security import check_password_hash, generate_password_hash

from feasibility.store.db import session_factory
from feasibility.store.models import User

__all__ = [
    "PAGE_ROLES",
    "bp",
    "check_csrf",
    "csrf_token",
    "current_user",
    "db",
    "init_app",
    "security_headers",
    "sign_in_required",
]

bp = Blueprint("auth", __name__, template_folder="templates")

#: Roles that may sign in to the pages; portals use API tokens only.
PAGE_ROLES = ("reviewer", "proposer", "admin")
#: Roles that see every proposal; proposers see their own only.
ALL_PROPOSALS_ROLES = ("reviewer", "admin")

_UNSAFE_METHODS = {"POST", "PUT", "PATCH", "DELETE"}
_CSRF_KEY = "csrf"

View = TypeVar("View", bound=Callable[..., Any])


def init_app(app: Flask) -> None:
    """Set the session cookie's attributes and register the sign-in pages on ``app``."""
    if app.config.get("SESSION_COOKIE_SAMESITE") is None:
        app.config["SESSION_COOKIE_SAMESITE"] = "Lax"
    app.config["SESSION_COOKIE_HTTPONLY"] = True
    secure = os.environ.get("SESSION_COOKIE_SECURE")
    if secure is not None:
        app.config["SESSION_COOKIE_SECURE"] = secure.strip().lower() in {"1", "true", "yes", "on"}
    app.jinja_env.globals["csrf_token"] = csrf_token
    app.jinja_env.globals["current_user"] = current_user
    app.teardown_appcontext(_close_db)
    app.register_blueprint(bp)


def security_headers(response: Response) -> Response:
    """Headers for every page: only our own scripts, styles and images; no framing; no type sniffing."""
    response.headers.setdefault(
        "Content-Security-Policy",
        "default-src 'self'; img-src 'self' data:; style-src 'self'; script-src 'self'; "
        "object-src 'none'; base-uri 'none'; form-action 'self'; frame-ancestors 'none'",
    )
    response.headers.setdefault("X-Content-Type-Options", "nosniff")
    response.headers.setdefault("Referrer-Policy", "same-origin")
    response.headers.setdefault("X-Frame-Options", "DENY")
    if request.endpoint != "dashboard.static":
        response.headers.setdefault("Cache-Control", "no-store")  # pages hold who sees what: keep them out of shared caches
    return response


def db() -> Any:
    """The request's database session (opened on first use, closed when the request ends)."""
    if "dashboard_db" not in g:
        g.dashboard_db = session_factory(read_only=True)  # pages only read: never hold SQLite's write lock
    return g.dashboard_db


def current_user() -> User | None:
    """The signed-in user of this request, or None."""
    if "dashboard_user" in g:
        return g.dashboard_user
    user = None
    user_id = session.get("user_id")
    if isinstance(user_id, int):
        candidate = db().get(User, user_id)
        if (
            candidate is not None
            and candidate.role in PAGE_ROLES
            and candidate.password_hash
            and hmac.compare_digest(str(session.get("pw", "")), _password_digest(candidate.password_hash))
        ):
            user = candidate
    g.dashboard_user = user
    return user


def sees_all(user: User) -> bool:
    """Whether ``user`` sees every proposal (reviewers and admins) rather than their own."""
    return user.role in ALL_PROPOSALS_ROLES


def sign_in_required(*roles: str) -> Callable[[View], View]:
    """Send anyone not signed in to the sign-in page; answer 403 to a role not in ``roles`` (any page role when empty)."""

    def decorate(view: View) -> View:
        @functools.wraps(view)
        def wrapped(*args: Any, **kwargs: Any) -> Any:
            user = current_user()
            if user is None:
                if request.path.endswith(".json") or request.accept_mimetypes.best == "application/json":
                    abort(401)
                return redirect(url_for("auth.sign_in", next=request.full_path if request.query_string else request.path))
            if roles and user.role not in roles:
                abort(403)
            return view(*args, **kwargs)

        return wrapped  # type: ignore[return-value]

    return decorate


def csrf_token() -> str:
    """This session's CSRF token (made on first use)."""
    token = session.get(_CSRF_KEY)
    if not isinstance(token, str) or len(token) < 32:
        token = secrets.token_urlsafe(32)
        session[_CSRF_KEY] = token
    return token


def check_csrf() -> None:
    """Reject an unsafe request whose CSRF token is missing or wrong (400). Register with ``before_request``."""
    if request.method not in _UNSAFE_METHODS or current_app.config.get("DASHBOARD_CSRF_DISABLED"):
        return
    expected = session.get(_CSRF_KEY)
    sent = request.form.get("csrf_token") or request.headers.get("X-CSRF-Token") or ""
    if not isinstance(expected, str) or not expected or not hmac.compare_digest(sent.encode(), expected.encode()):
        abort(400, description="The form had expired or did not come from this site. Reload the page and try again.")


bp.before_request(check_csrf)
bp.after_request(security_headers)


@bp.route("/sign-in", methods=["GET", "POST"])
def sign_in() -> Any:
    """The sign-in form; on success, back to where the user was going."""
    target = _safe_next(request.values.get("next"))
    if request.method == "GET":
        return render_template("dashboard/sign_in.html", next=target, name="")
    name = request.form.get("name", "").strip()
    password = request.form.get("password", "")
    user = db().scalars(select(User).where(User.name == name)).first() if name else None
    stored = user.password_hash if user is not None and user.password_hash else _dummy_hash()
    valid = check_password_hash(stored, password) and user is not None and user.password_hash is not None
    if not valid or user is None or user.role not in PAGE_ROLES:
        return render_template("dashboard/sign_in.html", next=target, name=name, failed=True), 401
    session.clear()  # a fresh session (and CSRF token) for the signed-in user
    session["user_id"] = user.id
    session["pw"] = _password_digest(user.password_hash or "")
    g.pop("dashboard_user", None)
    return redirect(target or url_for("dashboard.home"))


@bp.post("/sign-out")
def sign_out() -> Any:
    """End the session."""
    session.clear()
    flash("You are signed out.")
    return redirect(url_for("auth.sign_in"))


@functools.cache
def _dummy_hash() -> str:
    """A hash to check against when the user name is unknown, so the answer takes as long either way."""
    return generate_password_hash(secrets.token_hex(16))


def _password_digest(password_hash: str) -> str:
    return hashlib.sha256(password_hash.encode()).hexdigest()[:24]


def _safe_next(target: str | None) -> str | None:
    """Only a path on this site (never another host, nor ``//host``) may follow a sign-in."""
    if not target:
        return None
    parts = urlsplit(target)
    if parts.scheme or parts.netloc or not target.startswith("/") or target.startswith("//") or "\\" in target:
        return None
    return target


def _close_db(exc: BaseException | None) -> None:
    session_ = g.pop("dashboard_db", None)
    if session_ is not None:
        session_.close()

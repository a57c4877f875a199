"""Signing in to the dashboard's pages: server-side sessions, the sign-in throttle, roles.

Passwords are checked with :mod:`werkzeug.security` (salted scrypt hashes made by
``generate_password_hash``). The session cookie is Flask's signed cookie, but it
carries only a random session id (:mod:`feasibility.web.page_sessions`): who is
signed in is kept in the store, so signing out or a password change ends the
session everywhere, including copies of the cookie. The cookie is HTTP-only,
``SameSite=Lax`` and ``Secure`` (see ``create_app`` for the settings). Failed
sign-ins are throttled per account and per client address
(:mod:`feasibility.web.sign_in_limits`).

CSRF: every form is checked app-wide by :mod:`feasibility.web.protection`.
"""

from __future__ import annotations

import functools
import secrets
from collections.abc import Callable
from datetime import timedelta
from typing import Any, TypeVar
from urllib.parse import urlsplit

from flask import Blueprint, Flask, Response, abort, current_app, flash, g, redirect, render_template, request, session, url_for
from sqlalchemy import select
from werkzeug.security import check_password_hash, generate_password_hash

from feasibility.service import access
from feasibility.store.db import session_factory, session_scope
from feasibility.store.models import User
from feasibility.web import page_sessions, sign_in_limits

__all__ = [
    "bp",
    "SESSION_ID_KEY",
    "current_user",
    "db",
    "init_app",
    "role_refusal",
    "security_headers",
    "sign_in_required",
]

bp = Blueprint("auth", __name__, template_folder="templates")

SESSION_ID_KEY = page_sessions.COOKIE_KEY

View = TypeVar("View", bound=Callable[..., Any])


def init_app(app: Flask) -> None:
    """Register the sign-in pages and the templates' helpers on ``app`` (the cookie's attributes are set by ``create_app``)."""
    app.jinja_env.globals["current_user"] = current_user
    app.jinja_env.globals["may"] = lambda action: access.may(current_user(), action)  # the access table, for the templates
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
    """The signed-in user of this request (a live server-side session of a page role), or None."""
    if "dashboard_user" in g:
        return g.dashboard_user
    user = None
    raw_id = session.get(SESSION_ID_KEY)
    if isinstance(raw_id, str) and raw_id:
        candidate = page_sessions.user_for_session(db(), raw_id)
        if candidate is not None and access.may(candidate, access.USE_PAGES):
            user = candidate
    g.dashboard_user = user
    return user


def sign_in_required(action: str | None = None) -> Callable[[View], View]:
    """Send anyone not signed in to the sign-in page; answer 403 when the access table refuses ``action`` (None: any page role).

    The action is kept on the view (``access_action``) so the tests can walk every page against the table.
    """

    def decorate(view: View) -> View:
        @functools.wraps(view)
        def wrapped(*args: Any, **kwargs: Any) -> Any:
            user = current_user()
            if user is None:
                if request.path.endswith(".json") or request.accept_mimetypes.best == "application/json":
                    abort(401)
                return redirect(url_for("auth.sign_in", next=request.full_path if request.query_string else request.path))
            if action is not None and not access.may(user, action):
                abort(403, description=role_refusal(user, action))
            return view(*args, **kwargs)

        wrapped.access_action = action  # type: ignore[attr-defined]
        return wrapped  # type: ignore[return-value]

    return decorate


def role_refusal(user: User, action: str) -> str:
    """Why a page is refused to ``user``: the roles it needs, and whom to ask for one (the service's admins by name)."""
    needed = access.roles_text(action)
    granters = sorted(access.roles_for(access.MANAGE_ACCESS))
    admins = list(db().scalars(select(User.name).where(User.role.in_(granters), User.name != user.name).order_by(User.name).limit(3)))
    who = f"an administrator of this service ({', '.join(admins)})" if admins else "the staff who run this service"
    return f"This page is for {needed}; you are signed in as {user.name}, a {user.role}. To use it, ask {who} to give you that role or an account that has it."


bp.after_request(security_headers)


@bp.route("/sign-in", methods=["GET", "POST"])
def sign_in() -> Any:
    """The sign-in form; on success, back to where the user was going. Throttled per account and per address."""
    target = _safe_next(request.values.get("next"))
    if request.method == "GET":
        return render_template("dashboard/sign_in.html", next=target, name="")
    name = request.form.get("name", "").strip()
    password = request.form.get("password", "")
    address = request.remote_addr or "unknown"
    limits = sign_in_limits.Limits.from_config(current_app.config)
    wait = sign_in_limits.seconds_to_wait(db(), name, address, limits)
    if wait:
        page = render_template("dashboard/sign_in.html", next=target, name=name, wait_s=wait)
        return page, 429, {"Retry-After": str(wait)}  # RFC 6585 section 4
    user = db().scalars(select(User).where(User.name == name)).first() if name else None
    stored = user.password_hash if user is not None and user.password_hash else _dummy_hash()
    valid = check_password_hash(stored, password) and user is not None and user.password_hash is not None
    if not valid or user is None or not access.may(user, access.USE_PAGES):
        with session_scope() as writer:
            sign_in_limits.record_failure(writer, name, address, limits)
        return render_template("dashboard/sign_in.html", next=target, name=name, failed=True), 401
    raw_id = page_sessions.new_session_id()  # a new id on every sign-in: a planted id is never signed in
    with session_scope() as writer:
        sign_in_limits.clear_account(writer, name)
        page_sessions.purge_old_sessions(writer)
        lifetime = timedelta(hours=float(current_app.config.get("SESSION_LIFETIME_H", 12)))
        page_sessions.start_session(writer, user, raw_id, lifetime=lifetime, address=address)
    session.clear()
    session[SESSION_ID_KEY] = raw_id
    g.pop("dashboard_user", None)
    return redirect(target or url_for("dashboard.home"))


@bp.post("/sign-out")
def sign_out() -> Any:
    """End the session: revoked in the store, so a copy of the cookie no longer works either."""
    raw_id = session.get(SESSION_ID_KEY)
    if isinstance(raw_id, str) and raw_id:
        with session_scope() as writer:
            page_sessions.end_session(writer, raw_id)
    session.clear()
    g.pop("dashboard_user", None)
    flash("You are signed out.")
    return redirect(url_for("auth.sign_in"))


@functools.cache
def _dummy_hash() -> str:
    """A hash to check against when the user name is unknown, so the answer takes as long either way."""
    return generate_password_hash(secrets.token_hex(16))


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

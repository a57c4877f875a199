"""Protection of the whole app in one place: CSRF on every form, and rate limits answered with 429 and Retry-After.

CSRF: Flask-WTF's ``CSRFProtect`` checks every unsafe request (POST, PUT, PATCH,
DELETE) of every blueprint: a synchroniser token kept in the signed session cookie
(OWASP CSRF Prevention Cheat Sheet), posted back in ``csrf_token`` or sent in the
``X-CSRF-Token`` header, and over https a same-origin Referer. A refused request is
a 400 naming the reason. Exempt, by name in :data:`TOKEN_API_BLUEPRINTS`: the JSON
API under /api/v1, whose unsafe requests are authenticated by bearer tokens alone
(:func:`feasibility.web.auth.authenticate` believes a session cookie for reads only),
so a forged cross-site request carries no credentials there.

Rate limits (Flask-Limiter, counted in Redis when ``RATELIMIT_STORAGE_URI`` or a
``redis://`` ``BROKER_URL`` is configured, so they hold across web processes; else in
this process's memory): sign-in attempts per client address and per account name,
and submissions per API token (one count shared by single and bulk submissions).
The limits are settings (``RATE_LIMIT_*``, see ``create_app``), read at each request. A request
over a limit gets 429 Too Many Requests (RFC 6585 section 4) with Retry-After in
seconds (RFC 9110 section 10.2.3) and a JSON body under /api/ or a page elsewhere,
each naming the limit. The growing wait after failed sign-ins is kept apart, in
:mod:`feasibility.web.sign_in_limits`: it counts failures only, in the store, and
doubles the wait with each one, which a request-rate limiter does not express.
"""

from __future__ import annotations

import time
from typing import Any

from flask import Flask, current_app, render_template, request
from flask_limiter import Limiter
from flask_limiter.errors import RateLimitExceeded
from flask_limiter.util import get_remote_address
from flask_wtf.csrf import CSRFError, CSRFProtect

from feasibility.web.auth import hash_token

__all__ = ["TOKEN_API_BLUEPRINTS", "init_app", "limiter_of"]

#: The blueprints of the token API, exempt from CSRF (bearer tokens, never cookies, for unsafe requests).
TOKEN_API_BLUEPRINTS = ("api", "admin_api", "access_api", "schemas_api", "review_api", "simulations_api")

_CSRF_EXTENSION = "feasibility.csrf"
_LIMITER_EXTENSION = "feasibility.limiter"

#: Endpoint -> its limits: (the setting holding the limit, what a request is counted by), applied in init_app.
_LIMITED: dict[str, list[tuple[str, str]]] = {
    "auth.sign_in": [("RATE_LIMIT_SIGN_IN_PER_ADDRESS", "address"), ("RATE_LIMIT_SIGN_IN_PER_ACCOUNT", "account")],
    "api.submit_one": [("RATE_LIMIT_SUBMISSIONS_PER_TOKEN", "token")],
    "api.submit_many": [("RATE_LIMIT_SUBMISSIONS_PER_TOKEN", "token")],
}

_WHAT = {
    "address": "sign-in attempts from this address",
    "account": "sign-in attempts for this account",
    "token": "submissions with this API token",
}


def init_app(app: Flask) -> None:
    """Put CSRF checks on every form and the rate limits on their endpoints (after the blueprints are registered)."""
    # A form stays good while its page session lives (a reviewer may write a note for a long time).
    app.config.setdefault("WTF_CSRF_TIME_LIMIT", int(float(app.config.get("SESSION_LIFETIME_H", 12)) * 3600))
    app.config["WTF_CSRF_CHECK_DEFAULT"] = False  # checked by _check_form below, which names the reason plainly
    csrf = CSRFProtect(app)
    for name in TOKEN_API_BLUEPRINTS:
        if name in app.blueprints:
            csrf.exempt(app.blueprints[name])
    app.extensions[_CSRF_EXTENSION] = csrf
    app.before_request(_check_form)

    if not app.config.get("RATELIMIT_STORAGE_URI"):  # the setting ratelimit_storage_uri, else the broker or memory
        app.config["RATELIMIT_STORAGE_URI"] = _storage_uri(app.config)
    app.config.setdefault("RATELIMIT_KEY_PREFIX", str(app.config.get("QUEUE_PREFIX") or "feasibility"))
    # Redis away (it is also the broker, whose absence submissions survive): count in this process's memory meanwhile.
    app.config.setdefault("RATELIMIT_IN_MEMORY_FALLBACK_ENABLED", True)
    app.config.setdefault("RATELIMIT_SWALLOW_ERRORS", True)
    app.config.setdefault("RATELIMIT_STORAGE_OPTIONS", {"socket_connect_timeout": 1, "socket_timeout": 1})
    app.config.setdefault("RATELIMIT_HEADERS_ENABLED", False)  # Retry-After is set on the 429 alone (by _too_many)
    limiter = Limiter(get_remote_address, app=app, default_limits=[])
    for endpoint, limits in _LIMITED.items():
        if endpoint not in app.view_functions:
            continue
        for setting, key in limits:
            # The view is wrapped as by the limiter's decorator (checked as it is called, after the CSRF check); a shared
            # limit, so the endpoints under one setting (single and bulk submissions) draw on one count.
            limit = limiter.shared_limit(_setting(setting), scope=f"{setting}:{key}", key_func=_KEYS[key], methods=["POST"], error_message=_WHAT[key])
            app.view_functions[endpoint] = limit(app.view_functions[endpoint])  # type: ignore[assignment]
    app.extensions[_LIMITER_EXTENSION] = limiter
    app.register_error_handler(RateLimitExceeded, _too_many)


def limiter_of(app: Flask) -> Limiter:
    """The app's rate limiter (its current limit gives the 429's Retry-After)."""
    limiter: Limiter = app.extensions[_LIMITER_EXTENSION]
    return limiter


def _storage_uri(config: Any) -> str:
    broker = str(config.get("BROKER_URL") or "")
    return broker if broker.startswith(("redis://", "rediss://")) else "memory://"


def _check_form() -> None:
    """Refuse an unsafe request without this session's CSRF token: 400 saying why and what to do."""
    if not current_app.config.get("WTF_CSRF_ENABLED", True):  # Flask-WTF's own switch (a test about something else)
        return
    csrf: CSRFProtect = current_app.extensions[_CSRF_EXTENSION]
    try:
        csrf.protect(apply_exemptions=True)
    except CSRFError as error:
        reason = str(error.description).rstrip(".")
        raise CSRFError(f"The form had expired or did not come from this site ({reason[:1].lower() + reason[1:]}). Reload the page and try again.") from None


def _setting(name: str) -> Any:
    return lambda: str(current_app.config[name])


def _token_key() -> str:
    scheme, _, credentials = request.headers.get("Authorization", "").partition(" ")
    if scheme.lower() == "bearer" and credentials.strip():
        return "token:" + hash_token(credentials.strip())  # the stored form: the token itself is never kept
    return "address:" + get_remote_address()


def _account_key() -> str:
    return "account:" + request.form.get("name", "").strip().lower()[:200]


_KEYS = {"address": lambda: "address:" + get_remote_address(), "account": _account_key, "token": _token_key}


def _too_many(error: RateLimitExceeded) -> Any:
    """429 with Retry-After and the limit named: JSON under /api/, a page elsewhere."""
    current = limiter_of(current_app).current_limit
    wait = max(1, int(current.reset_at - time.time())) if current is not None else 60
    headers = {"Retry-After": str(wait)}
    limit = str(error.limit.limit)
    message = f"Too many {error.description}: the limit is {limit}. Try again in {wait} second{'s' if wait != 1 else ''}."
    if request.path.startswith("/api/"):
        return {"error": "too many requests", "message": message, "limit": limit, "retry_after_s": wait}, 429, headers
    error.description = message
    return render_template("dashboard/error.html", error=error), 429, headers

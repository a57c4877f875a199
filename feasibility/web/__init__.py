"""The web application: ``create_app`` builds it from defaults, the environment and test settings.

Every setting can come from the environment as ``FEASIBILITY_<NAME>``; the plain
``DATABASE_URL`` and ``BROKER_URL`` are read too. Without ``BROKER_URL`` check
runs are computed by an embedded pool of threads in this process.
"""

from __future__ import annotations

import logging
import os
from importlib import import_module
from typing import Any

from flask import Flask, request
from sqlalchemy.exc import OperationalError, ProgrammingError
from werkzeug.exceptions import HTTPException

from feasibility.documents.reading import MAX_DOCUMENT_BYTES
from feasibility.store import db
from feasibility.web import protection, unavailable

__all__ = ["create_app"]

log = logging.getLogger(__name__)

# One line per blueprint: "module:attribute".
_BLUEPRINTS: list[str] = [
    "feasibility.web.api:bp",
    "feasibility.web.admin_api:bp",
    "feasibility.web.access_api:bp",
    "feasibility.web.schemas_api:bp",
    "feasibility.web.review_api:bp",
    "feasibility.web.simulations_api:bp",
    "feasibility.web.dashboard:bp",
]


def create_app(test_config: dict[str, Any] | None = None) -> Flask:
    """Create and configure the app: store, seeded demo observatory, Celery, dispatcher, blueprints."""
    app = Flask(__name__, instance_path=str(db.instance_dir().resolve()))
    app.config.from_mapping(
        SECRET_KEY=None,  # FEASIBILITY_SECRET_KEY; else a random key kept in the instance folder
        DATABASE_URL=db.default_database_url(),
        BROKER_URL=os.environ.get("BROKER_URL") or None,
        QUEUE_PREFIX="feasibility",
        EMBEDDED_WORKERS=2,
        # How often the relay runs (Celery beat, or the embedded pool's timer; 0: never): it sends
        # runs stored but not yet sent, and takes back runs whose worker is gone (service/relay.py).
        SWEEP_INTERVAL_S=5,
        # A worker's claim on a run lasts this long unless its heartbeat (every third of it) renews
        # it; a dead worker's runs are taken over after at most this long (service/leases.py).
        LEASE_S=30,
        # The longest a run may compute; then its heartbeat stops and another worker takes it over.
        RUN_TIMEOUT_S=900,
        # Backstop: a queued run whose message was sent this long ago is sent again even when
        # the broker seems to hold it (lost messages are usually found within a relay pass).
        QUEUED_TIMEOUT_S=600,
        MAX_CONTENT_LENGTH=MAX_DOCUMENT_BYTES,  # the documents' own limit: the API, the pages and the CLI agree
        MAX_BULK=500,
        MAX_WAIT_S=30,
        RETRY_AFTER_S=5,  # the Retry-After of a 503 while the store cannot be reached
        SEED_DEMO=True,
        CREATE_TABLES=False,
        # The dashboard's session cookie (RFC 6265). It carries only a random session id; who is signed in is kept in the store.
        # Secure: sent over https only. None means True, except when TESTING; `serve --demo` on a loopback address sets False.
        # FEASIBILITY_SESSION_COOKIE_SECURE=false (or the plain SESSION_COOKIE_SECURE=false) allows plain http anywhere.
        SESSION_COOKIE_SECURE=None,
        SESSION_COOKIE_HTTPONLY=True,  # never readable by scripts in the page
        SESSION_COOKIE_SAMESITE="Lax",  # not sent with cross-site posts
        SESSION_LIFETIME_H=12,  # a dashboard session ends this many hours after sign-in (or at sign-out, or a password change)
        # The sign-in throttle (web/sign_in_limits.py), kept in the store so it holds across every web process.
        SIGN_IN_FAILURES_PER_ACCOUNT=5,  # failures of one account name within the window before it must wait
        SIGN_IN_FAILURES_PER_ADDRESS=20,  # failures from one client address within the window before it must wait
        SIGN_IN_WINDOW_S=3600,  # how long a failure counts, in seconds
        SIGN_IN_FIRST_DELAY_S=30,  # the first wait after reaching a limit; doubles with each further failure
        SIGN_IN_MAX_DELAY_S=900,  # the longest wait
        # Rate limits (web/protection.py; Flask-Limiter's notation, several joined by ";"), answered with 429 and Retry-After.
        # Counted in Redis when RATELIMIT_STORAGE_URI is set or BROKER_URL is redis://, else per process. Our choice, common practice.
        RATE_LIMIT_SIGN_IN_PER_ADDRESS="30 per minute",  # sign-in posts from one client address
        RATE_LIMIT_SIGN_IN_PER_ACCOUNT="10 per minute",  # sign-in posts naming one account
        RATE_LIMIT_SUBMISSIONS_PER_TOKEN="120 per minute",  # proposal submissions (single or bulk) with one API token
        TRUSTED_PROXIES=0,  # reverse proxies in front of the app whose X-Forwarded-For/-Proto are believed (client address)
        WEBHOOK_ALLOW_PRIVATE=False,  # allow webhook addresses on loopback, private, link-local... networks (tests, closed sites)
        PUBLIC_URL=None,  # the service's public address (https://host); makes the published schemas' $id absolute
        # Whether proposers (and their portals) see the technical reviewers' notes beside the verdict that stands.
        REVIEW_NOTES_TO_PROPOSERS=False,
    )
    app.config.from_prefixed_env("FEASIBILITY")
    if test_config is not None:
        app.config.from_mapping(test_config)
    _cookie_security(app)

    if not app.config["SECRET_KEY"]:
        app.config["SECRET_KEY"] = _instance_secret_key(app)
    engine = db.init_app(app)
    if app.config["CREATE_TABLES"]:
        from feasibility.store.models import Base

        Base.metadata.create_all(engine)
    if app.config["SEED_DEMO"]:
        _seed(app)
    _init_dispatch(app)
    for target in _BLUEPRINTS:
        module, _, attribute = target.partition(":")
        app.register_blueprint(getattr(import_module(module), attribute))
    protection.init_app(app)  # CSRF on every form, rate limits (after the blueprints: it names their views)
    app.register_error_handler(HTTPException, _api_error)
    unavailable.register(app)  # 503 with Retry-After while the store cannot be reached
    return app


def _cookie_security(app: Flask) -> None:
    """Settle ``SESSION_COOKIE_SECURE``: the plain environment variable wins, else the setting, else True unless TESTING.

    Also believe ``TRUSTED_PROXIES`` reverse proxies' forwarded headers, so the sign-in
    throttle counts per real client address and ``Secure`` cookies work behind TLS proxies.
    """
    plain = os.environ.get("SESSION_COOKIE_SECURE")
    if plain is not None:
        app.config["SESSION_COOKIE_SECURE"] = plain.strip().lower() in {"1", "true", "yes", "on"}
    elif app.config.get("SESSION_COOKIE_SECURE") is None:
        app.config["SESSION_COOKIE_SECURE"] = not app.config.get("TESTING", False)
    else:
        app.config["SESSION_COOKIE_SECURE"] = bool(app.config["SESSION_COOKIE_SECURE"])
    hops = int(app.config.get("TRUSTED_PROXIES") or 0)
    if hops > 0:
        from werkzeug.middleware.proxy_fix import ProxyFix

        app.wsgi_app = ProxyFix(app.wsgi_app, x_for=hops, x_proto=hops)  # type: ignore[method-assign]


def _instance_secret_key(app: Flask) -> str:
    """The key that signs session cookies when none is configured: random, made once, kept in the instance folder.

    A fixed fallback key would let anyone forge a dashboard session; several
    processes sharing the instance folder (web and embedded workers) read the same file.
    """
    import secrets
    import tempfile
    from pathlib import Path

    path = Path(app.instance_path) / "secret_key"
    path.parent.mkdir(parents=True, exist_ok=True)
    if not path.exists():
        # Written whole to a temporary file, then linked into place: link fails if another
        # process got there first, and nobody ever reads a half-written key.
        with tempfile.NamedTemporaryFile("w", dir=path.parent, delete=False) as handle:
            handle.write(secrets.token_urlsafe(48))
        os.chmod(handle.name, 0o600)
        try:
            os.link(handle.name, path)
        except FileExistsError:
            pass
        finally:
            os.unlink(handle.name)
    return path.read_text().strip()


def _seed(app: Flask) -> None:
    from feasibility.service.current import seed_demo

    with app.app_context():
        try:
            with db.session_scope() as session:
                seed_demo(session)
        except (OperationalError, ProgrammingError) as exc:  # tables missing: the store was not upgraded yet
            log.warning("demo observatory not loaded (run `feasibility db upgrade`): %s", exc.orig)


def _init_dispatch(app: Flask) -> None:
    from feasibility.service.dispatch import EXTENSION, CeleryDispatcher, queue_names
    from feasibility.service.pool import EmbeddedPool
    from worker import celery_init_app

    celery_app = celery_init_app(app)
    if app.config["BROKER_URL"]:
        app.extensions[EXTENSION] = CeleryDispatcher(celery_app, queue_names(app.config))
    else:
        app.extensions[EXTENSION] = EmbeddedPool(
            app, workers=int(app.config["EMBEDDED_WORKERS"]), sweep_interval_s=float(app.config["SWEEP_INTERVAL_S"])
        )


def _api_error(error: HTTPException) -> Any:
    """JSON errors under /api/; the usual pages elsewhere."""
    if not request.path.startswith("/api/"):
        return error
    body = {"error": (error.name or "error").lower(), "message": error.description}
    return body, error.code or 500, {"WWW-Authenticate": "Bearer"} if error.code == 401 else {}

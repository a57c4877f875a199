"""The web application: ``create_app`` builds it from the settings (feasibility/settings.py) and test overrides.

Every setting comes from the environment as ``FEASIBILITY_<NAME>`` (the plain
``DATABASE_URL``, ``BROKER_URL`` and ``SESSION_COOKIE_SECURE`` are read too);
the Flask config is made from the :class:`~feasibility.settings.Settings`. The
store, the Celery client and the dispatcher are the service's
:class:`~feasibility.service.runtime.Runtime`, bound for every app context (so
every request, and every ``with app.app_context():``). Without ``BROKER_URL``
check runs are computed by an embedded pool of threads in this process.
"""

from __future__ import annotations

import logging
import os
from importlib import import_module
from typing import Any

from flask import Flask, request
from flask.ctx import AppContext
from werkzeug.exceptions import HTTPException

from feasibility.documents.reading import MAX_DOCUMENT_BYTES
from feasibility.logs import configure_logging
from feasibility.service.dispatch import EXTENSION
from feasibility.service.runtime import Runtime, unbind
from feasibility.service.startup import settle_for_serving, start_runtime
from feasibility.settings import Settings, load_settings
from feasibility.web import protection, unavailable

__all__ = ["RUNTIME", "WebApp", "create_app", "flask_config", "settle_for_serving"]

log = logging.getLogger(__name__)

#: Where the app keeps its runtime (``app.extensions``).
RUNTIME = "feasibility.runtime"

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

#: Flask's own settings that are not the service's: fixed here.
_FLASK_FIXED: dict[str, Any] = {
    "MAX_CONTENT_LENGTH": MAX_DOCUMENT_BYTES,  # the documents' own limit: the API, the pages and the CLI agree
    # The dashboard's session cookie (RFC 6265). It carries only a random session id; who is signed in is kept in the store.
    "SESSION_COOKIE_HTTPONLY": True,  # never readable by scripts in the page
    "SESSION_COOKIE_SAMESITE": "Lax",  # not sent with cross-site posts
}


class _RuntimeAppContext(AppContext):
    """An app context that binds the app's runtime (store, settings, dispatcher) while it is pushed."""

    def __init__(self, app: Flask) -> None:
        super().__init__(app)
        self._bindings: list[Any] = []  # one per push: an app context may be pushed more than once

    def push(self) -> None:
        super().push()
        self._bindings.append(self.app.extensions[RUNTIME].bind())

    def pop(self, *args: Any, **kwargs: Any) -> None:
        try:
            unbind(self._bindings.pop())
        finally:
            super().pop(*args, **kwargs)


class WebApp(Flask):
    """The Flask app whose app contexts (and so requests) bind its runtime."""

    def app_context(self) -> AppContext:
        return _RuntimeAppContext(self)

    def set_settings(self, **values: Any) -> None:
        """Change settings of this running app (tests; a switch flipped live): its config and its runtime's together."""
        runtime: Runtime = self.extensions[RUNTIME]
        runtime.settings = runtime.settings.with_values(values)
        self.config.update(values)


def flask_config(settings: Settings) -> dict[str, Any]:
    """The Flask config made from ``settings``: every setting under its upper-case name, and Flask's fixed ones."""
    config = {name.upper(): getattr(settings, name) for name in Settings.model_fields}
    config["DATABASE_URL"] = settings.store_url()
    config.update(_FLASK_FIXED)
    return config


def create_app(test_config: dict[str, Any] | None = None, *, settings: Settings | None = None) -> Flask:
    """Create and configure the app: runtime (store, seeded demo observatory, Celery, dispatcher), blueprints.

    ``settings``: default, read from the environment now. ``test_config``: values that
    replace settings of the same name (``LEASE_S``), and any other Flask config (``TESTING``).
    Called bare (a server such as gunicorn), it also sets up logging for the process.
    """
    settings = settings or load_settings()
    overrides = dict(test_config or {})
    names = Settings.names()
    settings = settings.with_values({name: value for name, value in overrides.items() if name in names})
    if test_config is None:
        configure_logging(settings.log_level or "INFO", root_level="WARNING")
    app = WebApp(__name__, instance_path=str(settings.instance_dir().resolve()))
    app.config.from_mapping(flask_config(settings))
    app.config.from_mapping({name: value for name, value in overrides.items() if name not in names})
    _cookie_security(app)

    if not app.config["SECRET_KEY"]:
        app.config["SECRET_KEY"] = _instance_secret_key(app)
    runtime = start_runtime(settings)
    _keep(app, runtime)
    for target in _BLUEPRINTS:
        module, _, attribute = target.partition(":")
        app.register_blueprint(getattr(import_module(module), attribute))
    protection.init_app(app)  # CSRF on every form, rate limits (after the blueprints: it names their views)
    app.register_error_handler(HTTPException, _api_error)
    unavailable.register(app)  # 503 with Retry-After while the store cannot be reached
    if test_config is None:
        settle_for_serving()
    return app


def _keep(app: Flask, runtime: Runtime) -> None:
    """Keep the runtime, and its parts under the names the pages, the commands that serve and the tests look up."""
    app.extensions[RUNTIME] = runtime
    app.extensions["feasibility.db"] = runtime.store  # store["engine"] is its engine
    app.extensions[EXTENSION] = runtime.dispatcher
    app.extensions["celery"] = runtime.celery


def _cookie_security(app: Flask) -> None:
    """Settle ``SESSION_COOKIE_SECURE``: the setting (the plain variable wins there), else True unless TESTING.

    Also believe ``TRUSTED_PROXIES`` reverse proxies' forwarded headers, so the sign-in
    throttle counts per real client address and ``Secure`` cookies work behind TLS proxies.
    """
    if app.config.get("SESSION_COOKIE_SECURE") is None:
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


def _api_error(error: HTTPException) -> Any:
    """JSON errors under /api/; the usual pages elsewhere."""
    if not request.path.startswith("/api/"):
        return error
    body = {"error": (error.name or "error").lower(), "message": error.description}
    return body, error.code or 500, {"WWW-Authenticate": "Bearer"} if error.code == 401 else {}

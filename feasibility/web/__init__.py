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

from feasibility.store import db
from feasibility.web import unavailable

__all__ = ["create_app"]

log = logging.getLogger(__name__)

# One line per blueprint: "module:attribute".
_BLUEPRINTS: list[str] = [
    "feasibility.web.api:bp",
    "feasibility.web.admin_api:bp",
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
        SWEEP_INTERVAL_S=30,
        RUN_TIMEOUT_S=900,
        QUEUED_TIMEOUT_S=600,
        MAX_CONTENT_LENGTH=8 * 1024 * 1024,
        MAX_BULK=500,
        MAX_WAIT_S=30,
        RETRY_AFTER_S=5,  # the Retry-After of a 503 while the store cannot be reached
        SEED_DEMO=True,
        CREATE_TABLES=False,
    )
    app.config.from_prefixed_env("FEASIBILITY")
    if test_config is not None:
        app.config.from_mapping(test_config)

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
    app.register_error_handler(HTTPException, _api_error)
    unavailable.register(app)  # 503 with Retry-After while the store cannot be reached
    return app


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

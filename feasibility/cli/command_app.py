"""The web app as a short command uses it: on the configured store, in an app context, its connections closed after."""

from __future__ import annotations

from collections.abc import Iterator
from contextlib import contextmanager
from typing import Any

__all__ = ["command_app"]


@contextmanager
def command_app(**settings: Any) -> Iterator[Any]:
    """``create_app(settings)`` inside its app context; afterwards its workers stopped and its pooled connections closed.

    A command that left its connections to the garbage collector would leave PostgreSQL
    sessions open until the process ends (and warnings in tests that run many commands).
    """
    from feasibility.web import create_app

    app = create_app(settings or None)
    try:
        with app.app_context():
            yield app
    finally:
        dispatcher = app.extensions.get("feasibility.dispatch")
        if dispatcher is not None and hasattr(dispatcher, "shutdown"):
            dispatcher.shutdown()
        app.extensions["feasibility.db"]["engine"].dispose()

"""The service as a short command uses it: a runtime on the configured store, bound, its connections closed after.

No web app is built: a command reads the settings once, starts the service's
runtime (store, Celery client, dispatcher) and binds it while it works.
"""

from __future__ import annotations

from collections.abc import Iterator
from contextlib import contextmanager
from typing import Any

from feasibility.service.runtime import Runtime
from feasibility.service.startup import start_runtime
from feasibility.settings import load_settings

__all__ = ["command_runtime"]


@contextmanager
def command_runtime(**settings: Any) -> Iterator[Runtime]:
    """The runtime on the environment's settings (``settings`` replace some, by name), bound; afterwards its
    workers stopped and its pooled connections closed.

    A command that left its connections to the garbage collector would leave PostgreSQL
    sessions open until the process ends (and warnings in tests that run many commands).
    """
    runtime = start_runtime(load_settings().with_values(settings))
    try:
        with runtime.bound():
            yield runtime
    finally:
        runtime.close()

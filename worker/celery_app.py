"""The Celery workers' entry point: ``celery -A worker.celery_app worker``; settings come from the environment."""

from __future__ import annotations

import logging
from typing import Any

from celery.signals import setup_logging

from feasibility.logs import configure_logging
from feasibility.settings import load_settings
from worker import worker_runtime

__all__ = ["celery_app", "runtime", "settings"]

settings = load_settings()
runtime = worker_runtime(settings)
celery_app = runtime.celery


@setup_logging.connect
def _logging(loglevel: Any = None, **_: object) -> None:
    """The service's one logging set-up instead of Celery's; ``--loglevel`` sets the level of every logger."""
    level = logging.getLevelName(loglevel) if isinstance(loglevel, int) else (loglevel or "INFO")
    configure_logging(settings.log_level or level, root_level=level)

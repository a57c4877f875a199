"""One logging set-up for the web app, the workers and the commands, with the run id on every line of a run.

:func:`configure_logging` applies one :func:`logging.config.dictConfig`; each face calls it
once at start. The check run being computed is kept in a context variable
(:func:`run_context`, set by the service while it computes a run), and a filter writes it
into every record as ``run_id`` ("-" outside a run), so each line a run's computation logs,
in whichever module, names the run.
"""

from __future__ import annotations

import logging
import logging.config
import sys
from collections.abc import Iterator
from contextlib import contextmanager
from contextvars import ContextVar
from typing import Any

__all__ = ["LOG_FORMAT", "RunIdFilter", "StderrHandler", "configure_logging", "current_run_id", "logging_config", "run_context"]

#: Every line: time, level, process, the run (or "-"), the logger and the message.
LOG_FORMAT = "%(asctime)s %(levelname)s [%(process)d] run=%(run_id)s %(name)s: %(message)s"

_run_id: ContextVar[int | None] = ContextVar("feasibility_run_id", default=None)


def current_run_id() -> int | None:
    """The check run being computed in this context, if any."""
    return _run_id.get()


@contextmanager
def run_context(run_id: int) -> Iterator[None]:
    """Mark the lines logged inside the block (this thread or task) as check run ``run_id``'s."""
    token = _run_id.set(run_id)
    try:
        yield
    finally:
        _run_id.reset(token)


class RunIdFilter(logging.Filter):
    """Gives every record a ``run_id`` attribute: the run being computed, or "-"."""

    def filter(self, record: logging.LogRecord) -> bool:
        run_id = _run_id.get()
        record.run_id = "-" if run_id is None else run_id
        return True


class StderrHandler(logging.StreamHandler):
    """Writes to whatever ``sys.stderr`` is at the time of each line (a command run under a test runner swaps it)."""

    def __init__(self) -> None:
        super().__init__(sys.stderr)

    @property
    def stream(self) -> Any:
        return sys.stderr

    @stream.setter
    def stream(self, _value: Any) -> None:
        pass


#: The loggers of the service's own code.
_OWN_LOGGERS = ("feasibility", "worker")


def logging_config(level: str = "INFO", *, root_level: str | None = None) -> dict[str, Any]:
    """The one :func:`logging.config.dictConfig` mapping: a handler on stderr with the run id filter.

    With ``root_level`` the process is ours (a worker, the web server): the handler sits
    on the root logger, so the libraries' lines (Celery's "ready.") look the same.
    Without, only the service's own loggers get it (a command run inside another program).
    """
    handler = {"()": StderrHandler, "formatter": "plain", "filters": ["run_id"]}
    config: dict[str, Any] = {
        "version": 1,
        "disable_existing_loggers": False,
        "filters": {"run_id": {"()": RunIdFilter}},
        "formatters": {"plain": {"format": LOG_FORMAT}},
        "handlers": {"stderr": handler},
        "loggers": {name: {"level": level.upper(), "handlers": [] if root_level else ["stderr"], "propagate": True} for name in _OWN_LOGGERS},
    }
    if root_level:
        config["root"] = {"level": root_level.upper(), "handlers": ["stderr"]}
    return config


def configure_logging(level: str = "INFO", *, root_level: str | None = None) -> None:
    """Apply :func:`logging_config` (web, workers, commands); calling it again replaces the handlers, never adds."""
    logging.config.dictConfig(logging_config(level, root_level=root_level))

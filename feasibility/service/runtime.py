"""What the service layer works with: the settings, the store and the dispatcher, handed over by the face that started.

A face (the web app, a Celery worker, a command) builds one :class:`Runtime` from the
settings it read once (:func:`feasibility.service.startup.start_runtime`) and binds it
(:meth:`Runtime.bound`) while it works: the web app for each app context, a worker
process for its whole life, a command for its run. Service code reads it with
:func:`current_runtime` / :func:`current_settings`; threads the service starts bind it
again themselves, since a new thread begins with an empty context.
"""

from __future__ import annotations

from collections.abc import Iterator
from contextlib import contextmanager
from contextvars import ContextVar, Token
from dataclasses import dataclass, field
from typing import Any

from feasibility.settings import Settings, load_settings
from feasibility.store.db import Store, bind_store, set_default_store, unbind_store

__all__ = ["Runtime", "current_runtime", "current_settings", "set_process_runtime", "unbind"]

_current: ContextVar[Runtime | None] = ContextVar("feasibility_runtime", default=None)
_process: dict[str, Runtime] = {}


@dataclass(eq=False)
class Runtime:
    """The settings, the store, the dispatcher of check runs and the Celery client (None without a broker)."""

    settings: Settings
    store: Store
    dispatcher: Any = None
    celery: Any = None
    #: Things a face keeps beside the runtime (the embedded notice sender); closed with it when they have ``shutdown``.
    extras: dict[str, Any] = field(default_factory=dict)

    @contextmanager
    def bound(self) -> Iterator[Runtime]:
        """Use this runtime (and its store) for the service calls made inside the block, in this thread or task."""
        tokens = self.bind()
        try:
            yield self
        finally:
            unbind(tokens)

    def bind(self) -> tuple[Token[Runtime | None], Token[Store | None]]:
        """Bind this runtime in the current context until :func:`unbind` is given what this returns (for app contexts)."""
        return _current.set(self), bind_store(self.store)

    def close(self) -> None:
        """Stop the embedded workers (if any) and close the store's pooled connections."""
        for helper in (self.dispatcher, *self.extras.values()):
            if hasattr(helper, "shutdown"):
                helper.shutdown()
        self.store.dispose()


def unbind(tokens: tuple[Token[Runtime | None], Token[Store | None]]) -> None:
    """Undo a :meth:`Runtime.bind` (in the same context it was made in)."""
    runtime_token, store_token = tokens
    unbind_store(store_token)
    _current.reset(runtime_token)


def set_process_runtime(runtime: Runtime) -> None:
    """Make ``runtime`` the one used wherever none is bound (a worker process: every task, every thread)."""
    _process["runtime"] = runtime
    set_default_store(runtime.store)


def current_runtime() -> Runtime | None:
    """The runtime bound in this context, else the process's (:func:`set_process_runtime`), else None."""
    return _current.get() or _process.get("runtime")


def current_settings() -> Settings:
    """The settings of :func:`current_runtime`, or the environment's when the service is used bare (scripts, tests)."""
    runtime = current_runtime()
    return runtime.settings if runtime is not None else load_settings()

"""Building a :class:`~feasibility.service.runtime.Runtime` from the settings: what every face does once at start.

The store is opened (tables made when ``create_tables``; the demo observatory loaded
into an empty store when ``seed_demo``), the Celery app made, and the dispatcher
chosen: Celery workers with ``broker_url``, else an embedded pool of threads.
Neither the web app nor the workers are needed for it, so a command or a worker
process never builds the web app.
"""

from __future__ import annotations

import gc
import logging
from collections.abc import Sequence

from sqlalchemy.exc import OperationalError, ProgrammingError

from feasibility.service.runtime import Runtime
from feasibility.settings import Settings
from feasibility.store.db import open_store

__all__ = ["settle_for_serving", "start_runtime"]

log = logging.getLogger(__name__)


def start_runtime(settings: Settings, *, celery_include: Sequence[str] = (), embedded_pool: bool = True) -> Runtime:
    """A runtime on ``settings``; ``celery_include``: the task modules (a worker); ``embedded_pool=False``: no threads."""
    from feasibility.service.celery_setup import make_celery
    from feasibility.service.dispatch import CeleryDispatcher, queue_names
    from feasibility.service.pool import EmbeddedPool

    store = open_store(settings.store_url())
    if settings.create_tables:
        from feasibility.store.models import Base

        Base.metadata.create_all(store.engine)
    runtime = Runtime(settings=settings, store=store)
    if settings.seed_demo:
        _seed(runtime)
    runtime.celery = make_celery(runtime, celery_include)
    if settings.broker_url:
        runtime.dispatcher = CeleryDispatcher(runtime.celery, queue_names(settings))
    elif embedded_pool:
        runtime.dispatcher = EmbeddedPool(runtime, workers=settings.embedded_workers, sweep_interval_s=float(settings.sweep_interval_s))
    return runtime


def _seed(runtime: Runtime) -> None:
    """Load the packaged demo observatory into an empty store (a store not upgraded yet is only warned about)."""
    from feasibility.service.current import seed_demo
    from feasibility.store.db import session_scope

    with runtime.bound():
        try:
            with session_scope() as session:
                seed_demo(session)
        except (OperationalError, ProgrammingError) as exc:  # tables missing: the store was not upgraded yet
            log.warning("demo observatory not loaded (run `feasibility db upgrade`): %s", exc.orig)


def settle_for_serving() -> None:
    """Keep what start-up made out of the garbage collector's full passes (``gc.freeze``): the process now serves.

    A serving process (web or worker) holds many long-lived objects (modules, mappings and
    compiled statements, validators, the observatory, the engine's tables). A full collection
    walks every one of them, and the garbage of bulk submissions sets one off every few
    requests: a quarter of their CPU, measured with benchmarks/bench_submit.py. What is made
    later is collected as usual. In a worker's parent, before its pool forks, it also keeps
    the children from touching (and so copying) the shared pages.
    """
    gc.collect()
    gc.freeze()

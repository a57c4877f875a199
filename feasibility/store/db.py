"""The database engine and sessions.

A :class:`Store` is one engine with its session factories. Each face makes its
own from the settings and binds it (:func:`bind_store`) while it works: the web
app for each app context, a worker or a command for its whole run. So tests and
several apps in one process never share a connection pool; where none is bound
the process-wide default from :func:`configure` is used.

SQLite (the embedded default) runs in WAL mode with a busy timeout, so the web
threads and the in-process workers can read while one of them writes. Sessions
begin ``BEGIN IMMEDIATE`` there: the write lock is taken (waiting up to the busy
timeout) before the first read, because a deferred transaction that reads and
then writes cannot wait for the lock and fails at once with "database is
locked" when another connection writes (SQLite, "Transaction": SQLITE_BUSY on
upgrading a read transaction). Pages that only read ask for a ``read_only``
session, a deferred transaction that never blocks and never takes the lock.
PostgreSQL sessions are READ COMMITTED transactions; read-only ones are
``READ ONLY`` transactions (never autocommit: a streamed query, ``yield_per``,
needs a server-side cursor, which lives only inside a transaction block), and a
write in them fails at once there too.
"""

from __future__ import annotations

import json
import weakref
from collections.abc import Iterator
from contextlib import contextmanager
from contextvars import ContextVar, Token
from pathlib import Path
from typing import Any

from sqlalchemy import Engine, create_engine, event
from sqlalchemy.orm import Session, sessionmaker

__all__ = [
    "JSONText",
    "READ_ONLY",
    "Store",
    "bind_store",
    "bound_store",
    "configure",
    "dispose_engines",
    "all_engines",
    "dispose_pools_after_fork",
    "default_database_url",
    "get_engine",
    "live_engines",
    "make_engine",
    "open_store",
    "unbind_store",
    "set_default_store",
    "session_factory",
    "session_scope",
]

#: How long an SQLite connection waits for another writer before giving up, in milliseconds.
SQLITE_BUSY_TIMEOUT_MS = 30_000

#: Execution option marking an engine (and its sessions) as read-only; see :func:`session_factory`.
READ_ONLY = "feasibility_read_only"


class JSONText(str):
    """A value for a JSON column that is JSON text already (say from pydantic's ``model_dump_json``): stored as it is.

    pydantic writes a large result's JSON several times faster than :func:`json.dumps`
    re-encodes the equivalent dict; any other value is encoded as usual.
    """


class Store:
    """One engine and its two session factories (read-write and read-only); ``store["engine"]`` is the engine."""

    def __init__(self, engine: Engine) -> None:
        self.engine = engine
        read_options: dict[str, Any] = {READ_ONLY: True}
        if engine.dialect.name == "postgresql":
            # BEGIN READ ONLY: a real transaction (server-side cursors need one), in which a write fails.
            # SQLAlchemy sets this per connection and resets it when the connection goes back to the pool.
            read_options["postgresql_readonly"] = True
        self.sessions = sessionmaker(bind=engine, expire_on_commit=False)
        # Shares the engine's pool and events; only the execution options differ.
        self.read_sessions = sessionmaker(bind=engine.execution_options(**read_options), expire_on_commit=False)

    def __getitem__(self, name: str) -> Any:
        """``store["engine"]``: kept for code that reads the store as the mapping it once was."""
        return getattr(self, name)

    def session(self, *, read_only: bool = False) -> Session:
        """A new session (the caller closes it); see :func:`session_factory` for ``read_only``."""
        return (self.read_sessions if read_only else self.sessions)()

    def dispose(self) -> None:
        """Close the pooled connections."""
        self.engine.dispose()


_default: dict[str, Store] = {}
_bound: ContextVar[Store | None] = ContextVar("feasibility_store", default=None)
_engines: weakref.WeakSet[Engine] = weakref.WeakSet()


def default_database_url() -> str:
    """The settings' store URL: ``DATABASE_URL``, or an SQLite file in :func:`instance_dir`."""
    from feasibility.settings import load_settings

    return load_settings().store_url()


def open_store(url: str) -> Store:
    """A new :class:`Store` on ``url``."""
    return Store(make_engine(url))


def bind_store(store: Store) -> Token[Store | None]:
    """Use ``store`` for every session opened in this context (thread or task) until :func:`unbind_store`."""
    return _bound.set(store)


def unbind_store(token: Token[Store | None]) -> None:
    """Undo :func:`bind_store` (in the same context)."""
    _bound.reset(token)


def set_default_store(store: Store) -> None:
    """Make ``store`` the process-wide default (a worker process: every task and thread uses it)."""
    _default["store"] = store


def bound_store() -> Store | None:
    """The store bound in this context, if any."""
    return _bound.get()


def make_engine(url: str) -> Engine:
    """An engine for ``url``; SQLite gets WAL mode, a busy timeout, foreign keys and real transactions."""
    if url.startswith("sqlite"):
        path = url.split("///", 1)[1] if "///" in url else ""
        if path and path != ":memory:":
            Path(path).parent.mkdir(parents=True, exist_ok=True)
        engine = create_engine(url, json_serializer=_json_text, connect_args={"timeout": SQLITE_BUSY_TIMEOUT_MS / 1000, "check_same_thread": False})
        event.listen(engine, "connect", _sqlite_on_connect)
        event.listen(engine, "begin", _sqlite_on_begin)
    else:
        # pool_pre_ping: a connection dropped by a database restart is replaced, not handed out.
        engine = create_engine(url, json_serializer=_json_text, pool_pre_ping=True, pool_size=5, max_overflow=10)
    _engines.add(engine)
    return engine


def all_engines() -> list[Engine]:
    """Every engine this process made that is still alive (tests close those they made)."""
    return list(_engines)


def dispose_pools_after_fork() -> None:
    """Forget every engine's pooled connections inherited from a parent process, without closing them.

    A forked worker must open its own connections; closing the inherited ones would
    close the parent's (SQLAlchemy's "Using Connection Pools with Multiprocessing").
    """
    for engine in list(_engines):
        engine.dispose(close=False)


def live_engines() -> set[Engine]:
    """Every engine made by :func:`make_engine` in this process that is still in use."""
    return set(_engines)


def dispose_engines(engines: set[Engine]) -> None:
    """Close the pooled connections of ``engines`` (each stays usable and opens new ones on demand)."""
    for engine in engines:
        engine.dispose()


def configure(url: str) -> Engine:
    """Set the process-wide default store (used where none is bound)."""
    old = _default.get("store")
    if old is not None:
        old.dispose()
    _default["store"] = store = open_store(url)
    return store.engine


def get_engine() -> Engine:
    """The bound store's engine, or the process default's (configured from the settings on first use)."""
    return _state().engine


def session_factory(*, read_only: bool = False) -> Session:
    """A new session on the bound store (the caller closes it).

    ``read_only=True`` is for sessions that never write (pages, polling): on SQLite
    they neither take nor wait for the write lock, and a write in them fails at
    once ("attempt to write a readonly database") rather than now and then.
    """
    return _state().session(read_only=read_only)


@contextmanager
def session_scope(*, read_only: bool = False) -> Iterator[Session]:
    """A session in a transaction: committed when the block ends, rolled back on an exception.

    ``read_only``: as for :func:`session_factory`.
    """
    session = session_factory(read_only=read_only)
    try:
        yield session
        session.commit()
    except BaseException:
        session.rollback()
        raise
    finally:
        session.close()


def _json_text(value: Any) -> str:
    return value if isinstance(value, JSONText) else json.dumps(value)


def _state() -> Store:
    store = _bound.get()
    if store is not None:
        return store
    if "store" not in _default:
        configure(default_database_url())
    return _default["store"]


def _sqlite_on_connect(dbapi_connection: Any, connection_record: Any) -> None:
    # Let SQLAlchemy, not the sqlite3 module, emit BEGIN, so SAVEPOINT works (SQLAlchemy's pysqlite notes).
    dbapi_connection.isolation_level = None
    cursor = dbapi_connection.cursor()
    cursor.execute("PRAGMA journal_mode=WAL")  # readers do not block the writer, nor it them
    cursor.execute(f"PRAGMA busy_timeout={SQLITE_BUSY_TIMEOUT_MS}")  # wait for a writer instead of failing
    cursor.execute("PRAGMA foreign_keys=ON")
    cursor.execute("PRAGMA synchronous=NORMAL")  # safe in WAL mode; fewer fsyncs
    cursor.close()


def _sqlite_on_begin(connection: Any) -> None:
    """Begin a write transaction with the write lock (waiting for it), or a read-only one without."""
    read_only = bool(connection.get_execution_options().get(READ_ONLY, False))
    # PRAGMA query_only lasts for the connection; switch it only when this transaction differs from the last.
    if connection.info.get(READ_ONLY, False) != read_only:
        connection.exec_driver_sql(f"PRAGMA query_only={int(read_only)}")
        connection.info[READ_ONLY] = read_only
    connection.exec_driver_sql("BEGIN" if read_only else "BEGIN IMMEDIATE")

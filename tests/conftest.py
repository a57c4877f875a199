"""Shared fixtures: ``app``, ``client`` and ``runner`` on a fresh store per test, on SQLite AND PostgreSQL, and API tokens.

Every test that uses ``database_url`` (and so ``app``, ``client``, ``runner``,
``make_token``) runs twice, with ids ``sqlite`` and ``postgresql``: the embedded
default and the production store. SQLite gets a new file per test. PostgreSQL
(``TEST_POSTGRES_URL``) gets one uniquely named database per test session, built
once from the models and emptied before each test (ids
restarting at 1, as on a new SQLite file); it is dropped at the end. Without a
reachable PostgreSQL those runs are skipped — unless CI is set, where they fail.

The app has the demo observatory and schedule loaded and an embedded pool of
check workers (started on first use, stopped after the test).

``private_postgres`` starts a PostgreSQL server of the test's own (own port and
directories) for tests that stop or restart the database; never the shared one.
"""

from __future__ import annotations

import glob
import os
import shutil
import socket
import subprocess
import tempfile
from collections.abc import Callable, Iterator
from pathlib import Path

import pytest
from click.testing import CliRunner, Result
from flask import Flask
from flask.testing import FlaskClient

from tests.api_contract import contract_problems, record_answers
from tests.services import scratch_postgres_database, service_unavailable

#: The stores every API and page test runs on.
DATABASES = ["sqlite", "postgresql"]


def _free_port() -> int:
    with socket.socket() as probe:
        probe.bind(("127.0.0.1", 0))
        return int(probe.getsockname()[1])


class PrivatePostgres:
    """A PostgreSQL server of this test alone: initdb in a temporary directory, its own port and socket directory."""

    def __init__(self, base: Path) -> None:
        binaries = sorted(glob.glob("/usr/lib/postgresql/*/bin/pg_ctl"))
        found = binaries[-1] if binaries else shutil.which("pg_ctl")
        if not found:
            raise FileNotFoundError("pg_ctl (PostgreSQL server binaries) not found")
        self.bin = Path(found).parent
        self.port = _free_port()
        self.data, self.sockets = base / "data", base / "sockets"
        self.sockets.mkdir(parents=True, exist_ok=True)
        # The server refuses to run as root: as root, run it as the postgres user, which owns the directories.
        self.as_owner = ["runuser", "-u", "postgres", "--"] if os.geteuid() == 0 else []
        if self.as_owner:
            shutil.chown(base, "postgres")
            shutil.chown(self.sockets, "postgres")
        self._run("initdb", "-D", str(self.data), "-U", "postgres", "--auth=trust", "-E", "UTF8", "--no-sync")

    @property
    def url(self) -> str:
        return f"postgresql+psycopg://postgres@127.0.0.1:{self.port}/postgres?connect_timeout=5"

    def start(self) -> None:
        options = f"-p {self.port} -k {self.sockets} -c listen_addresses=127.0.0.1 -c fsync=off"
        self._run("pg_ctl", "-D", str(self.data), "-o", options, "-l", str(self.data / "server.log"), "-w", "-t", "60", "start")

    def stop(self) -> None:
        self._run("pg_ctl", "-D", str(self.data), "-m", "fast", "-w", "stop")

    def _run(self, program: str, *args: str) -> None:
        done = subprocess.run([*self.as_owner, str(self.bin / program), *args], capture_output=True, text=True, timeout=120)
        if done.returncode != 0:
            raise RuntimeError(f"{program} failed ({done.returncode}): {done.stdout}{done.stderr}")


@pytest.fixture
def private_postgres() -> Iterator[PrivatePostgres]:
    """A private server, started; stopped and its directory removed afterwards."""
    # Not under pytest's temporary tree: that is private to this user, and the server runs as postgres.
    base = Path(tempfile.mkdtemp(prefix="feasibility-private-pg-"))
    server = None
    try:
        try:
            server = PrivatePostgres(base)
            server.start()
        except (OSError, RuntimeError, subprocess.TimeoutExpired) as exc:
            service_unavailable("a private PostgreSQL server (initdb/pg_ctl)", exc)
        yield server
    finally:
        if server is not None and (server.data / "postmaster.pid").exists():
            subprocess.run([*server.as_owner, str(server.bin / "pg_ctl"), "-D", str(server.data), "-m", "immediate", "-w", "stop"], capture_output=True)
        shutil.rmtree(base, ignore_errors=True)


@pytest.fixture(autouse=True)
def _dispose_engines_made_by_the_test() -> Iterator[None]:
    """Close the pooled connections of every database engine a test made (extra apps, commands) when it ends.

    An engine left for the garbage collector closes its PostgreSQL connections in ``__del__``, which
    psycopg reports as a ResourceWarning inside whatever test runs then (an error under our warning filters).
    """
    from feasibility.store import db

    before = set(db.all_engines())
    yield
    for engine in set(db.all_engines()) - before:
        engine.dispose()


@pytest.fixture(scope="session")
def postgres_database() -> Iterator[str]:
    """A new, uniquely named PostgreSQL database for this test session with the models' tables; dropped at the end.

    Its sessions speak a time zone far from UTC (UTC-4/-3, and DST in the semester), so a time
    read back and shown or compared as if it were UTC shows up in the tests.
    """
    from sqlalchemy import create_engine

    from feasibility.store.models import Base

    with scratch_postgres_database(timezone="America/Santiago") as url:
        engine = create_engine(url)
        Base.metadata.create_all(engine)
        engine.dispose()
        yield url


@pytest.fixture
def new_postgres_database() -> Iterator[str]:
    """The URL of a new, empty PostgreSQL database of its own (no tables), dropped after the test."""
    with scratch_postgres_database() as url:
        yield url


@pytest.fixture(scope="session")
def empty_postgres_store(postgres_database: str) -> Iterator[Callable[[], str]]:
    """A function that empties the session's PostgreSQL database and gives its URL.

    DELETE from every table, children first, and every id sequence back to 1 (ids
    then start at 1 as on a new SQLite file), in one transaction on a connection
    kept for the session: a few milliseconds, where TRUNCATE ... RESTART IDENTITY
    took 40-280 ms and drop_all/create_all 220-300 ms here. The lock timeout turns
    a connection some earlier test left inside a transaction into an error naming
    the problem, not a hung run.
    """
    from sqlalchemy import create_engine, text

    from feasibility.store.models import Base

    engine = create_engine(postgres_database, pool_size=1)

    def empty() -> str:
        with engine.begin() as connection:
            connection.execute(text("SET LOCAL lock_timeout = '10s'"))
            for table in reversed(Base.metadata.sorted_tables):
                connection.execute(table.delete())
            connection.execute(text("SELECT setval(c.oid::regclass, 1, false) FROM pg_class c WHERE c.relkind = 'S'"))
        return postgres_database

    yield empty
    engine.dispose()


@pytest.fixture(params=DATABASES)
def database_url(request: pytest.FixtureRequest, tmp_path: Path) -> str:
    """The URL of an empty store for this test: a new SQLite file, or the session's PostgreSQL database emptied."""
    if request.param == "sqlite":
        return f"sqlite:///{tmp_path / 'feasibility.sqlite'}"
    return request.getfixturevalue("empty_postgres_store")()


@pytest.fixture
def app(database_url: str) -> Iterator[Flask]:
    """The web app on a fresh store (SQLite or PostgreSQL), embedded workers, no periodic sweeper."""
    from feasibility.web import create_app

    app = create_app(
        {
            "TESTING": True,
            "SECRET_KEY": "test",
            "DATABASE_URL": database_url,
            # PostgreSQL's tables were made once for the session; an SQLite file is new.
            "CREATE_TABLES": database_url.startswith("sqlite"),
            "BROKER_URL": None,
            "SWEEP_INTERVAL_S": 0,
        }
    )
    answers = record_answers(app)
    yield app
    problems = contract_problems(app, answers)
    dispatcher = app.extensions["feasibility.dispatch"]
    if hasattr(dispatcher, "shutdown"):
        dispatcher.shutdown()
    app.extensions["feasibility.db"]["engine"].dispose()
    # Every JSON answer the test got from /api/ must match the published OpenAPI document (tests/api_contract.py).
    assert not problems, "answers that differ from /api/v1/openapi.json:\n" + "\n".join(problems)


@pytest.fixture
def client(app: Flask) -> FlaskClient:
    return app.test_client()


class CommandRunner:
    """Runs the ``feasibility`` command against the ``app`` fixture's store (through DATABASE_URL)."""

    def __init__(self, app: Flask, home: Path) -> None:
        self.env = {"DATABASE_URL": app.config["DATABASE_URL"], "FEASIBILITY_HOME": str(home), "BROKER_URL": ""}
        self._runner = CliRunner()

    def invoke(self, args: list[str], input: str | None = None) -> Result:
        from feasibility.cli import main

        return self._runner.invoke(main, args, env=self.env, input=input, catch_exceptions=False)


@pytest.fixture
def runner(app: Flask, tmp_path: Path) -> CommandRunner:
    return CommandRunner(app, tmp_path)


@pytest.fixture
def make_token(app: Flask) -> Callable[..., str]:
    """``make_token(role, name=None)``: a new user with that role (or an existing one) and a fresh API token."""
    from sqlalchemy import select

    from feasibility.store.db import session_scope
    from feasibility.store.models import User
    from feasibility.web.auth import create_token, create_user

    def make(role: str, name: str | None = None) -> str:
        with app.app_context(), session_scope() as session:
            name = name or f"{role}-user"
            user = session.scalar(select(User).where(User.name == name)) or create_user(session, name, role)
            return create_token(session, user)

    return make

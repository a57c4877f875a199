"""Fixtures of the simulation API and page tests: the app on SQLite and on PostgreSQL, and a private sky-grid cache.

Every API and page test of the simulation runs on both stores (the project's rule). Under CI=true a
PostgreSQL that cannot be reached fails the test; elsewhere it is skipped.
"""

from __future__ import annotations

import os
import uuid
from collections.abc import Iterator
from pathlib import Path

import pytest
from flask import Flask

POSTGRES_URL = os.environ.get("TEST_POSTGRES_URL", "postgresql+psycopg://postgres@127.0.0.1:5432/postgres")
IN_CI = os.environ.get("CI", "").lower() in ("1", "true", "yes")


@pytest.fixture(scope="module")
def simulation_grid_cache(tmp_path_factory: pytest.TempPathFactory) -> Iterator[None]:
    previous = os.environ.get("FEASIBILITY_CACHE_DIR")
    os.environ["FEASIBILITY_CACHE_DIR"] = str(tmp_path_factory.getbasetemp() / "simulation-sky-cache")
    yield
    if previous is None:
        os.environ.pop("FEASIBILITY_CACHE_DIR", None)
    else:
        os.environ["FEASIBILITY_CACHE_DIR"] = previous


@pytest.fixture(params=["sqlite", "postgresql"])
def store_app(request: pytest.FixtureRequest, tmp_path: Path) -> Iterator[Flask]:
    """The app on a fresh SQLite file or a fresh PostgreSQL database, with embedded workers."""
    from sqlalchemy import create_engine, text
    from sqlalchemy.engine import make_url

    from feasibility.web import create_app

    admin = None
    name = None
    if request.param == "sqlite":
        url = f"sqlite:///{tmp_path / 'feasibility.sqlite'}"
    else:
        admin = create_engine(POSTGRES_URL, isolation_level="AUTOCOMMIT")
        try:
            with admin.connect() as connection:
                connection.execute(text("SELECT 1"))
        except Exception as exc:  # noqa: BLE001
            admin.dispose()
            if IN_CI:
                pytest.fail(f"PostgreSQL at {POSTGRES_URL} is not reachable: {exc} (CI is set)", pytrace=False)
            pytest.skip(f"PostgreSQL at {POSTGRES_URL} is not reachable: {exc}")
        name = f"feasibility_test_{uuid.uuid4().hex[:12]}"
        with admin.connect() as connection:
            connection.execute(text(f'CREATE DATABASE "{name}"'))
        url = make_url(POSTGRES_URL).set(database=name).render_as_string(hide_password=False)
    app = create_app({"TESTING": True, "SECRET_KEY": "test", "DATABASE_URL": url, "CREATE_TABLES": True, "BROKER_URL": None, "SWEEP_INTERVAL_S": 0})
    yield app
    dispatcher = app.extensions["feasibility.dispatch"]
    if hasattr(dispatcher, "shutdown"):
        dispatcher.shutdown()
    app.extensions["feasibility.db"]["engine"].dispose()
    if admin is not None:
        with admin.connect() as connection:
            connection.execute(text(f'DROP DATABASE IF EXISTS "{name}" WITH (FORCE)'))
        admin.dispose()



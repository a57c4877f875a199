"""The store: SQLite settings, migrations that match the models, demo seeding."""

from __future__ import annotations

from pathlib import Path

import pytest
from alembic.autogenerate import compare_metadata
from alembic.migration import MigrationContext
from flask import Flask
from sqlalchemy import func, inspect, select, text

from feasibility.store.db import get_engine, make_engine, session_scope
from feasibility.store.migrate import upgrade
from feasibility.store.models import Base, ObservatoryVersion, ScheduleVersion


def test_sqlite_runs_in_wal_mode_with_a_busy_timeout(tmp_path: Path) -> None:
    engine = make_engine(f"sqlite:///{tmp_path / 'x.sqlite'}")
    with engine.connect() as connection:
        # SQLite documentation, "PRAGMA journal_mode": the pragma returns the new mode, "wal".
        assert connection.execute(text("PRAGMA journal_mode")).scalar() == "wal"
        assert connection.execute(text("PRAGMA busy_timeout")).scalar() == 30000
        assert connection.execute(text("PRAGMA foreign_keys")).scalar() == 1
    engine.dispose()


@pytest.mark.parametrize("store", ["sqlite", "postgresql"])
def test_migrations_build_exactly_the_models(store: str, tmp_path: Path, request: pytest.FixtureRequest) -> None:
    url = f"sqlite:///{tmp_path / 'migrated.sqlite'}" if store == "sqlite" else request.getfixturevalue("new_postgres_database")
    upgrade(url)
    engine = make_engine(url)
    with engine.connect() as connection:
        # Alembic's own comparison of a database with the models: no difference left.
        assert compare_metadata(MigrationContext.configure(connection), Base.metadata) == []
    assert "alembic_version" in inspect(engine).get_table_names()
    engine.dispose()


def test_demo_observatory_is_loaded_once(app: Flask) -> None:
    from feasibility.web import create_app

    again = create_app({"DATABASE_URL": app.config["DATABASE_URL"], "SWEEP_INTERVAL_S": 0})
    with again.app_context(), session_scope() as session:
        assert session.scalar(select(func.count()).select_from(ObservatoryVersion)) == 1
        assert session.scalar(select(func.count()).select_from(ScheduleVersion)) >= 1
        assert get_engine() is again.extensions["feasibility.db"]["engine"]
    again.extensions["feasibility.db"]["engine"].dispose()


def test_read_only_sessions_refuse_writes_and_stream_in_batches(app: Flask) -> None:
    # PostgreSQL: "cannot execute DELETE in a read-only transaction" (SQLSTATE 25006, read_only_sql_transaction);
    # SQLite: "attempt to write a readonly database" (PRAGMA query_only). Either way the write fails at once.
    from sqlalchemy.exc import DBAPIError

    from feasibility.store.models import User

    with app.app_context():
        with session_scope() as session:
            session.add_all(User(name=f"user-{i}", role="proposer") for i in range(7))
        with pytest.raises(DBAPIError, match="read-only transaction|readonly database"), session_scope(read_only=True) as session:
            session.execute(text("DELETE FROM users"))
        with session_scope(read_only=True) as session:
            # yield_per streams (a server-side cursor on PostgreSQL, which needs a transaction block)
            names = [user.name for user in session.scalars(select(User).order_by(User.id).execution_options(yield_per=3))]
        assert names == [f"user-{i}" for i in range(7)]
        with session_scope() as session:  # the same pooled connection writes again afterwards
            session.execute(text("DELETE FROM users"))
            assert session.scalar(select(func.count()).select_from(User)) == 0

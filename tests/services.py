"""The test services' addresses, the rule for a missing service, and throw-away PostgreSQL databases.

Used by tests/conftest.py and tests/integration/conftest.py alike: outside CI a test
whose service cannot be reached is skipped; under CI=true it fails (a missing service
never passes CI).
"""

from __future__ import annotations

import os
import uuid
from collections.abc import Iterator
from contextlib import contextmanager

import pytest

POSTGRES_URL = os.environ.get("TEST_POSTGRES_URL", "postgresql+psycopg://postgres@127.0.0.1:5432/postgres")
REDIS_URL = os.environ.get("TEST_REDIS_URL", "redis://127.0.0.1:6379/0")
IN_CI = os.environ.get("CI", "").lower() in ("1", "true", "yes")


def service_unavailable(what: str, error: BaseException) -> None:
    """Skip the test because ``what`` cannot be reached — or fail it when CI is set (a missing service never passes CI)."""
    message = f"{what} is not reachable: {error}"
    if IN_CI:
        pytest.fail(f"{message} (CI is set: the service is required)", pytrace=False)
    pytest.skip(message)


@contextmanager
def scratch_postgres_database(*, timezone: str | None = None) -> Iterator[str]:
    """The URL of a new, uniquely named, empty PostgreSQL database, dropped (WITH FORCE) when the block ends.

    ``timezone`` sets the database's session time zone (a zone far from UTC makes naive-UTC mistakes show).
    """
    from sqlalchemy import create_engine, text
    from sqlalchemy.engine import make_url
    from sqlalchemy.pool import NullPool

    admin = create_engine(POSTGRES_URL, isolation_level="AUTOCOMMIT", poolclass=NullPool)
    name = f"feasibility_test_{uuid.uuid4().hex[:12]}"
    try:
        with admin.connect() as connection:
            connection.execute(text(f'CREATE DATABASE "{name}"'))
            if timezone:
                connection.execute(text(f"ALTER DATABASE \"{name}\" SET timezone TO '{timezone}'"))
    except Exception as exc:  # noqa: BLE001 - any connection failure means "not available"
        admin.dispose()
        service_unavailable(f"PostgreSQL at {POSTGRES_URL}", exc)
    try:
        yield make_url(POSTGRES_URL).set(database=name).render_as_string(hide_password=False)
    finally:
        with admin.connect() as connection:
            connection.execute(text(f'DROP DATABASE IF EXISTS "{name}" WITH (FORCE)'))
        admin.dispose()

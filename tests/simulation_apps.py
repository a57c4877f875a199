"""Fixtures of the simulation API and page tests: a private sky-grid cache.

The app is the shared, parametrised one of tests/conftest.py: every API and page test runs on SQLite and PostgreSQL.
"""

from __future__ import annotations

import os
from collections.abc import Iterator

import pytest

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

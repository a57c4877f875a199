"""Shared fixtures: ``app``, ``client`` and ``runner`` on a fresh SQLite store per test, and API tokens.

The app has the demo observatory and schedule loaded and an embedded pool of
check workers (started on first use, stopped after the test).
"""

from __future__ import annotations

from collections.abc import Callable, Iterator
from pathlib import Path

import pytest
from click.testing import CliRunner, Result
from flask import Flask
from flask.testing import FlaskClient


@pytest.fixture
def app(tmp_path: Path) -> Iterator[Flask]:
    """The web app on a new SQLite file, embedded workers, no periodic sweeper."""
    from feasibility.web import create_app

    app = create_app(
        {
            "TESTING": True,
            "SECRET_KEY": "test",
            "DATABASE_URL": f"sqlite:///{tmp_path / 'feasibility.sqlite'}",
            "CREATE_TABLES": True,
            "BROKER_URL": None,
            "SWEEP_INTERVAL_S": 0,
        }
    )
    yield app
    dispatcher = app.extensions["feasibility.dispatch"]
    if hasattr(dispatcher, "shutdown"):
        dispatcher.shutdown()
    app.extensions["feasibility.db"]["engine"].dispose()


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

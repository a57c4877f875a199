"""The service's commands: tokens, users, db upgrade."""

from __future__ import annotations

from flask import Flask
from flask.testing import FlaskClient
from sqlalchemy import select

from feasibility.store.db import session_scope
from feasibility.store.models import ApiToken, User
from feasibility.web.auth import check_password, hash_token

from .helpers import auth


def test_token_create_prints_a_working_token_stored_only_hashed(app: Flask, client: FlaskClient, runner) -> None:  # type: ignore[no-untyped-def]
    result = runner.invoke(["token", "create", "--user", "rita", "--role", "reviewer"])
    assert result.exit_code == 0, result.output
    token = result.output.strip()
    assert len(token) > 40
    with app.app_context(), session_scope() as session:
        stored = session.scalars(select(ApiToken.token_hash)).all()
    # FIPS 180-4 SHA-256 gives 256 bits: 64 hex digits; the token itself is not stored.
    assert stored == [hash_token(token)] and len(stored[0]) == 64 and token not in stored
    assert client.get("/api/v1/me", headers=auth(token)).json == {"name": "rita", "role": "reviewer"}


def test_token_for_unknown_user_without_role_exits_2(runner) -> None:  # type: ignore[no-untyped-def]
    result = runner.invoke(["token", "create", "--user", "nobody"])
    assert result.exit_code == 2 and "--user" in result.output


def test_user_create_with_password(app: Flask, runner) -> None:  # type: ignore[no-untyped-def]
    result = runner.invoke(["user", "create", "paula", "--role", "proposer", "--password"], input="s3cret-pass\ns3cret-pass\n")
    assert result.exit_code == 0, result.output
    with app.app_context(), session_scope() as session:
        user = session.scalar(select(User).where(User.name == "paula"))
        assert user is not None and user.password_hash and "s3cret-pass" not in user.password_hash
        assert check_password(user, "s3cret-pass") and not check_password(user, "wrong")
    again = runner.invoke(["user", "create", "paula", "--role", "proposer"])
    assert again.exit_code == 2


def test_db_upgrade_on_a_fresh_store(tmp_path, runner, database_url, request) -> None:  # type: ignore[no-untyped-def]
    fresh = f"sqlite:///{tmp_path / 'fresh.sqlite'}" if database_url.startswith("sqlite") else request.getfixturevalue("new_postgres_database")
    runner.env["DATABASE_URL"] = fresh
    result = runner.invoke(["db", "upgrade"])
    assert result.exit_code == 0, result.output
    assert "head" in result.output

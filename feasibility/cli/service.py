"""Commands that administer the service: ``db upgrade``, ``token create``, ``user create`` (``serve`` is :mod:`feasibility.cli.serve`).

The ``token`` and ``user`` groups also get the commands of :mod:`feasibility.cli.access` (list, revoke, set-password).
"""

from __future__ import annotations

import sys

import click
from sqlalchemy import select

from feasibility.service.access import ROLES

__all__ = ["register", "safe_url"]


def register(main: click.Group) -> None:
    """Attach this module's commands to the ``feasibility`` group."""
    from feasibility.cli.serve import serve

    main.add_command(serve)
    main.add_command(db_group)
    main.add_command(token_group)
    main.add_command(user_group)
    from feasibility.cli import access

    access.attach(token_group, user_group)


@click.group("db")
def db_group() -> None:
    """The store's schema."""


@db_group.command("upgrade")
@click.option("--revision", default="head", show_default=True, help="Alembic revision to upgrade to.")
@click.option("--no-demo", is_flag=True, help="Do not load the demo observatory into an empty store.")
def db_upgrade(revision: str, no_demo: bool) -> None:
    """Create or upgrade the tables of the store at DATABASE_URL (default: SQLite in ./instance)."""
    from feasibility.cli.command_app import command_runtime
    from feasibility.settings import load_settings
    from feasibility.store.migrate import upgrade

    url = load_settings().store_url()
    upgrade(url, revision)
    if not no_demo:
        with command_runtime(seed_demo=True):
            pass  # loading the demo observatory is part of starting the runtime
    click.echo(f"Store at {safe_url(url)} is at revision {revision}.")


@click.group("token")
def token_group() -> None:
    """API tokens."""


@token_group.command("create")
@click.option("--user", "user_name", required=True, help="The user the token belongs to (created if missing when --role is given).")
@click.option("--role", type=click.Choice(ROLES), help="Role for a new user.")
@click.option("--label", default=None, help="A note on what the token is for.")
def token_create(user_name: str, role: str | None, label: str | None) -> None:
    """Make an API token and print it once; only its hash is stored."""
    from feasibility.cli.command_app import command_runtime
    from feasibility.service.accounts import create_token, create_user
    from feasibility.store.db import session_scope
    from feasibility.store.models import User

    with command_runtime(), session_scope() as session:
        user = session.scalar(select(User).where(User.name == user_name))
        if user is None:
            if role is None:
                _fail(f"--user: no user named {user_name!r}; give --role to create one")
            user = create_user(session, user_name, role)  # type: ignore[arg-type]
        elif role is not None and role != user.role:
            _fail(f"--role: {user_name!r} has the role {user.role!r}, not {role!r}")
        token = create_token(session, user, label)
    click.echo(token)


@click.group("user")
def user_group() -> None:
    """Users of the dashboard and the API."""


@user_group.command("create")
@click.argument("name")
@click.option("--role", type=click.Choice(ROLES), required=True)
@click.option("--email", default=None)
@click.option("--password", is_flag=True, help="Ask for a password (for signing in to the dashboard).")
def user_create(name: str, role: str, email: str | None, password: bool) -> None:
    """Create a user; with --password, ask for a password (stored as a salted hash)."""
    from feasibility.cli.command_app import command_runtime
    from feasibility.service.accounts import create_user, password_problem
    from feasibility.store.db import session_scope

    secret = click.prompt("Password", hide_input=True, confirmation_prompt=True) if password else None
    if secret is not None and (problem := password_problem(secret)) is not None:
        _fail(f"password: {problem}")
    with command_runtime(), session_scope() as session:
        try:
            create_user(session, name, role, password=secret, email=email)
        except ValueError as exc:
            _fail(f"NAME: {exc}")
    click.echo(f"User {name} ({role}) created.")


def safe_url(url: str) -> str:
    """A database URL without its password."""
    from sqlalchemy.engine import make_url

    return make_url(url).render_as_string(hide_password=True)


def _fail(message: str) -> None:
    click.echo(f"error: {message}", err=True)
    sys.exit(2)

"""Commands that run and administer the service: ``serve``, ``db upgrade``, ``token create``, ``user create``.

The ``token`` and ``user`` groups also get the commands of :mod:`feasibility.cli.access` (list, revoke, set-password).
"""

from __future__ import annotations

import sys

import click
from sqlalchemy import func, select

from feasibility.service.access import ROLES

__all__ = ["register"]


def register(main: click.Group) -> None:
    """Attach this module's commands to the ``feasibility`` group."""
    main.add_command(serve)
    main.add_command(db_group)
    main.add_command(token_group)
    main.add_command(user_group)
    from feasibility.cli import access

    access.attach(token_group, user_group)


@click.command()
@click.option("--host", default="127.0.0.1", show_default=True, help="Address to listen on.")
@click.option("--port", default=5000, show_default=True, type=click.IntRange(0, 65535), help="Port to listen on (0: any free port).")
@click.option("--workers", default=2, show_default=True, type=click.IntRange(1, 32), help="Embedded check workers (threads).")
@click.option("--demo", is_flag=True, help="Also submit the demo proposals and a generated semester, and make a reviewer, a proposer and an admin to sign in as.")
def serve(host: str, port: int, workers: int, demo: bool) -> None:
    """Run the service on this machine: store (SQLite by default), embedded workers, API and pages.

    The store is upgraded and the demo observatory loaded when empty. With no
    user yet, an admin token is made and printed once.
    """
    from werkzeug.serving import make_server

    from feasibility.store.db import default_database_url
    from feasibility.store.migrate import upgrade
    from feasibility.web import create_app

    url = default_database_url()
    upgrade(url)
    settings: dict[str, object] = {"EMBEDDED_WORKERS": workers}
    if demo and _loopback(host) and not _cookie_security_set():
        settings["SESSION_COOKIE_SECURE"] = False  # the demo on this machine is plain http; nobody else can reach it
    app = create_app(settings)
    with app.app_context():
        _first_admin_token()
        if demo:
            from feasibility.cli.demo import seed_demo_store

            seed_demo_store()
    dispatcher = app.extensions["feasibility.dispatch"]
    if hasattr(dispatcher, "start"):
        dispatcher.start()
    server = make_server(host, port, app, threaded=True)
    mode = "Celery workers via BROKER_URL" if app.config["BROKER_URL"] else f"{workers} embedded workers"
    click.echo(f"Serving on http://{host}:{server.server_port}/  (dashboard: /, API: /api/v1, store: {_safe(app.config['DATABASE_URL'])}, {mode})")
    if app.config["SESSION_COOKIE_SECURE"]:
        click.echo("The dashboard's cookie is sent over https only: sign in through an https proxy, "
                   "or set FEASIBILITY_SESSION_COOKIE_SECURE=false on a closed network.")
    click.echo("Press Ctrl+C to stop.")
    try:
        server.serve_forever()
    except KeyboardInterrupt:
        pass
    finally:
        server.server_close()
        if hasattr(dispatcher, "shutdown"):
            dispatcher.shutdown()


@click.group("db")
def db_group() -> None:
    """The store's schema."""


@db_group.command("upgrade")
@click.option("--revision", default="head", show_default=True, help="Alembic revision to upgrade to.")
@click.option("--no-demo", is_flag=True, help="Do not load the demo observatory into an empty store.")
def db_upgrade(revision: str, no_demo: bool) -> None:
    """Create or upgrade the tables of the store at DATABASE_URL (default: SQLite in ./instance)."""
    from feasibility.cli.command_app import command_app
    from feasibility.store.db import default_database_url
    from feasibility.store.migrate import upgrade

    url = default_database_url()
    upgrade(url, revision)
    if not no_demo:
        with command_app(SEED_DEMO=True):
            pass  # loading the demo observatory is part of making the app
    click.echo(f"Store at {_safe(url)} is at revision {revision}.")


@click.group("token")
def token_group() -> None:
    """API tokens."""


@token_group.command("create")
@click.option("--user", "user_name", required=True, help="The user the token belongs to (created if missing when --role is given).")
@click.option("--role", type=click.Choice(ROLES), help="Role for a new user.")
@click.option("--label", default=None, help="A note on what the token is for.")
def token_create(user_name: str, role: str | None, label: str | None) -> None:
    """Make an API token and print it once; only its hash is stored."""
    from feasibility.cli.command_app import command_app
    from feasibility.store.db import session_scope
    from feasibility.store.models import User
    from feasibility.web.auth import create_token, create_user

    with command_app(), session_scope() as session:
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
    from feasibility.cli.command_app import command_app
    from feasibility.store.db import session_scope
    from feasibility.web.auth import create_user, password_problem

    secret = click.prompt("Password", hide_input=True, confirmation_prompt=True) if password else None
    if secret is not None and (problem := password_problem(secret)) is not None:
        _fail(f"password: {problem}")
    with command_app(), session_scope() as session:
        try:
            create_user(session, name, role, password=secret, email=email)
        except ValueError as exc:
            _fail(f"NAME: {exc}")
    click.echo(f"User {name} ({role}) created.")


def _first_admin_token() -> None:
    from feasibility.store.db import session_scope
    from feasibility.store.models import User
    from feasibility.web.auth import create_token, create_user

    with session_scope() as session:
        if session.scalar(select(func.count()).select_from(User)):
            return
        admin = create_user(session, "admin", "admin")
        token = create_token(session, admin, "made by the first `feasibility serve`")
    click.echo(f"Admin API token (shown once; keep it): {token}")


def _loopback(host: str) -> bool:
    """Whether ``host`` is this machine only (localhost, 127.0.0.0/8, ::1)."""
    import ipaddress

    if host.lower() in ("localhost", "localhost."):
        return True
    try:
        return ipaddress.ip_address(host.strip("[]")).is_loopback
    except ValueError:
        return False


def _cookie_security_set() -> bool:
    """Whether the environment sets the cookie's Secure flag itself (then ``serve --demo`` leaves it alone)."""
    import os

    return "SESSION_COOKIE_SECURE" in os.environ or "FEASIBILITY_SESSION_COOKIE_SECURE" in os.environ


def _safe(url: str) -> str:
    """A database URL without its password."""
    from sqlalchemy.engine import make_url

    return make_url(url).render_as_string(hide_password=True)


def _fail(message: str) -> None:
    click.echo(f"error: {message}", err=True)
    sys.exit(2)

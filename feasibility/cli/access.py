"""Commands that take access away or change it: ``token list``, ``token revoke``, ``user set-password``.

They attach to the ``token`` and ``user`` groups of :mod:`feasibility.cli.service`.
Bad input exits with status 2 and one line naming the option and the problem.
"""

from __future__ import annotations

import sys
from typing import TYPE_CHECKING, NoReturn

import click
from sqlalchemy import select

from feasibility.cli.command_app import command_runtime

if TYPE_CHECKING:
    from sqlalchemy.orm import Session

    from feasibility.store.models import User

__all__ = ["attach"]


def attach(token_group: click.Group, user_group: click.Group) -> None:
    """Add this module's commands to the ``token`` and ``user`` groups."""
    token_group.add_command(token_list)
    token_group.add_command(token_revoke)
    user_group.add_command(user_set_password)


@click.command("list")
@click.option("--user", "user_name", default=None, help="Only this user's tokens.")
def token_list(user_name: str | None) -> None:
    """List API tokens: id, user, note, when made and, if so, when revoked (the tokens themselves are never stored)."""
    from feasibility.store.db import session_scope
    from feasibility.store.models import ApiToken, User

    with command_runtime(seed_demo=False), session_scope(read_only=True) as session:
        query = select(ApiToken, User.name).join(User, User.id == ApiToken.user_id).order_by(ApiToken.id)
        if user_name is not None:
            _user_named(session, user_name, "--user")
            query = query.where(User.name == user_name)
        rows = session.execute(query).all()
        for token, name in rows:
            state = f"revoked {token.revoked_at:%Y-%m-%d %H:%M}" if token.revoked_at else "live"
            click.echo(f"{token.id}\t{name}\t{token.label or '-'}\tmade {token.created_at:%Y-%m-%d %H:%M}\t{state}")
    if not rows:
        click.echo("No tokens.")


@click.command("revoke")
@click.option("--id", "token_id", type=int, default=None, help="The token's id (see `feasibility token list`).")
@click.option("--user", "user_name", default=None, help="Revoke every token of this user.")
def token_revoke(token_id: int | None, user_name: str | None) -> None:
    """Revoke one API token by its id, or every token of a user; print what was revoked."""
    from feasibility.service.accounts import revoke_tokens
    from feasibility.store.db import session_scope
    from feasibility.store.models import ApiToken

    if (token_id is None) == (user_name is None):
        _fail("give --id or --user (one of them)")
    with command_runtime(seed_demo=False), session_scope() as session:
        if token_id is not None:
            token = session.get(ApiToken, token_id)
            if token is None:
                _fail(f"--id: no token with id {token_id}")
            if token.revoked_at is not None:
                click.echo(f"Token {token.id} of {token.user.name} was revoked already ({token.revoked_at:%Y-%m-%d %H:%M}).")
                return
            revoked = revoke_tokens(session, token_id=token_id)
            owner = token.user.name
        else:
            assert user_name is not None
            revoked = revoke_tokens(session, user=_user_named(session, user_name, "--user"))
            owner = user_name
        for token in revoked:
            click.echo(f"Revoked token {token.id} of {owner}" + (f" ({token.label})" if token.label else "") + ".")
    if not revoked:
        click.echo(f"{owner} had no live token; nothing revoked.")


@click.command("set-password")
@click.argument("name")
@click.option("--from-stdin", is_flag=True, help="Read the new password from the first line of standard input (for scripts).")
def user_set_password(name: str, from_stdin: bool) -> None:
    """Give a user a new password (asked twice, or read from standard input) and end their dashboard sessions."""
    from feasibility.service.accounts import password_problem, set_password
    from feasibility.store.db import session_scope

    with command_runtime(seed_demo=False):
        with session_scope(read_only=True) as session:
            _user_named(session, name, "NAME")  # before asking for a password
        if from_stdin:
            password = sys.stdin.readline().rstrip("\r\n")
        else:
            password = click.prompt("New password", hide_input=True, confirmation_prompt="Repeat it")
        if (problem := password_problem(password)) is not None:
            _fail(f"password: {problem}")
        with session_scope() as session:
            ended = set_password(session, _user_named(session, name, "NAME"), password)
    click.echo(f"Password of {name} changed; {ended} dashboard session{'' if ended == 1 else 's'} ended.")


def _user_named(session: Session, name: str, field: str) -> User:
    """The user called ``name``; exit 2 naming ``field`` when there is none."""
    from feasibility.store.models import User

    user = session.scalar(select(User).where(User.name == name))
    if user is None:
        _fail(f"{field}: no user named {name!r}")
    assert user is not None
    return user


def _fail(message: str) -> NoReturn:
    click.echo(f"error: {message}", err=True)
    sys.exit(2)

"""Taking access away from the command line: ``token list``, ``token revoke``, ``user set-password``."""

from __future__ import annotations

import re

from flask import Flask
from flask.testing import FlaskClient

from .helpers import auth


def _sign_in(client: FlaskClient, name: str, password: str) -> int:
    form = client.get("/sign-in").get_data(as_text=True)
    token = re.search(r'name="csrf_token" value="([^"]+)"', form)
    assert token is not None
    return client.post("/sign-in", data={"name": name, "password": password, "csrf_token": token.group(1)}).status_code


def _make_token(runner, user: str, label: str, role: str = "reviewer") -> str:  # type: ignore[no-untyped-def]
    result = runner.invoke(["token", "create", "--user", user, "--role", role, "--label", label])
    assert result.exit_code == 0, result.output
    return result.output.strip()


def test_token_revoke_by_id_ends_that_token_only(client: FlaskClient, runner) -> None:  # type: ignore[no-untyped-def]
    first, second = _make_token(runner, "rita", "laptop"), _make_token(runner, "rita", "script")
    listed = runner.invoke(["token", "list", "--user", "rita"])
    assert listed.exit_code == 0, listed.output
    ids = [int(line.split("\t")[0]) for line in listed.output.splitlines()]
    assert len(ids) == 2 and "laptop" in listed.output and "live" in listed.output

    result = runner.invoke(["token", "revoke", "--id", str(ids[0])])
    assert result.exit_code == 0, result.output
    assert result.output.strip() == f"Revoked token {ids[0]} of rita (laptop)."
    assert client.get("/api/v1/me", headers=auth(first)).status_code == 401
    assert client.get("/api/v1/me", headers=auth(second)).status_code == 200
    again = runner.invoke(["token", "revoke", "--id", str(ids[0])])
    assert again.exit_code == 0 and "revoked already" in again.output
    assert "revoked" in runner.invoke(["token", "list"]).output


def test_token_revoke_by_user_ends_all_their_tokens(client: FlaskClient, runner) -> None:  # type: ignore[no-untyped-def]
    tokens = [_make_token(runner, "portal-1", "a", "portal"), _make_token(runner, "portal-1", "b", "portal")]
    other = _make_token(runner, "rita", "mine")
    result = runner.invoke(["token", "revoke", "--user", "portal-1"])
    assert result.exit_code == 0, result.output
    assert len(result.output.strip().splitlines()) == 2 and "(a)" in result.output and "(b)" in result.output
    for token in tokens:
        assert client.get("/api/v1/me", headers=auth(token)).status_code == 401
    assert client.get("/api/v1/me", headers=auth(other)).status_code == 200
    assert "nothing revoked" in runner.invoke(["token", "revoke", "--user", "portal-1"]).output


def test_token_revoke_bad_input_exits_2_naming_the_option(runner) -> None:  # type: ignore[no-untyped-def]
    _make_token(runner, "rita", "x")
    for args, field in (
        (["--id", "999"], "--id"),
        (["--user", "nobody"], "--user"),
        ([], "--id or --user"),
        (["--id", "1", "--user", "rita"], "--id or --user"),
    ):
        result = runner.invoke(["token", "revoke", *args])
        assert result.exit_code == 2 and field in result.output, (args, result.output)
        assert "Traceback" not in result.output


def test_set_password_asks_twice_and_ends_sessions(app: Flask, runner) -> None:  # type: ignore[no-untyped-def]
    assert runner.invoke(["user", "create", "rita", "--role", "reviewer", "--password"], input="first-pass\nfirst-pass\n").exit_code == 0
    browser = app.test_client()
    assert _sign_in(browser, "rita", "first-pass") == 302
    copy = app.test_client()
    copy.set_cookie("session", browser.get_cookie("session").value)  # type: ignore[union-attr]
    assert copy.get("/proposals").status_code == 200

    result = runner.invoke(["user", "set-password", "rita"], input="second-pass\nsecond-pass\n")
    assert result.exit_code == 0, result.output
    assert "Password of rita changed; 1 dashboard session ended." in result.output
    assert "second-pass" not in result.output  # hidden input is not echoed
    assert browser.get("/proposals").status_code == 302 and copy.get("/proposals").status_code == 302
    assert _sign_in(app.test_client(), "rita", "first-pass") == 401
    assert _sign_in(app.test_client(), "rita", "second-pass") == 302


def test_set_password_from_stdin_for_scripts(app: Flask, runner) -> None:  # type: ignore[no-untyped-def]
    assert runner.invoke(["user", "create", "ada", "--role", "admin"]).exit_code == 0
    result = runner.invoke(["user", "set-password", "ada", "--from-stdin"], input="scripted passphrase\n")
    assert result.exit_code == 0, result.output
    assert _sign_in(app.test_client(), "ada", "scripted passphrase") == 302


def test_set_password_bad_input_exits_2(runner) -> None:  # type: ignore[no-untyped-def]
    runner.invoke(["user", "create", "ada", "--role", "admin"])
    short = runner.invoke(["user", "set-password", "ada", "--from-stdin"], input="short\n")
    # NIST SP 800-63B section 5.1.1.2: at least 8 characters (docs/references.md).
    assert short.exit_code == 2 and "password: must be at least 8 characters long" in short.output
    unknown = runner.invoke(["user", "set-password", "nobody", "--from-stdin"], input="long enough\n")
    assert unknown.exit_code == 2 and "NAME: no user named 'nobody'" in unknown.output

"""The ``feasibility`` command: one click group, one module per group of subcommands.

Bad input exits with status 2 and a message naming the field; no traceback.
"""

from __future__ import annotations

import click

__all__ = ["main"]


@click.group(context_settings={"help_option_names": ["-h", "--help"]})
@click.version_option(package_name="feasibility")
@click.pass_context
def main(ctx: click.Context) -> None:
    """Technical feasibility checks of telescope proposals over a whole semester."""
    from feasibility.logs import configure_logging
    from feasibility.settings import SettingsError, load_settings
    from feasibility.store import db

    try:
        settings = load_settings()
    except SettingsError as exc:
        click.echo(f"error: {exc}", err=True)
        ctx.exit(2)
    configure_logging(settings.log_level or "WARNING")

    # Close the store connections this command opened when it ends, rather than dropping
    # them (PostgreSQL logs a dropped connection; a host process, such as a test, keeps going).
    before = db.live_engines()
    ctx.call_on_close(lambda: db.dispose_engines(db.live_engines() - before))


def _register() -> None:
    """Attach every subcommand module's commands to :func:`main`. Each module exposes ``register(main)``."""
    from importlib import import_module

    for name in _COMMAND_MODULES:
        import_module(f"feasibility.cli.{name}").register(main)


# One line per module; a module registers its own commands.
_COMMAND_MODULES: list[str] = ["check", "service", "schedules", "simulate"]

_register()

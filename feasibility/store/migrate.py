"""Running the Alembic migrations (top-level ``migrations/``) against a database URL."""

from __future__ import annotations

from pathlib import Path

from alembic import command
from alembic.config import Config

from feasibility.settings import Settings, load_settings

__all__ = ["alembic_config", "migrations_dir", "upgrade"]


def migrations_dir(settings: Settings | None = None) -> Path:
    """The migrations folder: the settings' ``migrations`` (FEASIBILITY_MIGRATIONS), or ``migrations/`` beside the package."""
    override = (settings or load_settings()).migrations
    if override:
        return override
    here = Path(__file__).resolve().parents[2] / "migrations"
    if not (here / "env.py").is_file():
        raise FileNotFoundError(f"no Alembic migrations at {here}; install the project with `pip install -e .` or set FEASIBILITY_MIGRATIONS")
    return here


def alembic_config(url: str) -> Config:
    """An Alembic configuration for ``url`` without an alembic.ini file."""
    config = Config()
    config.set_main_option("script_location", str(migrations_dir()))
    config.attributes["database_url"] = url
    return config


def upgrade(url: str, revision: str = "head") -> None:
    """Bring the database at ``url`` to ``revision``."""
    command.upgrade(alembic_config(url), revision)

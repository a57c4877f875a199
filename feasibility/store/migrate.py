"""Running the Alembic migrations (top-level ``migrations/``) against a database URL."""

from __future__ import annotations

from pathlib import Path

from alembic import command
from alembic.config import Config

from feasibility.settings import Settings, load_settings

__all__ = ["alembic_config", "migrations_dir", "upgrade"]


def migrations_dir(settings: Settings | None = None) -> Path:
    """The migrations folder: the settings' ``migrations`` (FEASIBILITY_MIGRATIONS); else as installed (``pip install .``
    puts the top-level ``migrations/`` at ``feasibility/store/migrations``, see setup.py); else ``migrations/`` of the
    source tree (an editable install)."""
    override = (settings or load_settings()).migrations
    if override:
        return Path(override)
    here = Path(__file__).resolve()
    for candidate in (here.parent / "migrations", here.parents[2] / "migrations"):
        if (candidate / "env.py").is_file():
            return candidate
    raise FileNotFoundError(f"no Alembic migrations beside {here.parent}; reinstall the project or set FEASIBILITY_MIGRATIONS")


def alembic_config(url: str) -> Config:
    """An Alembic configuration for ``url`` without an alembic.ini file."""
    config = Config()
    config.set_main_option("script_location", str(migrations_dir()))
    config.attributes["database_url"] = url
    return config


def upgrade(url: str, revision: str = "head") -> None:
    """Bring the database at ``url`` to ``revision``."""
    command.upgrade(alembic_config(url), revision)

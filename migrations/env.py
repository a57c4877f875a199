"""Alembic environment: the tables of feasibility.store.models, batch mode so SQLite can alter tables."""

from __future__ import annotations

from alembic import context

from feasibility.store.db import default_database_url, make_engine
from feasibility.store.models import Base, UTCDateTime

config = context.config
target_metadata = Base.metadata


def _url() -> str:
    return config.attributes.get("database_url") or config.get_main_option("sqlalchemy.url") or default_database_url()


def _render_item(kind: str, item: object, autogen_context: object) -> str | bool:
    """Write the store's UTC time type as the plain column type it is in the database."""
    if kind == "type" and isinstance(item, UTCDateTime):
        return "sa.DateTime(timezone=True)"
    return False


def run_migrations_offline() -> None:
    """Emit SQL without a database connection (``alembic upgrade --sql``)."""
    context.configure(url=_url(), target_metadata=target_metadata, literal_binds=True, render_as_batch=True, render_item=_render_item)
    with context.begin_transaction():
        context.run_migrations()


def run_migrations_online() -> None:
    """Migrate a live database, with the same engine settings as the service (SQLite WAL, busy timeout)."""
    engine = make_engine(_url())
    try:
        with engine.connect() as connection:
            context.configure(connection=connection, target_metadata=target_metadata, render_as_batch=True, compare_type=True, render_item=_render_item)
            with context.begin_transaction():
                context.run_migrations()
    finally:
        engine.dispose()


if context.is_offline_mode():
    run_migrations_offline()
else:
    run_migrations_online()

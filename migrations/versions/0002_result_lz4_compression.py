"""Compress stored results with LZ4 on PostgreSQL: faster than the default pglz for ~100 KB of JSON per run.

PostgreSQL 14 and later, when built with LZ4 (``default_toast_compression`` lists it);
elsewhere, and on SQLite, nothing changes. Only new values are compressed the new way.

Revision ID: 0002
Revises: 0001
Create Date: 2026-12-01 20:40:00
"""

from __future__ import annotations

from collections.abc import Sequence

import sqlalchemy as sa
from alembic import op

revision: str = "0002"
down_revision: str | None = "0001"
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None


def upgrade() -> None:
    if _lz4_available():
        op.execute("ALTER TABLE check_runs ALTER COLUMN result SET COMPRESSION lz4")


def downgrade() -> None:
    if _lz4_available():
        op.execute("ALTER TABLE check_runs ALTER COLUMN result SET COMPRESSION pglz")


def _lz4_available() -> bool:
    bind = op.get_bind()
    if bind.dialect.name != "postgresql" or bind.dialect.server_version_info < (14,):
        return False
    query = sa.text("SELECT 'lz4' = ANY(enumvals) FROM pg_settings WHERE name = 'default_toast_compression'")
    return bool(bind.execute(query).scalar())

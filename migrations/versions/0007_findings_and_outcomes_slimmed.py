"""Each fact of a check run in one place: finding rows keep check and level only, request rows no figures JSON.

A finding's message, suggestion, method and figures, and a request's figures, are
in the run's stored result (every form of it, older full ones included), which the
pages, the API, the packet and the re-check comparisons read; the rows only served
the lists' filters, which ask for findings that are not feasible. So the copies are
dropped, and so are the rows of feasible findings. Stored results are not touched.

Downgrade puts the columns back, empty (a message of '', figures '{}'): the results still hold the words.

Revision ID: 0007
Revises: 0006
Create Date: 2026-12-03 19:30:00
"""

from __future__ import annotations

from collections.abc import Sequence

import sqlalchemy as sa
from alembic import op

revision: str = "0007"
down_revision: str | None = "0006"
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None


def upgrade() -> None:
    op.execute("DELETE FROM findings WHERE level = 'feasible'")
    # ALTER TABLE ... DROP COLUMN on both stores (SQLite 3.35 and later): none of these columns is indexed or a key, so
    # SQLite need not copy the tables, which its foreign keys (request_outcomes is referenced by findings) would refuse.
    for column in ("message", "suggestion", "method", "figures"):
        op.drop_column("findings", column)
    op.drop_column("request_outcomes", "figures")


def downgrade() -> None:
    op.add_column("request_outcomes", sa.Column("figures", sa.JSON(), nullable=False, server_default="{}"))
    op.add_column("findings", sa.Column("message", sa.Text(), nullable=False, server_default=""))
    op.add_column("findings", sa.Column("suggestion", sa.Text(), nullable=True))
    op.add_column("findings", sa.Column("method", sa.Text(), nullable=True))
    op.add_column("findings", sa.Column("figures", sa.JSON(), nullable=False, server_default="{}"))

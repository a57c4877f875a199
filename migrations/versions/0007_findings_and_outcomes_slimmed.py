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
    with op.batch_alter_table("findings", schema=None) as batch_op:
        for column in ("message", "suggestion", "method", "figures"):
            batch_op.drop_column(column)
    with op.batch_alter_table("request_outcomes", schema=None) as batch_op:
        batch_op.drop_column("figures")


def downgrade() -> None:
    with op.batch_alter_table("request_outcomes", schema=None) as batch_op:
        batch_op.add_column(sa.Column("figures", sa.JSON(), nullable=False, server_default="{}"))
    with op.batch_alter_table("findings", schema=None) as batch_op:
        batch_op.add_column(sa.Column("message", sa.Text(), nullable=False, server_default=""))
        batch_op.add_column(sa.Column("suggestion", sa.Text(), nullable=True))
        batch_op.add_column(sa.Column("method", sa.Text(), nullable=True))
        batch_op.add_column(sa.Column("figures", sa.JSON(), nullable=False, server_default="{}"))

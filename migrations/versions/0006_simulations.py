"""Semester simulations (the chance of completion): one row per simulation asked for, its result as JSON.

Revision ID: 0006
Revises: 0005
Create Date: 2026-12-02 12:00:00
"""

from __future__ import annotations

from collections.abc import Sequence

import sqlalchemy as sa
from alembic import op

revision: str = "0006"
down_revision: str | None = "0005"
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None


def upgrade() -> None:
    op.create_table(
        "simulations",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("semester", sa.String(length=20), nullable=False),
        sa.Column("settings", sa.JSON(), nullable=False),
        sa.Column("state", sa.String(length=10), nullable=False),
        sa.Column("result", sa.JSON(), nullable=True),
        sa.Column("error", sa.Text(), nullable=True),
        sa.Column("requested_by", sa.Integer(), nullable=True),
        sa.Column("queued_at", sa.DateTime(timezone=True), nullable=False),
        sa.Column("started_at", sa.DateTime(timezone=True), nullable=True),
        sa.Column("finished_at", sa.DateTime(timezone=True), nullable=True),
        sa.ForeignKeyConstraint(["requested_by"], ["users.id"], name=op.f("fk_simulations_requested_by_users")),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_simulations")),
    )
    op.create_index(op.f("ix_simulations_semester"), "simulations", ["semester"], unique=False)


def downgrade() -> None:
    op.drop_index(op.f("ix_simulations_semester"), table_name="simulations")
    op.drop_table("simulations")

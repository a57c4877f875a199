"""Check runs carry a lease (expiry and holder, renewed while computing) and when their message was sent (the outbox).

Runs already in the store are taken as sent: their messages went out under the
old rules (the relay re-sends any that are lost).

Revision ID: 0003
Revises: 0002
Create Date: 2026-12-02 04:00:00
"""

from __future__ import annotations

from collections.abc import Sequence

import sqlalchemy as sa
from alembic import op

revision: str = "0003"
down_revision: str | None = "0002"
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None


def upgrade() -> None:
    with op.batch_alter_table("check_runs", schema=None) as batch_op:
        batch_op.add_column(sa.Column("dispatched_at", sa.DateTime(timezone=True), nullable=True))
        batch_op.add_column(sa.Column("lease_expires_at", sa.DateTime(timezone=True), nullable=True))
        batch_op.add_column(sa.Column("lease_owner", sa.String(length=100), nullable=True))
        batch_op.create_index("ix_check_runs_state_dispatched", ["state", "dispatched_at"], unique=False)
    op.execute("UPDATE check_runs SET dispatched_at = queued_at WHERE state IN ('queued', 'running')")


def downgrade() -> None:
    with op.batch_alter_table("check_runs", schema=None) as batch_op:
        batch_op.drop_index("ix_check_runs_state_dispatched")
        batch_op.drop_column("lease_owner")
        batch_op.drop_column("lease_expires_at")
        batch_op.drop_column("dispatched_at")

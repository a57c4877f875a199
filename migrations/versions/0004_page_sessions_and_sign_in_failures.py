"""Server-side dashboard sessions and the sign-in throttle's record of failures.

Revision ID: 0004
Revises: 0003
Create Date: 2026-12-02 10:00:00
"""

from __future__ import annotations

from collections.abc import Sequence

import sqlalchemy as sa
from alembic import op

revision: str = "0004"
down_revision: str | None = "0003"
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None


def upgrade() -> None:
    op.create_table(
        "page_sessions",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("id_hash", sa.String(length=64), nullable=False),
        sa.Column("user_id", sa.Integer(), nullable=False),
        sa.Column("password_stamp", sa.String(length=64), nullable=False),
        sa.Column("address", sa.String(length=64), nullable=True),
        sa.Column("created_at", sa.DateTime(timezone=True), nullable=False),
        sa.Column("expires_at", sa.DateTime(timezone=True), nullable=False),
        sa.Column("revoked_at", sa.DateTime(timezone=True), nullable=True),
        sa.ForeignKeyConstraint(["user_id"], ["users.id"], name=op.f("fk_page_sessions_user_id_users")),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_page_sessions")),
        sa.UniqueConstraint("id_hash", name=op.f("uq_page_sessions_id_hash")),
    )
    op.create_index(op.f("ix_page_sessions_user_id"), "page_sessions", ["user_id"], unique=False)
    op.create_index(op.f("ix_page_sessions_expires_at"), "page_sessions", ["expires_at"], unique=False)
    op.create_table(
        "sign_in_failures",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("account", sa.String(length=200), nullable=False),
        sa.Column("address", sa.String(length=64), nullable=False),
        sa.Column("failed_at", sa.DateTime(timezone=True), nullable=False),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_sign_in_failures")),
    )
    op.create_index("ix_sign_in_failures_account_failed_at", "sign_in_failures", ["account", "failed_at"], unique=False)
    op.create_index("ix_sign_in_failures_address_failed_at", "sign_in_failures", ["address", "failed_at"], unique=False)
    op.create_index(op.f("ix_sign_in_failures_failed_at"), "sign_in_failures", ["failed_at"], unique=False)


def downgrade() -> None:
    op.drop_index(op.f("ix_sign_in_failures_failed_at"), table_name="sign_in_failures")
    op.drop_index("ix_sign_in_failures_address_failed_at", table_name="sign_in_failures")
    op.drop_index("ix_sign_in_failures_account_failed_at", table_name="sign_in_failures")
    op.drop_table("sign_in_failures")
    op.drop_index(op.f("ix_page_sessions_expires_at"), table_name="page_sessions")
    op.drop_index(op.f("ix_page_sessions_user_id"), table_name="page_sessions")
    op.drop_table("page_sessions")

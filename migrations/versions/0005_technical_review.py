"""Technical review: reviewer assignments, reviewers' notes and decisions (append-only).

Revision ID: 0005
Revises: 0004
Create Date: 2026-12-09 10:00:00
"""

from __future__ import annotations

from collections.abc import Sequence

import sqlalchemy as sa
from alembic import op

revision: str = "0005"
down_revision: str | None = "0004"
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None


def upgrade() -> None:
    op.create_table(
        "review_assignments",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("proposal_ref", sa.Integer(), nullable=False),
        sa.Column("reviewer_id", sa.Integer(), nullable=False),
        sa.Column("assigned_by", sa.Integer(), nullable=False),
        sa.Column("assigned_at", sa.DateTime(timezone=True), nullable=False),
        sa.ForeignKeyConstraint(["proposal_ref"], ["proposals.id"], name=op.f("fk_review_assignments_proposal_ref_proposals")),
        sa.ForeignKeyConstraint(["reviewer_id"], ["users.id"], name=op.f("fk_review_assignments_reviewer_id_users")),
        sa.ForeignKeyConstraint(["assigned_by"], ["users.id"], name=op.f("fk_review_assignments_assigned_by_users")),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_review_assignments")),
    )
    op.create_index(op.f("ix_review_assignments_proposal_ref"), "review_assignments", ["proposal_ref"], unique=False)
    op.create_index(op.f("ix_review_assignments_reviewer_id"), "review_assignments", ["reviewer_id"], unique=False)
    op.create_table(
        "review_notes",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("proposal_ref", sa.Integer(), nullable=False),
        sa.Column("request_label", sa.String(length=80), nullable=True),
        sa.Column("author_id", sa.Integer(), nullable=False),
        sa.Column("text", sa.Text(), nullable=False),
        sa.Column("written_at", sa.DateTime(timezone=True), nullable=False),
        sa.ForeignKeyConstraint(["proposal_ref"], ["proposals.id"], name=op.f("fk_review_notes_proposal_ref_proposals")),
        sa.ForeignKeyConstraint(["author_id"], ["users.id"], name=op.f("fk_review_notes_author_id_users")),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_review_notes")),
    )
    op.create_index(op.f("ix_review_notes_proposal_ref"), "review_notes", ["proposal_ref"], unique=False)
    op.create_table(
        "review_decisions",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("proposal_ref", sa.Integer(), nullable=False),
        sa.Column("reviewer_id", sa.Integer(), nullable=False),
        sa.Column("kind", sa.String(length=10), nullable=False),
        sa.Column("verdict", sa.String(length=12), nullable=False),
        sa.Column("engine_verdict", sa.String(length=12), nullable=False),
        sa.Column("run_id", sa.Integer(), nullable=False),
        sa.Column("reason", sa.Text(), nullable=True),
        sa.Column("decided_at", sa.DateTime(timezone=True), nullable=False),
        sa.ForeignKeyConstraint(["proposal_ref"], ["proposals.id"], name=op.f("fk_review_decisions_proposal_ref_proposals")),
        sa.ForeignKeyConstraint(["reviewer_id"], ["users.id"], name=op.f("fk_review_decisions_reviewer_id_users")),
        sa.ForeignKeyConstraint(["run_id"], ["check_runs.id"], name=op.f("fk_review_decisions_run_id_check_runs")),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_review_decisions")),
    )
    op.create_index(op.f("ix_review_decisions_proposal_ref"), "review_decisions", ["proposal_ref"], unique=False)


def downgrade() -> None:
    op.drop_index(op.f("ix_review_decisions_proposal_ref"), table_name="review_decisions")
    op.drop_table("review_decisions")
    op.drop_index(op.f("ix_review_notes_proposal_ref"), table_name="review_notes")
    op.drop_table("review_notes")
    op.drop_index(op.f("ix_review_assignments_reviewer_id"), table_name="review_assignments")
    op.drop_index(op.f("ix_review_assignments_proposal_ref"), table_name="review_assignments")
    op.drop_table("review_assignments")

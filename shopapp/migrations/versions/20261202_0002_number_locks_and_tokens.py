"""number locks and submission tokens: race-free numbering and double-submit protection

Revision ID: 0002
Revises: 0001
Create Date: 2026-12-02
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
    op.create_table(
        "number_lock",
        sa.Column("key", sa.String(length=64), nullable=False),
        sa.Column("taken", sa.Integer(), nullable=False),
        sa.PrimaryKeyConstraint("key", name=op.f("pk_number_lock")),
    )
    op.create_table(
        "submission_token",
        sa.Column("token", sa.String(length=80), nullable=False),
        sa.Column("user_id", sa.Integer(), nullable=False),
        sa.Column("entity", sa.String(length=40), nullable=False),
        sa.Column("entity_id", sa.Integer(), nullable=False),
        sa.Column("created_at", sa.DateTime(timezone=True), nullable=False),
        sa.ForeignKeyConstraint(["user_id"], ["user_account.id"],
                                name=op.f("fk_submission_token_user_id_user_account"),
                                ondelete="RESTRICT"),
        sa.PrimaryKeyConstraint("token", name=op.f("pk_submission_token")),
    )
    with op.batch_alter_table("submission_token") as batch:
        batch.create_index(batch.f("ix_submission_token_user_id"), ["user_id"], unique=False)


def downgrade() -> None:
    with op.batch_alter_table("submission_token") as batch:
        batch.drop_index(batch.f("ix_submission_token_user_id"))
    op.drop_table("submission_token")
    op.drop_table("number_lock")

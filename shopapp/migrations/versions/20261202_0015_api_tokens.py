"""API tokens and idempotent replies: the JSON API's keys and its retry-safe writes (issue 14)

Revision ID: 0015
Revises: 0014
Create Date: 2026-12-02
"""

from __future__ import annotations

from collections.abc import Sequence

import sqlalchemy as sa
from alembic import op

revision: str = "0015"
down_revision: str | None = "0014"
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None


def upgrade() -> None:
    op.create_table(
        "api_token",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("user_id", sa.Integer(), nullable=False),
        sa.Column("name", sa.String(length=100), nullable=False),
        sa.Column("secret_sha256", sa.String(length=64), nullable=False),
        sa.Column("prefix", sa.String(length=16), nullable=False),
        sa.Column("created_at", sa.DateTime(timezone=True), nullable=False),
        sa.Column("created_by_id", sa.Integer(), nullable=True),
        sa.Column("last_used_at", sa.DateTime(timezone=True), nullable=True),
        sa.Column("revoked_at", sa.DateTime(timezone=True), nullable=True),
        sa.Column("revoked_by_id", sa.Integer(), nullable=True),
        sa.ForeignKeyConstraint(["user_id"], ["user_account.id"],
                                name=op.f("fk_api_token_user_id_user_account"),
                                ondelete="RESTRICT"),
        sa.ForeignKeyConstraint(["created_by_id"], ["user_account.id"],
                                name=op.f("fk_api_token_created_by_id_user_account"),
                                ondelete="SET NULL"),
        sa.ForeignKeyConstraint(["revoked_by_id"], ["user_account.id"],
                                name=op.f("fk_api_token_revoked_by_id_user_account"),
                                ondelete="SET NULL"),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_api_token")),
        sa.UniqueConstraint("secret_sha256", name=op.f("uq_api_token_secret_sha256")),
    )
    with op.batch_alter_table("api_token") as batch:
        batch.create_index(batch.f("ix_api_token_user_id"), ["user_id"], unique=False)
        batch.create_index(batch.f("ix_api_token_created_by_id"), ["created_by_id"],
                           unique=False)
        batch.create_index(batch.f("ix_api_token_revoked_by_id"), ["revoked_by_id"],
                           unique=False)
    op.create_table(
        "api_idempotent_reply",
        sa.Column("user_id", sa.Integer(), nullable=False),
        sa.Column("key", sa.String(length=200), nullable=False),
        sa.Column("request_sha256", sa.String(length=64), nullable=False),
        sa.Column("status", sa.Integer(), nullable=False),
        sa.Column("content_type", sa.String(length=100), nullable=False),
        sa.Column("body", sa.LargeBinary(), nullable=False),
        sa.Column("location", sa.Text(), nullable=False),
        sa.Column("created_at", sa.DateTime(timezone=True), nullable=False),
        sa.ForeignKeyConstraint(["user_id"], ["user_account.id"],
                                name=op.f("fk_api_idempotent_reply_user_id_user_account"),
                                ondelete="CASCADE"),
        sa.PrimaryKeyConstraint("user_id", "key", name=op.f("pk_api_idempotent_reply")),
    )
    with op.batch_alter_table("api_idempotent_reply") as batch:
        batch.create_index(batch.f("ix_api_idempotent_reply_user_id"), ["user_id"],
                           unique=False)


def downgrade() -> None:
    with op.batch_alter_table("api_idempotent_reply") as batch:
        batch.drop_index(batch.f("ix_api_idempotent_reply_user_id"))
    op.drop_table("api_idempotent_reply")
    with op.batch_alter_table("api_token") as batch:
        batch.drop_index(batch.f("ix_api_token_revoked_by_id"))
        batch.drop_index(batch.f("ix_api_token_created_by_id"))
        batch.drop_index(batch.f("ix_api_token_user_id"))
    op.drop_table("api_token")

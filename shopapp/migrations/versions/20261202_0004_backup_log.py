"""backup log: when each backup was written and each restore made

Revision ID: 0004
Revises: 0003
Create Date: 2026-12-02
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
        "backup_log",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("kind", sa.String(length=8), nullable=False),
        sa.Column("at", sa.DateTime(timezone=True), nullable=False),
        sa.Column("path", sa.Text(), nullable=False),
        sa.Column("size_bytes", sa.BigInteger(), nullable=False),
        sa.Column("sha256", sa.String(length=64), nullable=False),
        sa.Column("schema_revision", sa.String(length=32), nullable=False),
        sa.Column("row_count", sa.Integer(), nullable=False),
        sa.CheckConstraint("kind IN ('backup', 'restore')",
                           name=op.f("ck_backup_log_kind_allowed")),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_backup_log")),
    )
    with op.batch_alter_table("backup_log") as batch:
        batch.create_index(batch.f("ix_backup_log_at"), ["at"], unique=False)


def downgrade() -> None:
    with op.batch_alter_table("backup_log") as batch:
        batch.drop_index(batch.f("ix_backup_log_at"))
    op.drop_table("backup_log")

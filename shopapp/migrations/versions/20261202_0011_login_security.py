"""login security: per-user session version, failed log-in throttle

Revision ID: 0011
Revises: 0010
Create Date: 2026-12-02
"""

from __future__ import annotations

from collections.abc import Sequence

import sqlalchemy as sa
from alembic import op

revision: str = "0011"
down_revision: str | None = "0010"
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None


def upgrade() -> None:
    with op.batch_alter_table("user_account") as batch:
        batch.add_column(
            sa.Column("session_version", sa.Integer(), server_default="0", nullable=False)
        )
    op.create_table(
        "login_throttle",
        sa.Column("kind", sa.String(length=8), nullable=False),
        sa.Column("subject", sa.String(length=100), nullable=False),
        sa.Column("failures", sa.Integer(), nullable=False),
        sa.Column("last_failure_at", sa.DateTime(timezone=True), nullable=False),
        sa.Column("locked_until", sa.DateTime(timezone=True), nullable=True),
        sa.CheckConstraint("kind IN ('account', 'client')",
                           name=op.f("ck_login_throttle_kind_allowed")),
        sa.PrimaryKeyConstraint("kind", "subject", name=op.f("pk_login_throttle")),
    )
    with op.batch_alter_table("login_throttle") as batch:
        batch.create_index(batch.f("ix_login_throttle_locked_until"), ["locked_until"],
                           unique=False)


def downgrade() -> None:
    with op.batch_alter_table("login_throttle") as batch:
        batch.drop_index(batch.f("ix_login_throttle_locked_until"))
    op.drop_table("login_throttle")
    with op.batch_alter_table("user_account") as batch:
        batch.drop_column("session_version")

"""password set by an administrator: the user chooses an own one at the next log-in

Revision ID: 0025
Revises: 0024
Create Date: 2026-12-04

- user_account.must_change_password (false for every existing account: nobody is locked
  out of a shop by an upgrade).
"""

from __future__ import annotations

from collections.abc import Sequence

import sqlalchemy as sa
from alembic import op

revision: str = "0025"
down_revision: str | None = "0024"
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None


def upgrade() -> None:
    op.add_column("user_account", sa.Column("must_change_password", sa.Boolean(),
                                            nullable=False, server_default=sa.false()))


def downgrade() -> None:
    op.drop_column("user_account", "must_change_password")

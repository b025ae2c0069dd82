"""struck-out corrections: a correction recorded by mistake is struck out, not deleted

Revision ID: 0024
Revises: 0023
Create Date: 2026-12-03

- correction.struck_at / struck_by_id / struck_reason, with the CHECK
  ``struck_complete`` (when, by whom and why, or none of it), as run has since 0012.

SQLite: columns are added with ALTER TABLE ADD COLUMN (constraints inline), never by
batch mode: a batch copy of ``correction`` would drop its certificate guard triggers
(revision 0003, recreated by 0013). correction.struck_by_id has no ON DELETE clause,
for the reason given in 0012.
"""

from __future__ import annotations

from collections.abc import Sequence

import sqlalchemy as sa
from alembic import op

revision: str = "0024"
down_revision: str | None = "0023"
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None

STRUCK_COMPLETE = (
    "(struck_at IS NULL AND struck_by_id IS NULL AND struck_reason IS NULL) OR "
    "(struck_at IS NOT NULL AND struck_by_id IS NOT NULL AND struck_reason <> '')"
)

SQLITE_ADD = (
    "ALTER TABLE correction ADD COLUMN struck_at DATETIME",
    "ALTER TABLE correction ADD COLUMN struck_by_id INTEGER "
    "CONSTRAINT fk_correction_struck_by_id_user_account REFERENCES user_account (id)",
    "ALTER TABLE correction ADD COLUMN struck_reason TEXT "
    f"CONSTRAINT ck_correction_struck_complete CHECK ({STRUCK_COMPLETE})",
)


def upgrade() -> None:
    if op.get_bind().dialect.name == "sqlite":
        for sql in SQLITE_ADD:
            op.execute(sql)
    else:
        op.add_column("correction", sa.Column("struck_at", sa.DateTime(timezone=True),
                                              nullable=True))
        op.add_column("correction", sa.Column("struck_by_id", sa.Integer(), nullable=True))
        op.add_column("correction", sa.Column("struck_reason", sa.Text(), nullable=True))
        op.create_foreign_key("fk_correction_struck_by_id_user_account", "correction",
                              "user_account", ["struck_by_id"], ["id"])
        op.create_check_constraint("ck_correction_struck_complete", "correction",
                                   STRUCK_COMPLETE)
    op.create_index("ix_correction_struck_by_id", "correction", ["struck_by_id"], unique=False)


def downgrade() -> None:
    op.drop_index("ix_correction_struck_by_id", table_name="correction")
    if op.get_bind().dialect.name == "sqlite":
        # struck_reason's inline CHECK names the other struck columns: dropped first.
        for column in ("struck_reason", "struck_by_id", "struck_at"):
            op.execute(f"ALTER TABLE correction DROP COLUMN {column}")
        return
    op.drop_constraint("ck_correction_struck_complete", "correction", type_="check")
    op.drop_constraint("fk_correction_struck_by_id_user_account", "correction",
                       type_="foreignkey")
    for column in ("struck_reason", "struck_by_id", "struck_at"):
        op.drop_column("correction", column)

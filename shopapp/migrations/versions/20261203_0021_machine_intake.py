"""machine intake: per-machine column mappings and the imported files (issue 14 part 2)

Two new tables, nothing altered: a batch copy of run/correction/certificate would drop
their guard triggers on SQLite (see 0012 and 0013), so the intake keeps its own rows.

- machine_mapping: how one machine's export file reads (one per machine).
- imported_file: every imported file by the SHA-256 of its bytes (unique), so the same
  file is never imported twice.

Revision ID: 0021
Revises: 0020
Create Date: 2026-12-03
"""

from __future__ import annotations

from collections.abc import Sequence

import sqlalchemy as sa
from alembic import op

revision: str = "0021"
down_revision: str | None = "0020"
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None

READING_UNITS = "('um', 'mm/s', 'g·mm', 'mil', 'in/s')"


def upgrade() -> None:
    op.create_table(
        "machine_mapping",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("machine_id", sa.Integer(), nullable=False),
        sa.Column("delimiter", sa.String(length=1), nullable=False),
        sa.Column("decimal_mark", sa.String(length=1), nullable=False),
        sa.Column("skip_rows", sa.Integer(), nullable=False),
        sa.Column("encoding", sa.String(length=16), nullable=False),
        sa.Column("angle_sense", sa.String(length=20), nullable=False),
        sa.Column("angle_zero_deg", sa.Float(), nullable=False),
        sa.Column("speed_unit", sa.String(length=4), nullable=False),
        sa.Column("reading_unit", sa.String(length=8), nullable=True),
        sa.Column("columns", sa.JSON(), nullable=False),
        sa.Column("updated_at", sa.DateTime(timezone=True), nullable=False),
        sa.Column("updated_by_id", sa.Integer(), nullable=True),
        sa.CheckConstraint("delimiter IN (';', ',')",
                           name=op.f("ck_machine_mapping_delimiter_allowed")),
        sa.CheckConstraint("decimal_mark IN ('.', ',')",
                           name=op.f("ck_machine_mapping_decimal_mark_allowed")),
        sa.CheckConstraint("encoding IN ('utf-8', 'cp1252')",
                           name=op.f("ck_machine_mapping_encoding_allowed")),
        sa.CheckConstraint("angle_sense IN ('with_rotation', 'against_rotation')",
                           name=op.f("ck_machine_mapping_angle_sense_allowed")),
        sa.CheckConstraint("speed_unit IN ('rpm', 'Hz')",
                           name=op.f("ck_machine_mapping_speed_unit_allowed")),
        sa.CheckConstraint(
            "angle_zero_deg IS NULL OR (angle_zero_deg >= 0 AND angle_zero_deg < 360)",
            name=op.f("ck_machine_mapping_angle_zero_deg_range")),
        sa.CheckConstraint("skip_rows >= 0 AND skip_rows <= 50",
                           name=op.f("ck_machine_mapping_skip_rows_range")),
        sa.CheckConstraint(f"reading_unit IS NULL OR reading_unit IN {READING_UNITS}",
                           name=op.f("ck_machine_mapping_reading_unit_allowed")),
        sa.ForeignKeyConstraint(["machine_id"], ["machine.id"],
                                name=op.f("fk_machine_mapping_machine_id_machine"),
                                ondelete="RESTRICT"),
        sa.ForeignKeyConstraint(["updated_by_id"], ["user_account.id"],
                                name=op.f("fk_machine_mapping_updated_by_id_user_account"),
                                ondelete="SET NULL"),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_machine_mapping")),
        sa.UniqueConstraint("machine_id", name=op.f("uq_machine_mapping_machine_id")),
    )
    with op.batch_alter_table("machine_mapping") as batch:
        batch.create_index(batch.f("ix_machine_mapping_updated_by_id"), ["updated_by_id"],
                           unique=False)
    op.create_table(
        "imported_file",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("sha256", sa.String(length=64), nullable=False),
        sa.Column("file_name", sa.String(length=255), nullable=False),
        sa.Column("machine_id", sa.Integer(), nullable=True),
        sa.Column("source", sa.String(length=8), nullable=False),
        sa.Column("imported_at", sa.DateTime(timezone=True), nullable=False),
        sa.Column("by_id", sa.Integer(), nullable=True),
        sa.Column("outcome", sa.Text(), nullable=False),
        sa.CheckConstraint("source IN ('upload', 'file', 'watch')",
                           name=op.f("ck_imported_file_source_allowed")),
        sa.ForeignKeyConstraint(["machine_id"], ["machine.id"],
                                name=op.f("fk_imported_file_machine_id_machine"),
                                ondelete="RESTRICT"),
        sa.ForeignKeyConstraint(["by_id"], ["user_account.id"],
                                name=op.f("fk_imported_file_by_id_user_account"),
                                ondelete="RESTRICT"),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_imported_file")),
        sa.UniqueConstraint("sha256", name=op.f("uq_imported_file_sha256")),
    )
    with op.batch_alter_table("imported_file") as batch:
        batch.create_index(batch.f("ix_imported_file_machine_id"), ["machine_id"], unique=False)
        batch.create_index(batch.f("ix_imported_file_by_id"), ["by_id"], unique=False)


def downgrade() -> None:
    with op.batch_alter_table("imported_file") as batch:
        batch.drop_index(batch.f("ix_imported_file_by_id"))
        batch.drop_index(batch.f("ix_imported_file_machine_id"))
    op.drop_table("imported_file")
    with op.batch_alter_table("machine_mapping") as batch:
        batch.drop_index(batch.f("ix_machine_mapping_updated_by_id"))
    op.drop_table("machine_mapping")

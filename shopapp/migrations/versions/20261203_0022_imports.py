"""imports from spreadsheets: the import batches and the imported past jobs' residuals

A past job brought over from spreadsheets has one ``imported_job`` row with its final
residual per plane and the old verdict; that row is what marks it imported (the shop
measures leave it out; no job has one yet, so the job facts need no backfill). Each
applied file is an ``import_batch`` row (kind, file name, SHA-256, who, when, counts).

``job`` itself is not altered: a batch copy of it on SQLite would have to drop and
recreate the evidence triggers that name it (see 0012, 0013, 0020), and rows written by
older code (or by tests at older revisions) stay valid as they are.

Revision ID: 0022
Revises: 0021
Create Date: 2026-12-03
"""

from __future__ import annotations

from collections.abc import Sequence

import sqlalchemy as sa
from alembic import op

revision: str = "0022"
down_revision: str | None = "0021"
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None


def upgrade() -> None:
    op.create_table(
        "import_batch",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("kind", sa.String(length=16), nullable=False),
        sa.Column("file_name", sa.String(length=255), nullable=False),
        sa.Column("file_sha256", sa.String(length=64), nullable=False),
        sa.Column("by_id", sa.Integer(), nullable=False),
        sa.Column("at", sa.DateTime(timezone=True), nullable=False),
        sa.Column("rows", sa.Integer(), nullable=False),
        sa.Column("created", sa.Integer(), nullable=False),
        sa.Column("updated", sa.Integer(), nullable=False),
        sa.Column("unchanged", sa.Integer(), nullable=False),
        sa.CheckConstraint("kind IN ('customers', 'rotor-types', 'rotors', 'jobs')",
                           name=op.f("ck_import_batch_kind_allowed")),
        sa.CheckConstraint("rows >= 0 AND created >= 0 AND updated >= 0 AND unchanged >= 0",
                           name=op.f("ck_import_batch_counts_nonneg")),
        sa.ForeignKeyConstraint(["by_id"], ["user_account.id"],
                                name=op.f("fk_import_batch_by_id_user_account"),
                                ondelete="RESTRICT"),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_import_batch")),
    )
    with op.batch_alter_table("import_batch") as batch:
        batch.create_index(batch.f("ix_import_batch_file_sha256"), ["file_sha256"], unique=False)
        batch.create_index(batch.f("ix_import_batch_by_id"), ["by_id"], unique=False)
        batch.create_index(batch.f("ix_import_batch_at"), ["at"], unique=False)
    op.create_table(
        "imported_job",
        sa.Column("job_id", sa.Integer(), nullable=False),
        sa.Column("batch_id", sa.Integer(), nullable=True),
        sa.Column("source_row", sa.Integer(), nullable=True),
        sa.Column("residual_1_gmm", sa.Float(), nullable=False),
        sa.Column("residual_2_gmm", sa.Float(), nullable=True),
        sa.Column("residual_1_angle_deg", sa.Float(), nullable=True),
        sa.Column("residual_2_angle_deg", sa.Float(), nullable=True),
        sa.Column("passed", sa.Boolean(), nullable=False),
        sa.CheckConstraint("residual_1_gmm >= 0", name=op.f("ck_imported_job_residual_1_gmm_nonneg")),
        sa.CheckConstraint("residual_2_gmm IS NULL OR residual_2_gmm >= 0",
                           name=op.f("ck_imported_job_residual_2_gmm_nonneg")),
        sa.CheckConstraint("residual_1_angle_deg IS NULL OR (residual_1_angle_deg >= 0 AND residual_1_angle_deg < 360)",
                           name=op.f("ck_imported_job_residual_1_angle_deg_range")),
        sa.CheckConstraint("residual_2_angle_deg IS NULL OR (residual_2_angle_deg >= 0 AND residual_2_angle_deg < 360)",
                           name=op.f("ck_imported_job_residual_2_angle_deg_range")),
        sa.ForeignKeyConstraint(["job_id"], ["job.id"], name=op.f("fk_imported_job_job_id_job"),
                                ondelete="RESTRICT"),
        sa.ForeignKeyConstraint(["batch_id"], ["import_batch.id"],
                                name=op.f("fk_imported_job_batch_id_import_batch"),
                                ondelete="RESTRICT"),
        sa.PrimaryKeyConstraint("job_id", name=op.f("pk_imported_job")),
    )
    with op.batch_alter_table("imported_job") as batch:
        batch.create_index(batch.f("ix_imported_job_batch_id"), ["batch_id"], unique=False)


def downgrade() -> None:
    with op.batch_alter_table("imported_job") as batch:
        batch.drop_index(batch.f("ix_imported_job_batch_id"))
    op.drop_table("imported_job")
    with op.batch_alter_table("import_batch") as batch:
        batch.drop_index(batch.f("ix_import_batch_at"))
        batch.drop_index(batch.f("ix_import_batch_by_id"))
        batch.drop_index(batch.f("ix_import_batch_file_sha256"))
    op.drop_table("import_batch")

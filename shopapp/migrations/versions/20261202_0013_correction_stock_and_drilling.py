"""corrections: rotor-type stock weights, material and drilling limits; replaced weights (issue 11)

Revision ID: 0013
Revises: 0012
Create Date: 2026-12-02
"""

from __future__ import annotations

from collections.abc import Sequence

import sqlalchemy as sa
from alembic import op

revision: str = "0013"
down_revision: str | None = "0012"
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None

MATERIALS = ("steel", "stainless_steel", "grey_cast_iron", "aluminium", "brass", "bronze")


def _listed(values: Sequence[str]) -> str:
    return ", ".join(f"'{v}'" for v in values)


# Revision 0003's SQLite triggers on the correction table, verbatim.
SQLITE_CORRECTION_TRIGGERS = (
    "CREATE TRIGGER correction_certified_update BEFORE UPDATE ON correction WHEN EXISTS (SELECT 1 FROM certificate WHERE state = 'issued' AND job_id IN (OLD.job_id, NEW.job_id)) BEGIN SELECT RAISE(ABORT, 'evidence of a certified job is immutable: reopen the job (which voids its certificate) before changing its runs, readings or corrections'); END",
    "CREATE TRIGGER correction_certified_delete BEFORE DELETE ON correction WHEN EXISTS (SELECT 1 FROM certificate WHERE state = 'issued' AND job_id IN (OLD.job_id)) BEGIN SELECT RAISE(ABORT, 'evidence of a certified job is immutable: reopen the job (which voids its certificate) before changing its runs, readings or corrections'); END",
)


def _sqlite_correction_triggers() -> None:
    if op.get_bind().dialect.name != "sqlite":
        return  # PostgreSQL keeps its triggers through ALTER TABLE
    for name in ("correction_certified_update", "correction_certified_delete"):
        op.execute(f"DROP TRIGGER IF EXISTS {name}")
    for statement in SQLITE_CORRECTION_TRIGGERS:
        op.execute(statement)


def upgrade() -> None:
    with op.batch_alter_table("rotor_type") as batch:
        batch.add_column(sa.Column("stock_weights_g", sa.JSON(), nullable=True))
        batch.add_column(sa.Column("material", sa.String(length=20), nullable=True))
        batch.add_column(sa.Column("hole_direction", sa.String(length=6), nullable=True))
        batch.add_column(sa.Column("max_hole_depth_mm", sa.Float(), nullable=True))
        batch.add_column(sa.Column("min_wall_mm", sa.Float(), nullable=True))
        batch.add_column(sa.Column("drill_section_mm", sa.Float(), nullable=True))
        batch.create_check_constraint(op.f("ck_rotor_type_material_allowed"), f"material IN ({_listed(MATERIALS)})")
        batch.create_check_constraint(op.f("ck_rotor_type_hole_direction_allowed"),
                                      "hole_direction IN ('radial', 'axial')")
        batch.create_check_constraint(op.f("ck_rotor_type_max_hole_depth_mm_positive"),
                                      "max_hole_depth_mm IS NULL OR max_hole_depth_mm > 0")
        batch.create_check_constraint(op.f("ck_rotor_type_drill_section_mm_positive"),
                                      "drill_section_mm IS NULL OR drill_section_mm > 0")
        batch.create_check_constraint(op.f("ck_rotor_type_min_wall_mm_range"),
                                      "min_wall_mm IS NULL OR min_wall_mm >= 0")
    # SQLite cannot add a foreign key to a table: batch mode copies the correction table,
    # which drops its certified-evidence triggers (revision 0003), so they are created again.
    with op.batch_alter_table("correction") as batch:
        batch.add_column(sa.Column("replaces_correction_id", sa.Integer(), nullable=True))
        batch.create_foreign_key(op.f("fk_correction_replaces_correction_id_correction"),
                                 "correction", ["replaces_correction_id"], ["id"],
                                 ondelete="RESTRICT")
    _sqlite_correction_triggers()
    op.create_index(op.f("ix_correction_replaces_correction_id"), "correction",
                    ["replaces_correction_id"], unique=False)


def downgrade() -> None:
    op.drop_index(op.f("ix_correction_replaces_correction_id"), table_name="correction")
    with op.batch_alter_table("correction") as batch:
        batch.drop_constraint(op.f("fk_correction_replaces_correction_id_correction"),
                              type_="foreignkey")
        batch.drop_column("replaces_correction_id")
    _sqlite_correction_triggers()
    with op.batch_alter_table("rotor_type") as batch:
        for name in ("min_wall_mm_range", "drill_section_mm_positive",
                     "max_hole_depth_mm_positive", "hole_direction_allowed", "material_allowed"):
            batch.drop_constraint(op.f(f"ck_rotor_type_{name}"), type_="check")
        for column in ("drill_section_mm", "min_wall_mm", "max_hole_depth_mm", "hole_direction",
                       "material", "stock_weights_g"):
            batch.drop_column(column)

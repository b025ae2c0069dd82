"""run-up records: a sensor's readings against speed through a resonance (issue 16)

Revision ID: 0010
Revises: 0004
Create Date: 2026-12-02
"""

from __future__ import annotations

from collections.abc import Sequence

import sqlalchemy as sa
from alembic import op

revision: str = "0010"
down_revision: str | None = "0004"
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None


def upgrade() -> None:
    op.create_table(
        "run_up",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("job_id", sa.Integer(), nullable=True),
        sa.Column("machine_id", sa.Integer(), nullable=True),
        sa.Column("recorded_on", sa.Date(), nullable=False),
        sa.Column("sensor", sa.String(length=64), nullable=False),
        sa.Column("measured", sa.String(length=12), nullable=False),
        sa.Column("unit", sa.String(length=8), nullable=False),
        sa.Column("sweep", sa.String(length=10), nullable=False),
        sa.Column("slow_roll_amplitude", sa.Float(), nullable=True),
        sa.Column("slow_roll_angle_deg", sa.Float(), nullable=True),
        sa.Column("operating_speed_rpm", sa.Float(), nullable=True),
        sa.Column("operating_lo_rpm", sa.Float(), nullable=True),
        sa.Column("operating_hi_rpm", sa.Float(), nullable=True),
        sa.Column("notes", sa.Text(), nullable=False),
        sa.Column("by_id", sa.Integer(), nullable=True),
        sa.Column("created_at", sa.DateTime(timezone=True), nullable=False),
        sa.CheckConstraint(
            "measured IN ('displacement', 'velocity', 'acceleration')",
            name=op.f("ck_run_up_measured_allowed"),
        ),
        sa.CheckConstraint(
            "sweep IN ('run_up', 'coast_down')", name=op.f("ck_run_up_sweep_allowed")
        ),
        sa.CheckConstraint(
            "unit IN ('µm', 'mils', 'mm/s', 'in/s', 'm/s²', 'g')",
            name=op.f("ck_run_up_unit_allowed"),
        ),
        sa.CheckConstraint(
            "(operating_lo_rpm IS NULL) = (operating_hi_rpm IS NULL)",
            name=op.f("ck_run_up_range_pair"),
        ),
        sa.CheckConstraint(
            "(slow_roll_amplitude IS NULL) = (slow_roll_angle_deg IS NULL)",
            name=op.f("ck_run_up_slow_roll_pair"),
        ),
        sa.CheckConstraint(
            "job_id IS NOT NULL OR machine_id IS NOT NULL", name=op.f("ck_run_up_belongs")
        ),
        sa.CheckConstraint(
            "operating_hi_rpm IS NULL OR operating_hi_rpm > 0",
            name=op.f("ck_run_up_operating_hi_rpm_positive"),
        ),
        sa.CheckConstraint(
            "operating_lo_rpm IS NULL OR operating_lo_rpm < operating_hi_rpm",
            name=op.f("ck_run_up_range_order"),
        ),
        sa.CheckConstraint(
            "operating_lo_rpm IS NULL OR operating_lo_rpm > 0",
            name=op.f("ck_run_up_operating_lo_rpm_positive"),
        ),
        sa.CheckConstraint(
            "operating_speed_rpm IS NULL OR operating_lo_rpm IS NULL",
            name=op.f("ck_run_up_speed_or_range"),
        ),
        sa.CheckConstraint(
            "operating_speed_rpm IS NULL OR operating_speed_rpm > 0",
            name=op.f("ck_run_up_operating_speed_rpm_positive"),
        ),
        sa.CheckConstraint(
            "slow_roll_amplitude IS NULL OR slow_roll_amplitude >= 0",
            name=op.f("ck_run_up_slow_roll_nonneg"),
        ),
        sa.CheckConstraint(
            "slow_roll_angle_deg IS NULL OR (slow_roll_angle_deg >= 0 AND "
            "slow_roll_angle_deg < 360)",
            name=op.f("ck_run_up_slow_roll_angle_deg_range"),
        ),
        sa.ForeignKeyConstraint(["by_id"], ["user_account.id"],
                                name=op.f("fk_run_up_by_id_user_account"), ondelete="RESTRICT"),
        sa.ForeignKeyConstraint(["job_id"], ["job.id"], name=op.f("fk_run_up_job_id_job"),
                                ondelete="RESTRICT"),
        sa.ForeignKeyConstraint(["machine_id"], ["machine.id"],
                                name=op.f("fk_run_up_machine_id_machine"), ondelete="RESTRICT"),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_run_up")),
    )
    with op.batch_alter_table("run_up") as batch:
        batch.create_index(batch.f("ix_run_up_by_id"), ["by_id"], unique=False)
        batch.create_index(batch.f("ix_run_up_job_id"), ["job_id"], unique=False)
        batch.create_index(batch.f("ix_run_up_machine_id"), ["machine_id"], unique=False)
        batch.create_index(batch.f("ix_run_up_recorded_on"), ["recorded_on"], unique=False)

    op.create_table(
        "run_up_point",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("record_id", sa.Integer(), nullable=False),
        sa.Column("seq", sa.Integer(), nullable=False),
        sa.Column("speed_rpm", sa.Float(), nullable=False),
        sa.Column("amplitude", sa.Float(), nullable=False),
        sa.Column("angle_deg", sa.Float(), nullable=False),
        sa.CheckConstraint("amplitude >= 0", name=op.f("ck_run_up_point_amplitude_nonneg")),
        sa.CheckConstraint(
            "angle_deg >= 0 AND angle_deg < 360", name=op.f("ck_run_up_point_angle_deg_range")
        ),
        sa.CheckConstraint("seq >= 1", name=op.f("ck_run_up_point_seq_positive")),
        sa.CheckConstraint("speed_rpm > 0", name=op.f("ck_run_up_point_speed_rpm_positive")),
        sa.ForeignKeyConstraint(["record_id"], ["run_up.id"],
                                name=op.f("fk_run_up_point_record_id_run_up"), ondelete="CASCADE"),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_run_up_point")),
        sa.UniqueConstraint("record_id", "seq", name=op.f("uq_run_up_point_record_id_seq")),
    )
    with op.batch_alter_table("run_up_point") as batch:
        batch.create_index(batch.f("ix_run_up_point_record_id"), ["record_id"], unique=False)


def downgrade() -> None:
    with op.batch_alter_table("run_up_point") as batch:
        batch.drop_index(batch.f("ix_run_up_point_record_id"))
    op.drop_table("run_up_point")
    with op.batch_alter_table("run_up") as batch:
        batch.drop_index(batch.f("ix_run_up_recorded_on"))
        batch.drop_index(batch.f("ix_run_up_machine_id"))
        batch.drop_index(batch.f("ix_run_up_job_id"))
        batch.drop_index(batch.f("ix_run_up_by_id"))
    op.drop_table("run_up")

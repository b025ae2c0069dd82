"""job facts: one row per job with what the shop measures count, filled for existing jobs

Revision ID: 0014
Revises: 0013
Create Date: 2026-12-02
"""

from __future__ import annotations

from collections.abc import Sequence

import sqlalchemy as sa
from alembic import op

revision: str = "0014"
down_revision: str | None = "0013"
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None

OPEN_JOBS = "dispatched_on IS NULL AND rejected_at IS NULL"


def upgrade() -> None:
    op.create_table(
        "job_fact",
        sa.Column("job_id", sa.Integer(), nullable=False),
        sa.Column("operator_id", sa.Integer(), nullable=True),
        sa.Column("machine_id", sa.Integer(), nullable=True),
        sa.Column("rotor_type_id", sa.Integer(), nullable=False),
        sa.Column("customer_id", sa.Integer(), nullable=False),
        sa.Column("rotor_id", sa.Integer(), nullable=False),
        sa.Column("kind", sa.String(length=8), nullable=False),
        sa.Column("received_on", sa.Date(), nullable=False),
        sa.Column("received_month", sa.String(length=7), nullable=False),
        sa.Column("received_wd_index", sa.Integer(), nullable=False),
        sa.Column("dispatched_on", sa.Date(), nullable=True),
        sa.Column("dispatched_month", sa.String(length=7), nullable=True),
        sa.Column("turnaround_wd", sa.Integer(), nullable=True),
        sa.Column("promised_hit", sa.Integer(), nullable=True),
        sa.Column("rejected_at", sa.DateTime(timezone=True), nullable=True),
        sa.Column("first_in_tolerance_at", sa.DateTime(timezone=True), nullable=True),
        sa.Column("tolerance_month", sa.String(length=7), nullable=True),
        sa.Column("correction_cycles", sa.Integer(), nullable=False),
        sa.Column("first_pass", sa.Integer(), nullable=True),
        sa.Column("first_reopen_at", sa.DateTime(timezone=True), nullable=True),
        sa.Column("first_return_on", sa.Date(), nullable=True),
        sa.Column("initial_amplitude", sa.Float(), nullable=True),
        sa.Column("initial_amplitude_1", sa.Float(), nullable=True),
        sa.Column("initial_amplitude_2", sa.Float(), nullable=True),
        sa.Column("initial_unit", sa.String(length=8), nullable=True),
        sa.Column("initial_unit_max", sa.String(length=8), nullable=True),
        sa.Column("initial_units", sa.Integer(), nullable=False),
        sa.ForeignKeyConstraint(["job_id"], ["job.id"], name=op.f("fk_job_fact_job_id_job"),
                                ondelete="CASCADE"),
        sa.PrimaryKeyConstraint("job_id", name=op.f("pk_job_fact")),
    )
    with op.batch_alter_table("job_fact") as batch:
        batch.create_index(batch.f("ix_job_fact_received_on"), ["received_on"], unique=False)
        batch.create_index(batch.f("ix_job_fact_dispatched_on"), ["dispatched_on"], unique=False)
        batch.create_index(batch.f("ix_job_fact_rejected_at"), ["rejected_at"], unique=False)
        batch.create_index(batch.f("ix_job_fact_first_in_tolerance_at"),
                           ["first_in_tolerance_at"], unique=False)
        batch.create_index("ix_job_fact_rotor_received", ["rotor_id", "received_on"],
                           unique=False)
        batch.create_index("ix_job_fact_open", ["received_on"], unique=False,
                           sqlite_where=sa.text(OPEN_JOBS), postgresql_where=sa.text(OPEN_JOBS))
    # The job list: newest received first, ids in the same index (keyset and deep pages).
    with op.batch_alter_table("job") as batch:
        batch.create_index("ix_job_received_id", ["received_on", "id"], unique=False)
    # Fill the facts of the jobs already stored, with the same SQL that keeps them.
    from shopapp.jobs.facts import rebuild

    # imported_job arrives in 0022 (at this revision no job is an imported one) and
    # run_fact in 0023, which fills it.
    rebuild(op.get_bind(), imported_table=False, run_facts=False)


def downgrade() -> None:
    with op.batch_alter_table("job") as batch:
        batch.drop_index("ix_job_received_id")
    op.drop_table("job_fact")

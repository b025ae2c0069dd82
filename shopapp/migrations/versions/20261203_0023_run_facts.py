"""run facts: each stored run's gap to the run before it in its segment, filled for
existing runs

The shop's machine time per period read every run of every job that ran in it, with its
reopenings, through three window functions on every dashboard request (8-12 s for a
year at 100 000 jobs). ``run_fact`` keeps each run's gap, its rework flag and reason,
kept by the same flush hook as ``job_fact`` (shopapp.jobs.facts).

Revision ID: 0023
Revises: 0022
Create Date: 2026-12-03
"""

from __future__ import annotations

from collections.abc import Sequence

import sqlalchemy as sa
from alembic import op

revision: str = "0023"
down_revision: str | None = "0022"
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None


def upgrade() -> None:
    op.create_table(
        "run_fact",
        sa.Column("run_id", sa.Integer(), nullable=False),
        sa.Column("job_id", sa.Integer(), nullable=False),
        sa.Column("taken_at", sa.DateTime(timezone=True), nullable=False),
        sa.Column("gap_s", sa.Integer(), nullable=True),
        sa.Column("rework", sa.Integer(), nullable=False),
        sa.Column("reason", sa.Text(), nullable=False),
        sa.ForeignKeyConstraint(["run_id"], ["run.id"], name=op.f("fk_run_fact_run_id_run"),
                                ondelete="CASCADE"),
        sa.ForeignKeyConstraint(["job_id"], ["job.id"], name=op.f("fk_run_fact_job_id_job"),
                                ondelete="CASCADE"),
        sa.PrimaryKeyConstraint("run_id", name=op.f("pk_run_fact")),
    )
    with op.batch_alter_table("run_fact") as batch:
        batch.create_index(batch.f("ix_run_fact_job_id"), ["job_id"], unique=False)
        batch.create_index("ix_run_fact_taken_at", ["taken_at", "job_id", "gap_s", "rework",
                                                       "reason"], unique=False)
    # Fill the run facts of the runs already stored, with the SQL that keeps them.
    from shopapp.jobs.facts import rebuild_run_facts

    rebuild_run_facts(op.get_bind())


def downgrade() -> None:
    op.drop_table("run_fact")

"""machine reading unit and planes, rotor type permitted balancing speed, struck-out runs

Revision ID: 0012
Revises: 0011
Create Date: 2026-12-02

- machine.reading_unit: what the machine's readings are (calibrated g·mm or a vibration
  unit). Existing machines take the unit most of their runs were logged in; a machine
  without runs takes "g·mm" (what the run form used to default to) — check it on the
  machine page after upgrading.
- machine.reading_planes: how many planes (sensors) it reads in one run (1 or 2; 2 for
  existing machines, which is what their runs could hold).
- rotor_type.permitted_balancing_speed_rpm: optional; the service speed when empty.
- run.struck_at / struck_by_id / struck_reason: a mistaken run is struck out, not deleted.

run.struck_by_id has no ON DELETE clause (NO ACTION refuses deleting the user all the
same): SQLAlchemy cannot reflect the options of SQLite's inline REFERENCES.

SQLite: columns are added with ALTER TABLE ADD COLUMN (constraints inline), never by
batch mode: a batch copy of ``run`` would drop its certificate guard triggers, and with
foreign keys on, dropping the old table would cascade to the run readings.
"""

from __future__ import annotations

from collections.abc import Sequence

import sqlalchemy as sa
from alembic import op

revision: str = "0012"
down_revision: str | None = "0011"
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None

READING_UNITS = "('um', 'mm/s', 'g·mm', 'mil', 'in/s')"
STRUCK_COMPLETE = (
    "(struck_at IS NULL AND struck_by_id IS NULL AND struck_reason IS NULL) OR "
    "(struck_at IS NOT NULL AND struck_by_id IS NOT NULL AND struck_reason <> '')"
)

SQLITE_ADD = (
    "ALTER TABLE machine ADD COLUMN reading_unit VARCHAR(8) NOT NULL DEFAULT 'g·mm' "
    f"CONSTRAINT ck_machine_reading_unit_allowed CHECK (reading_unit IN {READING_UNITS})",
    "ALTER TABLE machine ADD COLUMN reading_planes INTEGER NOT NULL DEFAULT 2 "
    "CONSTRAINT ck_machine_reading_planes_allowed CHECK (reading_planes IN (1, 2))",
    "ALTER TABLE rotor_type ADD COLUMN permitted_balancing_speed_rpm FLOAT "
    "CONSTRAINT ck_rotor_type_permitted_balancing_speed_rpm_positive "
    "CHECK (permitted_balancing_speed_rpm IS NULL OR permitted_balancing_speed_rpm > 0)",
    "ALTER TABLE run ADD COLUMN struck_at DATETIME",
    "ALTER TABLE run ADD COLUMN struck_by_id INTEGER "
    "CONSTRAINT fk_run_struck_by_id_user_account REFERENCES user_account (id)",
    "ALTER TABLE run ADD COLUMN struck_reason TEXT "
    f"CONSTRAINT ck_run_struck_complete CHECK ({STRUCK_COMPLETE})",
)

# The unit most of a machine's run readings were logged in (ties: alphabetical).
MACHINE_UNIT_FROM_RUNS = """
UPDATE machine SET reading_unit = (
    SELECT rr.unit FROM run_reading rr
    JOIN run r ON r.id = rr.run_id
    JOIN job j ON j.id = r.job_id
    WHERE j.machine_id = machine.id
    GROUP BY rr.unit ORDER BY count(*) DESC, rr.unit LIMIT 1)
WHERE EXISTS (
    SELECT 1 FROM run_reading rr JOIN run r ON r.id = rr.run_id
    JOIN job j ON j.id = r.job_id WHERE j.machine_id = machine.id)
"""


def upgrade() -> None:
    dialect = op.get_bind().dialect.name
    if dialect == "sqlite":
        for sql in SQLITE_ADD:
            op.execute(sql)
    else:
        op.add_column("machine", sa.Column("reading_unit", sa.String(length=8), nullable=False,
                                           server_default="g·mm"))
        op.add_column("machine", sa.Column("reading_planes", sa.Integer(), nullable=False,
                                           server_default="2"))
        op.create_check_constraint("ck_machine_reading_unit_allowed", "machine",
                                   f"reading_unit IN {READING_UNITS}")
        op.create_check_constraint("ck_machine_reading_planes_allowed", "machine",
                                   "reading_planes IN (1, 2)")
        op.add_column("rotor_type", sa.Column("permitted_balancing_speed_rpm", sa.Float(),
                                              nullable=True))
        op.create_check_constraint(
            "ck_rotor_type_permitted_balancing_speed_rpm_positive", "rotor_type",
            "permitted_balancing_speed_rpm IS NULL OR permitted_balancing_speed_rpm > 0")
        op.add_column("run", sa.Column("struck_at", sa.DateTime(timezone=True), nullable=True))
        op.add_column("run", sa.Column("struck_by_id", sa.Integer(), nullable=True))
        op.add_column("run", sa.Column("struck_reason", sa.Text(), nullable=True))
        op.create_foreign_key("fk_run_struck_by_id_user_account", "run", "user_account",
                              ["struck_by_id"], ["id"])
        op.create_check_constraint("ck_run_struck_complete", "run", STRUCK_COMPLETE)
    op.create_index("ix_run_struck_by_id", "run", ["struck_by_id"], unique=False)
    op.execute(MACHINE_UNIT_FROM_RUNS)
    if dialect != "sqlite":
        # New machines must say what they read: no silent default (SQLite cannot drop it).
        op.alter_column("machine", "reading_unit", server_default=None)
        op.alter_column("machine", "reading_planes", server_default=None)


def downgrade() -> None:
    dialect = op.get_bind().dialect.name
    op.drop_index("ix_run_struck_by_id", table_name="run")
    if dialect == "sqlite":
        # Reverse order: a column's inline CHECK goes with it; struck_reason's CHECK names
        # the other struck columns, so it is dropped first.
        for table, column in (("run", "struck_reason"), ("run", "struck_by_id"),
                              ("run", "struck_at"),
                              ("machine", "reading_planes"), ("machine", "reading_unit")):
            op.execute(f"ALTER TABLE {table} DROP COLUMN {column}")
        # rotor_type has no guard triggers, so a batch copy is safe; and a later batch
        # copy (0013) may have made the inline CHECK a table CHECK that plain DROP COLUMN
        # refuses to leave behind.
        with op.batch_alter_table("rotor_type") as batch:
            batch.drop_constraint(op.f("ck_rotor_type_permitted_balancing_speed_rpm_positive"),
                                  type_="check")
            batch.drop_column("permitted_balancing_speed_rpm")
        return
    op.drop_constraint("ck_run_struck_complete", "run", type_="check")
    op.drop_constraint("fk_run_struck_by_id_user_account", "run", type_="foreignkey")
    for column in ("struck_reason", "struck_by_id", "struck_at"):
        op.drop_column("run", column)
    op.drop_constraint("ck_rotor_type_permitted_balancing_speed_rpm_positive", "rotor_type",
                       type_="check")
    op.drop_column("rotor_type", "permitted_balancing_speed_rpm")
    for name in ("ck_machine_reading_planes_allowed", "ck_machine_reading_unit_allowed"):
        op.drop_constraint(name, "machine", type_="check")
    op.drop_column("machine", "reading_planes")
    op.drop_column("machine", "reading_unit")

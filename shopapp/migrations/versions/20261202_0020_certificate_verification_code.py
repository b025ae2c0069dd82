"""certificate verification code: a random code per revision, printed beside the number

Every existing revision gets its own random code here (the PDFs issued before
this revision do not print it; they are still found by number plus content hash).
The certificate guards of 0003 are recreated with the code among the columns that
never change: once given, a code changes no more than the PDF (and a void row not at
all). SQLite rebuilds the table to add the NOT NULL and UNIQUE constraints, which drops
the triggers on it, and refuses to rename the rebuilt table while the evidence triggers
of 0003 (on run, run_reading, correction) name it; all of them are dropped first and
created again after (certificate: immutable, no delete, no replace; evidence: as 0003).
PostgreSQL keeps its triggers; the function behind ``certificate_immutable`` is
replaced. TRUNCATE and the evidence guards of 0003 are untouched there.

The SQL comes from the builders in shopapp/models/certificates.py (the one home of the
guards' SQL), called with the column lists frozen below; tests/test_schema.py checks
that the migrated guards equal those ``create_all`` makes and that the downgrade puts
0003's guards back.

Revision ID: 0020
Revises: 0015
Create Date: 2026-12-02
"""

from __future__ import annotations

import secrets
from collections.abc import Sequence

import sqlalchemy as sa
from alembic import op

from shopapp.models.certificates import (
    SQLITE_EVIDENCE_TRIGGERS,
    postgres_certificate_guard,
    sqlite_certificate_triggers,
)

revision: str = "0020"
down_revision: str | None = "0015"
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None

_ALPHABET = "ABCDEFGHIJKLMNOPQRSTUVWXYZ234567"  # RFC 4648 base32
_LENGTH = 10

# The columns 0003's guards keep unchanged, and this revision's.
_COLUMNS_0003 = ("id", "number", "revision", "job_id", "issued_by_id", "issued_at", "reason",
                 "pdf", "pdf_sha256", "data_json", "data_sha256")
_COLUMNS_0020 = (*_COLUMNS_0003, "verification_code")
_SQLITE_TRIGGERS = (
    "certificate_immutable", "certificate_no_delete", "certificate_no_replace",
    "run_certified_update", "run_certified_delete",
    "run_reading_certified_update", "run_reading_certified_delete",
    "correction_certified_update", "correction_certified_delete",
)


def _code() -> str:
    return "".join(secrets.choice(_ALPHABET) for _ in range(_LENGTH))


def _give_codes(bind: sa.engine.Connection) -> None:
    table = sa.table("certificate", sa.column("id", sa.Integer()),
                     sa.column("verification_code", sa.String()))
    used: set[str] = set()
    for ident in bind.execute(sa.select(table.c.id)).scalars().all():
        code = _code()
        while code in used:
            code = _code()
        used.add(code)
        bind.execute(table.update().where(table.c.id == ident).values(verification_code=code))


def upgrade() -> None:
    bind = op.get_bind()
    dialect = bind.dialect.name
    # The guards refuse any update of a void row: lifted while the codes are given.
    if dialect == "sqlite":
        for name in _SQLITE_TRIGGERS:
            op.execute(f"DROP TRIGGER IF EXISTS {name}")
    elif dialect == "postgresql":
        op.execute("ALTER TABLE certificate DISABLE TRIGGER certificate_immutable")
    with op.batch_alter_table("certificate", schema=None) as batch_op:
        batch_op.add_column(sa.Column("verification_code", sa.String(length=16), nullable=True))
    _give_codes(bind)
    with op.batch_alter_table("certificate", schema=None) as batch_op:
        batch_op.alter_column("verification_code", existing_type=sa.String(length=16),
                              nullable=False)
        batch_op.create_unique_constraint(
            batch_op.f("uq_certificate_verification_code"), ["verification_code"]
        )
    if dialect == "sqlite":
        for sql in (*sqlite_certificate_triggers(_COLUMNS_0020), *SQLITE_EVIDENCE_TRIGGERS):
            op.execute(sql)
    elif dialect == "postgresql":
        op.execute(postgres_certificate_guard(_COLUMNS_0020))
        op.execute("ALTER TABLE certificate ENABLE TRIGGER certificate_immutable")


def downgrade() -> None:
    dialect = op.get_bind().dialect.name
    if dialect == "sqlite":
        for name in _SQLITE_TRIGGERS:
            op.execute(f"DROP TRIGGER IF EXISTS {name}")
    elif dialect == "postgresql":
        op.execute(postgres_certificate_guard(_COLUMNS_0003))
    with op.batch_alter_table("certificate", schema=None) as batch_op:
        batch_op.drop_constraint(batch_op.f("uq_certificate_verification_code"), type_="unique")
        batch_op.drop_column("verification_code")
    if dialect == "sqlite":
        for sql in (*sqlite_certificate_triggers(_COLUMNS_0003), *SQLITE_EVIDENCE_TRIGGERS):
            op.execute(sql)

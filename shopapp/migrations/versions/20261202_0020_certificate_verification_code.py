"""certificate verification code: a random code per revision, printed beside the number

Every existing revision gets its own random code here (the PDFs issued before
this revision do not print it; they are still found by number plus content hash).
The immutability triggers are recreated so the code, once given, never changes.

Revision ID: 0020
Revises: 0002
Create Date: 2026-12-02
"""

from __future__ import annotations

import secrets
from collections.abc import Sequence

import sqlalchemy as sa
from alembic import op

revision: str = "0020"
down_revision: str | None = "0002"
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None

_ALPHABET = "ABCDEFGHIJKLMNOPQRSTUVWXYZ234567"  # RFC 4648 base32
_LENGTH = 10

_COLUMNS_0001 = ("number", "revision", "job_id", "issued_by_id", "issued_at", "reason",
                 "pdf", "pdf_sha256", "data_json", "data_sha256")
_COLUMNS_0020 = (*_COLUMNS_0001, "verification_code")
_MESSAGE = ("certificate is immutable: issued certificates never change; reissue a new "
            "revision instead")


def _sqlite_triggers(columns: Sequence[str]) -> tuple[str, ...]:
    return (
        "CREATE TRIGGER certificate_immutable BEFORE UPDATE ON certificate WHEN "
        "OLD.state = 'void' OR " + " OR ".join(f"NEW.{c} IS NOT OLD.{c}" for c in columns)
        + f" BEGIN SELECT RAISE(ABORT, '{_MESSAGE}'); END",
        "CREATE TRIGGER certificate_no_delete BEFORE DELETE ON certificate "
        "BEGIN SELECT RAISE(ABORT, 'certificates are never deleted'); END",
    )


def _postgres_triggers(columns: Sequence[str]) -> tuple[str, ...]:
    return (
        "CREATE FUNCTION certificate_guard() RETURNS trigger AS $$ BEGIN "
        "IF TG_OP = 'DELETE' THEN RAISE EXCEPTION 'certificates are never deleted'; END IF; "
        "IF OLD.state = 'void' OR "
        + " OR ".join(f"NEW.{c} IS DISTINCT FROM OLD.{c}" for c in columns)
        + f" THEN RAISE EXCEPTION '{_MESSAGE}'; END IF; RETURN NEW; END; $$ LANGUAGE plpgsql",
        "CREATE TRIGGER certificate_immutable BEFORE UPDATE OR DELETE ON certificate "
        "FOR EACH ROW EXECUTE FUNCTION certificate_guard()",
    )


def _drop_triggers() -> None:
    dialect = op.get_bind().dialect.name
    if dialect == "sqlite":
        op.execute("DROP TRIGGER IF EXISTS certificate_immutable")
        op.execute("DROP TRIGGER IF EXISTS certificate_no_delete")
    elif dialect == "postgresql":
        op.execute("DROP TRIGGER IF EXISTS certificate_immutable ON certificate")
        op.execute("DROP FUNCTION IF EXISTS certificate_guard()")


def _create_triggers(columns: Sequence[str]) -> None:
    dialect = op.get_bind().dialect.name
    sql = (_sqlite_triggers(columns) if dialect == "sqlite"
           else _postgres_triggers(columns) if dialect == "postgresql" else ())
    for statement in sql:
        op.execute(statement)


def _code() -> str:
    return "".join(secrets.choice(_ALPHABET) for _ in range(_LENGTH))


def upgrade() -> None:
    bind = op.get_bind()
    # The triggers refuse any update of a void row: lift them while the codes are given.
    _drop_triggers()
    with op.batch_alter_table("certificate", schema=None) as batch_op:
        batch_op.add_column(sa.Column("verification_code", sa.String(length=16), nullable=True))
    table = sa.table("certificate", sa.column("id", sa.Integer()),
                     sa.column("verification_code", sa.String()))
    ids = list(bind.execute(sa.select(table.c.id)).scalars())
    used: set[str] = set()
    for ident in ids:
        code = _code()
        while code in used:
            code = _code()
        used.add(code)
        bind.execute(table.update().where(table.c.id == ident).values(verification_code=code))
    with op.batch_alter_table("certificate", schema=None) as batch_op:
        batch_op.alter_column("verification_code", existing_type=sa.String(length=16),
                              nullable=False)
        batch_op.create_unique_constraint(
            batch_op.f("uq_certificate_verification_code"), ["verification_code"]
        )
    _create_triggers(_COLUMNS_0020)


def downgrade() -> None:
    _drop_triggers()
    with op.batch_alter_table("certificate", schema=None) as batch_op:
        batch_op.drop_constraint(batch_op.f("uq_certificate_verification_code"), type_="unique")
        batch_op.drop_column("verification_code")
    _create_triggers(_COLUMNS_0001)

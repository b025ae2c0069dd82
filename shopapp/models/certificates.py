"""Balance certificates and the audit trail."""

from __future__ import annotations

import datetime as dt
import secrets
from typing import Any

from sqlalchemy import (
    DDL,
    JSON,
    CheckConstraint,
    ForeignKey,
    Index,
    Integer,
    LargeBinary,
    String,
    Text,
    UniqueConstraint,
    event,
)
from sqlalchemy.orm import Mapped, mapped_column, relationship

from shopapp.models.base import Base, IntPK, Timestamp, UTCDateTime, one_of
from shopapp.models.jobs import Job

CERTIFICATE_STATES = ("issued", "void")
# The verification code printed on a certificate: random, never derived from its number.
VERIFICATION_CODE_ALPHABET = "ABCDEFGHIJKLMNOPQRSTUVWXYZ234567"  # RFC 4648 base32
VERIFICATION_CODE_LENGTH = 10  # 50 random bits


def new_verification_code() -> str:
    """A fresh random verification code (``secrets``; 10 base32 characters)."""
    return "".join(secrets.choice(VERIFICATION_CODE_ALPHABET)
                   for _ in range(VERIFICATION_CODE_LENGTH))


class Certificate(Base):
    """An issued balance certificate. Rows never change except issued → void.

    The database itself enforces that (triggers below, and the same SQL in
    migrations 0001 and 0003), so no code path can rewrite a certificate; nor change
    the runs, readings and corrections of a job while it holds a valid certificate.
    """

    __tablename__ = "certificate"
    __table_args__ = (
        UniqueConstraint("number", "revision"),
        one_of("state", CERTIFICATE_STATES),
        CheckConstraint("revision >= 1", name="revision_positive"),
        CheckConstraint(
            "(state = 'void') = (voided_at IS NOT NULL)", name="void_has_date"
        ),
        CheckConstraint("length(pdf_sha256) = 64", name="pdf_sha256_len"),
        CheckConstraint("length(data_sha256) = 64", name="data_sha256_len"),
    )

    id: Mapped[IntPK]
    number: Mapped[str] = mapped_column(String(40), nullable=False, index=True)
    revision: Mapped[int] = mapped_column(Integer, nullable=False, default=1)
    job_id: Mapped[int] = mapped_column(
        ForeignKey("job.id", ondelete="RESTRICT"), nullable=False, index=True
    )
    state: Mapped[str] = mapped_column(String(8), nullable=False, default="issued", index=True)
    issued_by_id: Mapped[int] = mapped_column(
        ForeignKey("user_account.id", ondelete="RESTRICT"), nullable=False, index=True
    )
    issued_at: Mapped[Timestamp] = mapped_column(index=True)
    # Why this revision exists (empty for revision 1).
    reason: Mapped[str] = mapped_column(Text, nullable=False, default="")
    voided_at: Mapped[dt.datetime | None] = mapped_column(UTCDateTime())
    voided_by_id: Mapped[int | None] = mapped_column(
        ForeignKey("user_account.id", ondelete="RESTRICT"), index=True
    )
    void_reason: Mapped[str] = mapped_column(Text, nullable=False, default="")
    pdf: Mapped[bytes] = mapped_column(LargeBinary, nullable=False)
    pdf_sha256: Mapped[str] = mapped_column(String(64), nullable=False, unique=True)
    data_json: Mapped[str] = mapped_column(Text, nullable=False)
    data_sha256: Mapped[str] = mapped_column(String(64), nullable=False, index=True)
    # Printed on the certificate (and in its QR code) beside the number: /verify shows the
    # certified details only for the number together with this code (migration 0020).
    verification_code: Mapped[str] = mapped_column(
        String(16), nullable=False, unique=True, default=new_verification_code
    )

    job: Mapped[Job] = relationship()


class AuditEvent(Base):
    """Who changed what, written in the same transaction as the change."""

    __tablename__ = "audit_event"
    __table_args__ = (Index("ix_audit_event_entity", "entity", "entity_id"),)

    id: Mapped[IntPK]
    at: Mapped[Timestamp] = mapped_column(index=True)
    user_id: Mapped[int | None] = mapped_column(
        ForeignKey("user_account.id", ondelete="RESTRICT"), index=True
    )
    entity: Mapped[str] = mapped_column(String(40), nullable=False)
    entity_id: Mapped[int | None] = mapped_column(Integer)
    # The job an event belongs to, so a job page shows its trail in one query.
    job_id: Mapped[int | None] = mapped_column(
        ForeignKey("job.id", ondelete="RESTRICT"), index=True
    )
    action: Mapped[str] = mapped_column(String(40), nullable=False)
    before: Mapped[dict[str, Any] | None] = mapped_column(JSON)
    after: Mapped[dict[str, Any] | None] = mapped_column(JSON)


# --- database-level immutability (the same SQL as migrations 0001, 0003 and 0020) ----------
# An issued certificate changes only by being voided (state, voided_at, voided_by_id,
# void_reason, all at once); a void one never changes; no certificate is deleted, replaced
# (SQLite's INSERT OR REPLACE) or truncated (PostgreSQL). The evidence of a job with a
# valid certificate (its runs, their readings, its corrections) is neither updated nor
# deleted: reopening the job voids the certificate first (shopapp.jobs.certificate_link).
# The builders below are the one home of the certificate guards' SQL: create_all uses them
# with the columns of today's model, migration 0020 with the column lists it froze.
CONTENT_COLUMNS = (
    "id", "number", "revision", "job_id", "issued_by_id", "issued_at", "reason",
    "pdf", "pdf_sha256", "data_json", "data_sha256", "verification_code",
)
_VOID_COLUMNS = ("voided_at", "voided_by_id", "void_reason")
IMMUTABLE_MESSAGE = (
    "certificate is immutable: an issued certificate changes only by being voided, a void one "
    "never; reissue a new revision instead"
)
EVIDENCE_MESSAGE = (
    "evidence of a certified job is immutable: reopen the job (which voids its certificate) "
    "before changing its runs, readings or corrections"
)


def _changed(columns: tuple[str, ...], op: str) -> str:
    return " OR ".join(f"NEW.{c} {op} OLD.{c}" for c in columns)


def _sqlite_evidence(table: str, key: str, certified: str) -> tuple[str, str]:
    """BEFORE UPDATE and BEFORE DELETE triggers on one evidence table."""
    raise_ = f"BEGIN SELECT RAISE(ABORT, '{EVIDENCE_MESSAGE}'); END"
    return (
        f"CREATE TRIGGER {table}_certified_update BEFORE UPDATE ON {table} WHEN EXISTS "
        f"(SELECT 1 FROM {certified.format(ids=f'OLD.{key}, NEW.{key}')}) {raise_}",
        f"CREATE TRIGGER {table}_certified_delete BEFORE DELETE ON {table} WHEN EXISTS "
        f"(SELECT 1 FROM {certified.format(ids=f'OLD.{key}')}) {raise_}",
    )


_SQLITE_CERTIFIED_JOBS = "certificate WHERE state = 'issued' AND job_id IN ({ids})"
_SQLITE_CERTIFIED_RUNS = (
    "run JOIN certificate ON certificate.job_id = run.job_id "
    "WHERE certificate.state = 'issued' AND run.id IN ({ids})"
)


def sqlite_certificate_triggers(content_columns: tuple[str, ...]) -> tuple[str, ...]:
    """The SQLite triggers on the certificate table; ``content_columns`` never change."""
    return (
        "CREATE TRIGGER certificate_immutable BEFORE UPDATE ON certificate "
        f"WHEN OLD.state = 'void' OR {_changed(content_columns, 'IS NOT')} "
        f"OR (NEW.state = 'issued' AND ({_changed(_VOID_COLUMNS, 'IS NOT')})) "
        f"BEGIN SELECT RAISE(ABORT, '{IMMUTABLE_MESSAGE}'); END",
        "CREATE TRIGGER certificate_no_delete BEFORE DELETE ON certificate "
        "BEGIN SELECT RAISE(ABORT, 'certificates are never deleted'); END",
        # INSERT OR REPLACE deletes the row it collides with without firing the DELETE
        # trigger unless recursive_triggers is on (shopapp turns it on; a plain sqlite3
        # client does not).
        "CREATE TRIGGER certificate_no_replace BEFORE INSERT ON certificate "
        "WHEN EXISTS (SELECT 1 FROM certificate WHERE id = NEW.id OR (number = NEW.number AND "
        "revision = NEW.revision) OR pdf_sha256 = NEW.pdf_sha256) "
        "BEGIN SELECT RAISE(ABORT, 'certificates are never replaced: one with this id, number "
        "and revision or PDF exists already'); END",
    )


SQLITE_CERTIFICATE_TRIGGERS = sqlite_certificate_triggers(CONTENT_COLUMNS)
SQLITE_EVIDENCE_TRIGGERS = (
    *_sqlite_evidence("run", "job_id", _SQLITE_CERTIFIED_JOBS),
    *_sqlite_evidence("run_reading", "run_id", _SQLITE_CERTIFIED_RUNS),
    *_sqlite_evidence("correction", "job_id", _SQLITE_CERTIFIED_JOBS),
)

_PG_RAISE = "USING ERRCODE = 'integrity_constraint_violation'"


def postgres_certificate_guard(content_columns: tuple[str, ...]) -> str:
    """The PostgreSQL function behind the row trigger ``certificate_immutable``."""
    return (
        "CREATE OR REPLACE FUNCTION certificate_guard() RETURNS trigger AS $$ BEGIN "
        f"IF TG_OP = 'DELETE' THEN RAISE EXCEPTION 'certificates are never deleted' "
        f"{_PG_RAISE}; END IF; "
        f"IF OLD.state = 'void' OR {_changed(content_columns, 'IS DISTINCT FROM')} "
        f"OR (NEW.state = 'issued' AND ({_changed(_VOID_COLUMNS, 'IS DISTINCT FROM')})) "
        f"THEN RAISE EXCEPTION '{IMMUTABLE_MESSAGE}' {_PG_RAISE}; END IF; RETURN NEW; END; "
        "$$ LANGUAGE plpgsql"
    )


POSTGRES_CERTIFICATE_TRIGGERS = (
    postgres_certificate_guard(CONTENT_COLUMNS),
    "CREATE TRIGGER certificate_immutable BEFORE UPDATE OR DELETE ON certificate "
    "FOR EACH ROW EXECUTE FUNCTION certificate_guard()",
    "CREATE OR REPLACE FUNCTION certificate_no_truncate() RETURNS trigger AS $$ BEGIN "
    "RAISE EXCEPTION 'certificates are never deleted: TRUNCATE certificate is refused' "
    f"{_PG_RAISE}; END; $$ LANGUAGE plpgsql",
    "CREATE TRIGGER certificate_no_truncate BEFORE TRUNCATE ON certificate "
    "FOR EACH STATEMENT EXECUTE FUNCTION certificate_no_truncate()",
)
POSTGRES_EVIDENCE_TRIGGERS = (
    "CREATE OR REPLACE FUNCTION certified_evidence_guard() RETURNS trigger AS $$ "
    "DECLARE job_ids integer[]; cert text; BEGIN "
    "IF TG_TABLE_NAME = 'run_reading' THEN "
    "IF TG_OP = 'UPDATE' THEN "
    "SELECT array_agg(job_id) INTO job_ids FROM run WHERE id IN (OLD.run_id, NEW.run_id); "
    "ELSE SELECT array_agg(job_id) INTO job_ids FROM run WHERE id = OLD.run_id; END IF; "
    "ELSIF TG_OP = 'UPDATE' THEN job_ids := ARRAY[OLD.job_id, NEW.job_id]; "
    "ELSE job_ids := ARRAY[OLD.job_id]; END IF; "
    "SELECT number || ' revision ' || revision INTO cert FROM certificate "
    "WHERE state = 'issued' AND job_id = ANY(job_ids) LIMIT 1; "
    "IF cert IS NOT NULL THEN RAISE EXCEPTION "
    f"'{EVIDENCE_MESSAGE} (% of a job with valid certificate %)', TG_TABLE_NAME, cert "
    f"{_PG_RAISE}; END IF; "
    "IF TG_OP = 'DELETE' THEN RETURN OLD; END IF; RETURN NEW; END; $$ LANGUAGE plpgsql",
    "CREATE OR REPLACE FUNCTION certified_evidence_no_truncate() RETURNS trigger AS $$ BEGIN "
    "IF EXISTS (SELECT 1 FROM certificate WHERE state = 'issued') THEN RAISE EXCEPTION "
    f"'{EVIDENCE_MESSAGE} (TRUNCATE % while certificates are valid)', TG_TABLE_NAME "
    f"{_PG_RAISE}; END IF; RETURN NULL; END; $$ LANGUAGE plpgsql",
    *(sql
      for table in ("run", "run_reading", "correction")
      for sql in (
          f"CREATE TRIGGER {table}_certified_guard BEFORE UPDATE OR DELETE ON {table} "
          "FOR EACH ROW EXECUTE FUNCTION certified_evidence_guard()",
          f"CREATE TRIGGER {table}_certified_no_truncate BEFORE TRUNCATE ON {table} "
          "FOR EACH STATEMENT EXECUTE FUNCTION certified_evidence_no_truncate()",
      )),
)
POSTGRES_GUARD_FUNCTIONS = (
    "certificate_guard", "certificate_no_truncate", "certified_evidence_guard",
    "certified_evidence_no_truncate",
)

# create_all (tests, tools): the certificate's own triggers with its table, the evidence
# triggers once every table exists; drop_all removes the functions the tables leave behind.
for _sql in SQLITE_CERTIFICATE_TRIGGERS:
    event.listen(Certificate.__table__, "after_create", DDL(_sql).execute_if(dialect="sqlite"))
for _sql in POSTGRES_CERTIFICATE_TRIGGERS:
    event.listen(
        Certificate.__table__, "after_create", DDL(_sql).execute_if(dialect="postgresql")
    )
for _sql in SQLITE_EVIDENCE_TRIGGERS:
    event.listen(Base.metadata, "after_create", DDL(_sql).execute_if(dialect="sqlite"))
for _sql in POSTGRES_EVIDENCE_TRIGGERS:
    # DDL goes through the driver's paramstyle: RAISE's '%' placeholders are doubled.
    event.listen(Base.metadata, "after_create",
                 DDL(_sql.replace("%", "%%")).execute_if(dialect="postgresql"))
for _name in POSTGRES_GUARD_FUNCTIONS:
    event.listen(
        Base.metadata,
        "after_drop",
        DDL(f"DROP FUNCTION IF EXISTS {_name}() CASCADE").execute_if(dialect="postgresql"),
    )

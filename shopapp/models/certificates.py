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

    The database itself enforces that (triggers below, and the same SQL in the
    initial migration), so no code path can rewrite a certificate.
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


# --- database-level immutability of certificates (same SQL as migration 0020) ---
_CONTENT_COLUMNS = (
    "number", "revision", "job_id", "issued_by_id", "issued_at", "reason",
    "pdf", "pdf_sha256", "data_json", "data_sha256", "verification_code",
)

SQLITE_CERTIFICATE_TRIGGERS = (
    "CREATE TRIGGER certificate_immutable BEFORE UPDATE ON certificate "
    "WHEN OLD.state = 'void' OR "
    + " OR ".join(f"NEW.{c} IS NOT OLD.{c}" for c in _CONTENT_COLUMNS)
    + " BEGIN SELECT RAISE(ABORT, 'certificate is immutable: issued certificates never change;"
    " reissue a new revision instead'); END",
    "CREATE TRIGGER certificate_no_delete BEFORE DELETE ON certificate "
    "BEGIN SELECT RAISE(ABORT, 'certificates are never deleted'); END",
)

POSTGRES_CERTIFICATE_TRIGGERS = (
    "CREATE FUNCTION certificate_guard() RETURNS trigger AS $$ BEGIN "
    "IF TG_OP = 'DELETE' THEN RAISE EXCEPTION 'certificates are never deleted'; END IF; "
    "IF OLD.state = 'void' OR "
    + " OR ".join(f"NEW.{c} IS DISTINCT FROM OLD.{c}" for c in _CONTENT_COLUMNS)
    + " THEN RAISE EXCEPTION 'certificate is immutable: issued certificates never change;"
    " reissue a new revision instead'; END IF; RETURN NEW; END; $$ LANGUAGE plpgsql",
    "CREATE TRIGGER certificate_immutable BEFORE UPDATE OR DELETE ON certificate "
    "FOR EACH ROW EXECUTE FUNCTION certificate_guard()",
)

for _sql in SQLITE_CERTIFICATE_TRIGGERS:
    event.listen(Certificate.__table__, "after_create", DDL(_sql).execute_if(dialect="sqlite"))
for _sql in POSTGRES_CERTIFICATE_TRIGGERS:
    event.listen(
        Certificate.__table__, "after_create", DDL(_sql).execute_if(dialect="postgresql")
    )
event.listen(
    Certificate.__table__,
    "before_drop",
    DDL("DROP FUNCTION IF EXISTS certificate_guard() CASCADE").execute_if(dialect="postgresql"),
)

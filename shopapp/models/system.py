"""Bookkeeping rows the use-cases need to stay correct under concurrency.

- :class:`NumberLock`: one row per numbering sequence (job numbers, certificate
  numbers). A use-case that allocates a number first updates its row in the same
  transaction, which serialises concurrent allocations (a row lock on
  PostgreSQL, the write lock on SQLite); the number itself is still derived from
  the rows already stored, so a rolled-back transaction gives its number back
  and numbers stay gapless.
- :class:`SubmissionToken`: a form's one-time token (or an API client's
  ``Idempotency-Key``). Stored with what the submission created, in the same
  transaction; a second submission with the same token is answered with the
  first one's result instead of saving twice.
- :class:`BackupLog`: every backup written and every restore made
  (``shopapp backup``/``restore``), so "when was the last backup?" has an answer.
"""

from __future__ import annotations

from sqlalchemy import BigInteger, ForeignKey, Integer, String, Text
from sqlalchemy.orm import Mapped, mapped_column

from shopapp.models.base import Base, IntPK, Timestamp, one_of


class NumberLock(Base):
    __tablename__ = "number_lock"

    key: Mapped[str] = mapped_column(String(64), primary_key=True)
    taken: Mapped[int] = mapped_column(Integer, nullable=False, default=0)


class SubmissionToken(Base):
    __tablename__ = "submission_token"

    token: Mapped[str] = mapped_column(String(80), primary_key=True)
    user_id: Mapped[int] = mapped_column(ForeignKey("user_account.id", ondelete="RESTRICT"),
                                         nullable=False, index=True)
    entity: Mapped[str] = mapped_column(String(40), nullable=False)
    entity_id: Mapped[int] = mapped_column(Integer, nullable=False)
    created_at: Mapped[Timestamp]


BACKUP_KINDS = ("backup", "restore")


class BackupLog(Base):
    """A backup archive written (``backup``) or read into this database (``restore``)."""

    __tablename__ = "backup_log"
    __table_args__ = (one_of("kind", BACKUP_KINDS),)

    id: Mapped[IntPK]
    kind: Mapped[str] = mapped_column(String(8), nullable=False)
    at: Mapped[Timestamp] = mapped_column(index=True)
    # Where the archive was written or read from, as given (absolute path).
    path: Mapped[str] = mapped_column(Text, nullable=False)
    size_bytes: Mapped[int] = mapped_column(BigInteger, nullable=False)
    sha256: Mapped[str] = mapped_column(String(64), nullable=False)
    schema_revision: Mapped[str] = mapped_column(String(32), nullable=False)
    row_count: Mapped[int] = mapped_column(Integer, nullable=False)

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
"""

from __future__ import annotations

from sqlalchemy import ForeignKey, Integer, String
from sqlalchemy.orm import Mapped, mapped_column

from shopapp.models.base import Base, Timestamp


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

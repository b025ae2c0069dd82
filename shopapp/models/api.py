"""Rows of the JSON API: per-user tokens and the replies kept for ``Idempotency-Key``.

- :class:`ApiToken`: a person's key for scripts. Only the SHA-256 of the secret is
  stored (a leaked database does not leak working tokens); the first characters
  (``prefix``) let a person tell their tokens apart. The token acts with its user's
  role, so a role change or deactivation applies to it at once.
- :class:`ApiIdempotentReply`: the first reply to a write sent with an
  ``Idempotency-Key``, stored in the write's own transaction. A retry with the same
  key and the same request gets this reply again; nothing is saved twice.
"""

from __future__ import annotations

import datetime as dt

from sqlalchemy import ForeignKey, Integer, LargeBinary, String, Text
from sqlalchemy.orm import Mapped, mapped_column, relationship

from shopapp.models.base import Base, IntPK, Timestamp, UTCDateTime
from shopapp.models.people import User


class ApiToken(Base):
    __tablename__ = "api_token"

    id: Mapped[IntPK]
    user_id: Mapped[int] = mapped_column(ForeignKey("user_account.id", ondelete="RESTRICT"),
                                         nullable=False, index=True)
    name: Mapped[str] = mapped_column(String(100), nullable=False)
    # SHA-256 hex of the secret; unique so a lookup by hash finds at most one token.
    secret_sha256: Mapped[str] = mapped_column(String(64), nullable=False, unique=True)
    prefix: Mapped[str] = mapped_column(String(16), nullable=False)
    created_at: Mapped[Timestamp]
    created_by_id: Mapped[int | None] = mapped_column(
        ForeignKey("user_account.id", ondelete="SET NULL"), index=True)
    last_used_at: Mapped[dt.datetime | None] = mapped_column(UTCDateTime())
    revoked_at: Mapped[dt.datetime | None] = mapped_column(UTCDateTime())
    revoked_by_id: Mapped[int | None] = mapped_column(
        ForeignKey("user_account.id", ondelete="SET NULL"), index=True)

    user: Mapped[User] = relationship(foreign_keys=[user_id])

    @property
    def revoked(self) -> bool:
        return self.revoked_at is not None

    def __repr__(self) -> str:
        return f"<ApiToken {self.prefix}… of user {self.user_id}>"


class ApiIdempotentReply(Base):
    __tablename__ = "api_idempotent_reply"

    # Keys are per user: two people's scripts may pick the same key.
    user_id: Mapped[int] = mapped_column(ForeignKey("user_account.id", ondelete="CASCADE"),
                                         primary_key=True, index=True)
    key: Mapped[str] = mapped_column(String(200), primary_key=True)
    # SHA-256 of method, path and body: the same key with another request is a conflict.
    request_sha256: Mapped[str] = mapped_column(String(64), nullable=False)
    status: Mapped[int] = mapped_column(Integer, nullable=False)
    content_type: Mapped[str] = mapped_column(String(100), nullable=False)
    body: Mapped[bytes] = mapped_column(LargeBinary, nullable=False)
    location: Mapped[str] = mapped_column(Text, nullable=False, default="")
    created_at: Mapped[Timestamp]

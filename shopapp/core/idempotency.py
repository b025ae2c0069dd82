"""Replies kept for the API's ``Idempotency-Key`` header (one home for the rule).

A client that retries a write after a lost answer sends the same key again. The first
successful reply is stored in the write's own transaction, so either both the change
and its reply are committed or neither is; a retry then gets the stored reply and
nothing is saved twice. The same key with another request (method, path or body) is a
mistake of the client and is refused, never silently answered with the first reply.
"""

from __future__ import annotations

import hashlib
from dataclasses import dataclass

from sqlalchemy import select
from sqlalchemy.orm import Session

from shopapp.core.errors import ServiceError
from shopapp.models import ApiIdempotentReply, User

MAX_KEY_LENGTH = 200


class KeyReused(ServiceError):
    """The key was used before for a different request."""

    status = 409


@dataclass(frozen=True)
class StoredReply:
    status: int
    content_type: str
    body: bytes
    location: str


def request_fingerprint(method: str, path: str, body: bytes) -> str:
    """SHA-256 over method, path and body: what makes two requests "the same"."""
    digest = hashlib.sha256()
    for part in (method.upper().encode(), path.encode(), body):
        digest.update(len(part).to_bytes(8, "big"))
        digest.update(part)
    return digest.hexdigest()


def check_key(key: str) -> str | None:
    """Why ``key`` cannot be an idempotency key, or None when it can."""
    if not key.strip():
        return "is empty"
    if len(key) > MAX_KEY_LENGTH:
        return f"is {len(key)} characters long, at most {MAX_KEY_LENGTH}"
    if any(ord(ch) < 33 or ord(ch) == 127 for ch in key):
        return "may hold only visible characters (no spaces or control characters)"
    return None


def replay(session: Session, user: User, key: str, fingerprint: str) -> StoredReply | None:
    """The stored reply for ``key`` of ``user``; raises :class:`KeyReused` for another request.

    Call it inside the write's transaction, after the write lock is taken (SQLite
    ``BEGIN IMMEDIATE``, see :mod:`shopapp.core.database`), so that two retries sent at
    once are serialised and the second one sees the first one's reply.
    """
    row = session.scalars(select(ApiIdempotentReply).where(
        ApiIdempotentReply.user_id == user.id, ApiIdempotentReply.key == key)).first()
    if row is None:
        return None
    if row.request_sha256 != fingerprint:
        raise KeyReused(f"Idempotency-Key {key[:40]!r} was already used for a different "
                        "request; use a new key for a new request")
    return StoredReply(row.status, row.content_type, bytes(row.body), row.location)


def remember(session: Session, user: User, key: str, fingerprint: str, reply: StoredReply
             ) -> None:
    """Store ``reply`` for ``key`` in the current transaction (flushed, not committed)."""
    session.add(ApiIdempotentReply(
        user_id=user.id, key=key, request_sha256=fingerprint, status=reply.status,
        content_type=reply.content_type, body=reply.body, location=reply.location))
    session.flush()

"""Audit events, written in the same transaction as the change they describe."""

from __future__ import annotations

import datetime as dt
import decimal
from collections.abc import Iterable
from typing import Any

from sqlalchemy import inspect
from sqlalchemy.orm import Session

from shopapp.models import AuditEvent, Base, User


def _jsonable(value: Any) -> Any:
    if isinstance(value, dt.datetime | dt.date):
        return value.isoformat()
    if isinstance(value, decimal.Decimal):
        return float(value)
    if isinstance(value, bytes):
        return f"<{len(value)} bytes>"
    return value


def snapshot(obj: Base, fields: Iterable[str] | None = None) -> dict[str, Any]:
    """The column values of ``obj`` as a JSON-able dict (for before/after)."""
    mapper = inspect(obj).mapper
    names = list(fields) if fields is not None else [c.key for c in mapper.column_attrs]
    return {name: _jsonable(getattr(obj, name)) for name in names}


def record(
    session: Session,
    *,
    by: User | None,
    entity: str,
    entity_id: int | None,
    action: str,
    before: dict[str, Any] | None = None,
    after: dict[str, Any] | None = None,
    job_id: int | None = None,
) -> AuditEvent:
    """Add an :class:`AuditEvent` to the session (flushed with the change)."""
    event = AuditEvent(
        user_id=by.id if by is not None else None,
        entity=entity,
        entity_id=entity_id,
        action=action,
        before=before,
        after=after,
        job_id=job_id,
    )
    session.add(event)
    return event

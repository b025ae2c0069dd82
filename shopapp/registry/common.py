"""What the registry's use-cases share: bounds, audit, savepoint flush, archiving, LIKE escaping.

Nothing with history is ever deleted: archiving hides a row from the default
lists and from new work, and unarchiving brings it back. Every change writes an
audit event (before/after snapshots) in the caller's transaction.
"""

from __future__ import annotations

import hashlib
import json
from collections.abc import Callable, Mapping, Sequence
from typing import Any

from sqlalchemy import func, select
from sqlalchemy.exc import IntegrityError
from sqlalchemy.orm import Session

from shopapp.core import audit
from shopapp.core.errors import ValidationFailed
from shopapp.core.permissions import require
from shopapp.models import JOB_STATES, Base, Customer, Job, User

# Bounds that catch typing errors without getting in the way of real rotors.
MAX_MASS_KG = 500_000.0
MAX_SPEED_RPM = 500_000.0
MAX_RADIUS_MM = 10_000.0
MAX_NOTES = 5000

# Jobs still in the shop: a customer, rotor or machine with one cannot be archived.
OPEN_JOB_STATES = tuple(s for s in JOB_STATES if s not in ("dispatched", "rejected"))


def record(
    session: Session, by: User, obj: Base, entity: str, action: str,
    before: dict[str, Any] | None,
) -> None:
    """The audit event of a change to ``obj`` (after = its snapshot now)."""
    audit.record(
        session,
        by=by,
        entity=entity,
        entity_id=obj.id,  # type: ignore[attr-defined]
        action=action,
        before=before,
        after=audit.snapshot(obj),
    )


def _is_unique_violation(exc: IntegrityError) -> bool:
    orig = exc.orig
    return getattr(orig, "sqlstate", None) == "23505" or "UNIQUE" in str(orig).upper()


def flush_unique(session: Session, obj: Base, field: str, message: str) -> None:
    """Flush ``obj`` inside a savepoint, so a lost race on a unique key is a message."""
    try:
        with session.begin_nested():
            session.add(obj)
            session.flush()
    except IntegrityError as exc:
        if _is_unique_violation(exc):
            raise ValidationFailed(field, message) from exc
        raise


def edit_stamp(obj: Base, fields: Sequence[str]) -> str:
    """The state of ``obj``'s ``fields`` as an edit form is drawn with it: a short hash of
    each field's stored value, in order, so a later save can tell which ones someone else
    changed meanwhile (:func:`changed_since`)."""
    values = audit.snapshot(obj, fields)
    return ".".join(
        hashlib.sha256(json.dumps(values[f], sort_keys=True, default=str).encode()).hexdigest()[:8]
        for f in fields)


def changed_since(obj: Base, fields: Sequence[str], drawn: str) -> list[str]:
    """The fields of ``obj`` stored differently now than when the form stamped ``drawn``
    was drawn (every field, when the stamp is not one of this record's)."""
    then, now = drawn.split("."), edit_stamp(obj, fields).split(".")
    if len(then) != len(now):
        return list(fields)
    return [f for f, a, b in zip(fields, then, now, strict=True) if a != b]


def edit_conflict(changed: Sequence[str]) -> str:
    """The refusal of an edit saved over someone else's (``changed``: their fields)."""
    return (f"saved by someone else since you opened this form "
            f"({', '.join(f.replace('_', ' ') for f in changed)} changed); nothing of yours "
            "was saved. The form keeps what you typed and now stands on the stored record: "
            "check the fields named and save again to keep yours")


def refuse_if_changed(obj: Base, fields: Sequence[str], drawn: str | None, *,
                      entity: str) -> None:
    """Refuse an edit form's save when someone else saved ``obj`` after the form was
    drawn (``drawn``: its :func:`edit_stamp`); ``None`` (API, imports: they send only what
    changes) is not checked. Two people saving the whole form at once otherwise put the
    first one's fields back without a word."""
    if drawn is None:
        return
    changed = changed_since(obj, fields, drawn)
    if changed:
        raise ValidationFailed(entity, edit_conflict(changed))


def refuse_unknown(fields: Mapping[str, Any], allowed: tuple[str, ...]) -> None:
    """A field name the use-case does not know is a programming error, not a message."""
    extra = sorted(set(fields) - set(allowed))
    if extra:
        raise TypeError(f"fields the use-case does not know: {', '.join(extra)}")


def update_fields(
    session: Session, obj: Base, clean: Mapping[str, Any], *, by: User, entity: str,
    field: str, taken: str,
) -> None:
    """Write checked values to ``obj``, flush (a unique clash on ``field`` is ``taken``), audit."""
    before = audit.snapshot(obj)
    for name, value in clean.items():
        setattr(obj, name, value)
    flush_unique(session, obj, field, taken)
    record(session, by, obj, entity, "update", before)


def open_jobs(session: Session, column: Any, value: int) -> int:
    """How many jobs with ``column == value`` are still in the shop."""
    stmt = (
        select(func.count())
        .select_from(Job)
        .where(column == value, Job.state.in_(OPEN_JOB_STATES))
    )
    return session.scalar(stmt) or 0


def set_archived(
    session: Session, obj: Base, *, by: User, action: str, entity: str, archived: bool,
    open_job_column: Any = None, refusal: Callable[[int], str] | None = None,
) -> None:
    """Archive or unarchive ``obj`` (role ``action``); archiving is refused while
    jobs with ``open_job_column == obj.id`` are open (``refusal(count)`` says why)."""
    require(by, action)
    if archived and open_job_column is not None and refusal is not None:
        n = open_jobs(session, open_job_column, obj.id)  # type: ignore[attr-defined]
        if n:
            raise ValidationFailed("archived", refusal(n))
    before = audit.snapshot(obj)
    obj.archived = archived  # type: ignore[attr-defined]
    session.flush()
    record(session, by, obj, entity, "archive" if archived else "unarchive", before)


def require_live_customer(customer: Customer | None, field: str = "customer_id") -> Customer:
    """The customer, when there is one and it is not archived."""
    if customer is None:
        raise ValidationFailed(field, "is required; choose a customer")
    if customer.archived:
        raise ValidationFailed(field, f"{customer.name} is archived; unarchive it first")
    return customer


def escape_like(text: str) -> str:
    """``text`` with LIKE's wildcards taken literally (escape character ``\\``)."""
    return text.replace("\\", "\\\\").replace("%", "\\%").replace("_", "\\_")


def like_prefix(text: str) -> str:
    return escape_like(text) + "%"


def contains(q: str) -> str:
    """A LIKE pattern for ``q`` anywhere (first 100 characters, wildcards literal)."""
    return f"%{escape_like(q.strip()[:100])}%"

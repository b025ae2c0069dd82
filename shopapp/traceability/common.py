"""What the traceability use-cases share: the numerics' refusals as
messages, and adding a row with a unique name (arbors, proving rotors)."""

from __future__ import annotations

from sqlalchemy import select
from sqlalchemy.exc import IntegrityError
from sqlalchemy.orm import Session

from shopapp.balancing.errors import BalancingInputError
from shopapp.core import audit
from shopapp.core.errors import ValidationFailed
from shopapp.models import Arbor, ProvingRotor, User


def core_error(exc: BalancingInputError, prefix: str = "") -> ValidationFailed:
    """A refusal of :mod:`shopapp.balancing` as a field message (``prefix`` + its field)."""
    field = f"{prefix}{exc.field}" if prefix else exc.field
    return ValidationFailed(field, exc.message)


def flush_named(session: Session, noun: str) -> None:
    """Flush inside a savepoint: a name taken meanwhile (unique key) is a message."""
    try:
        with session.begin_nested():
            session.flush()
    except IntegrityError:
        raise ValidationFailed("name", f"another {noun} has that name") from None


def add_named(session: Session, obj: Arbor | ProvingRotor, *, by: User, entity: str,
              noun: str, taken: str) -> None:
    """Add ``obj`` (its ``name`` unique; ``taken`` says so when it is not) and audit it."""
    model = type(obj)
    if session.scalar(select(model.id).where(model.name == obj.name)) is not None:
        raise ValidationFailed("name", taken)
    session.add(obj)
    flush_named(session, noun)
    audit.record(session, by=by, entity=entity, entity_id=obj.id, action="create",
                 after=audit.snapshot(obj))

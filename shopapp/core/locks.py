"""Locks a use-case takes so that two people saving at once cannot collide.

- :func:`hold_sequence` before allocating a number (job, certificate): the
  sequence's ``number_lock`` row is updated in the same transaction, so a second
  allocation waits until the first commits and then sees its number. A rollback
  takes nothing: numbers stay gapless.
- :func:`hold_row` before a use-case decides on a row's current state (the job
  whose next run number is computed, the certificate being voided or reissued):
  ``SELECT … FOR UPDATE`` and a refresh, so the decision is made on the
  committed state.

On PostgreSQL these are row locks. On SQLite a writing request already holds the
database's write lock from its first statement (``BEGIN IMMEDIATE``, see
:mod:`shopapp.core.database`); ``FOR UPDATE`` is not rendered there, and the
``number_lock`` update is a write like any other.
"""

from __future__ import annotations

from sqlalchemy import inspect, select, update
from sqlalchemy.dialects.postgresql import insert as pg_insert
from sqlalchemy.dialects.sqlite import insert as sqlite_insert
from sqlalchemy.orm import Session

from shopapp.models import Base, NumberLock


def hold_sequence(session: Session, key: str) -> None:
    """Serialise number allocation for sequence ``key`` until this transaction ends.

    Creates the sequence's ``number_lock`` row if needed (``ON CONFLICT DO
    NOTHING``, so two first users do not collide) and updates it, which locks it.
    """
    insert = sqlite_insert if session.get_bind().dialect.name == "sqlite" else pg_insert
    session.execute(
        insert(NumberLock).values(key=key, taken=0).on_conflict_do_nothing(index_elements=["key"])
    )
    session.execute(
        update(NumberLock).where(NumberLock.key == key).values(taken=NumberLock.taken + 1)
        .execution_options(synchronize_session=False)
    )


def hold_row(session: Session, obj: Base) -> None:
    """Lock ``obj``'s row until this transaction ends and reload it as committed."""
    session.flush()  # pending changes of this transaction are kept, not refreshed away
    mapper = inspect(obj).mapper
    pk_cols = mapper.primary_key
    ident = mapper.primary_key_from_instance(obj)
    stmt = select(*pk_cols).where(*(c == v for c, v in zip(pk_cols, ident, strict=True)))
    session.execute(stmt.with_for_update())
    session.refresh(obj)

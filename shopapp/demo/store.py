"""How the demo writes its rows: explicit ids, bulk INSERTs in chunks, one storage format.

Values go in as Python objects (aware datetimes, dates, dicts) and are stored
by the columns' own types (:class:`shopapp.models.base.UTCDateTime` …): the
Core ``insert(Model.__table__)``; in bulk mode on SQLite the same values are
turned into what the driver stores by each column type's own bind processor
and handed to ``executemany`` directly (SQLAlchemy's per-row statement
handling is a third of the bulk time), so the storage format has one home.
The bulk generator's worker processes build those statements and send them to
the process that holds the transaction (:attr:`Store.sink`,
:mod:`shopapp.demo.parallel`).
"""

from __future__ import annotations

import datetime as dt
import operator
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from dataclasses import dataclass, field
from typing import Any

from sqlalchemy import func, insert, select, text
from sqlalchemy.orm import Session

from shopapp.models import (
    AuditEvent,
    Certificate,
    Correction,
    Customer,
    InfluenceSet,
    Job,
    JobTransition,
    Machine,
    MachineVerification,
    Rotor,
    RotorType,
    Run,
    RunReading,
    User,
)
from shopapp.models.base import UTCDateTime

CHUNK = 5000
# An INSERT and its rows as the driver takes them.
Statement = tuple[str, list[tuple[Any, ...]]]
# Tables the generator writes with explicit ids (their sequences are moved on for PostgreSQL).
ID_TABLES = (User, Customer, RotorType, Rotor, Machine, MachineVerification, Job,
             JobTransition, Run, RunReading, Correction, InfluenceSet, AuditEvent, Certificate)


class Ids:
    """Explicit primary keys, continuing after what the database already holds."""

    def __init__(self, session: Session) -> None:
        self._next: dict[str, int] = {}
        self._step = 1
        for model in ID_TABLES:
            top = session.scalar(select(func.max(model.id))) or 0
            self._next[model.__tablename__] = top + 1

    def take(self, model: type[Any]) -> int:
        name = model.__tablename__
        value = self._next[name]
        self._next[name] = value + self._step
        return value

    def interleave(self, k: int, n: int) -> None:
        """From now on take every ``n``-th id, starting ``k`` on: the share of worker ``k``
        of ``n`` (:mod:`shopapp.demo.parallel`), so the workers' ids never meet."""
        self._next = {name: value + k for name, value in self._next.items()}
        self._step = n

    @property
    def next_ids(self) -> dict[str, int]:
        return dict(self._next)

    def continue_after(self, taken: list[dict[str, int]]) -> None:
        """One id at a time again, after every id the workers took."""
        self._next = {name: max(t[name] for t in taken) for name in self._next}
        self._step = 1


@dataclass
class Rows:
    """Rows collected for bulk insertion, in foreign-key order."""

    jobs: list[dict[str, Any]] = field(default_factory=list)
    transitions: list[dict[str, Any]] = field(default_factory=list)
    runs: list[dict[str, Any]] = field(default_factory=list)
    readings: list[dict[str, Any]] = field(default_factory=list)
    corrections: list[dict[str, Any]] = field(default_factory=list)
    audits: list[dict[str, Any]] = field(default_factory=list)


class Store:
    """Ids, the rows waiting to be written and how they are written."""

    def __init__(self, session: Session, *, bulk: bool) -> None:
        self.session = session
        self.ids = Ids(session)
        self.rows = Rows()
        self.counts = {"jobs": 0, "runs": 0, "readings": 0, "corrections": 0,
                       "transitions": 0, "audits": 0, "sets": 0}
        self.job_states: list[str] = []
        self.dialect = session.get_bind().dialect
        # Bulk mode on SQLite hands the stored values to the driver itself.
        self.to_driver = bulk and self.dialect.name == "sqlite"
        # A worker process of the bulk generator sends its statements here instead of
        # executing them (:mod:`shopapp.demo.parallel`).
        self.sink: Callable[[list[Statement]], object] | None = None

    def audit(self, at: Any, by: int | None, entity: str, entity_id: int | None,
              action: str, after: dict[str, Any] | None = None,
              before: dict[str, Any] | None = None, job_id: int | None = None) -> None:
        self.rows.audits.append({
            "id": self.ids.take(AuditEvent), "at": at, "user_id": by, "entity": entity,
            "entity_id": entity_id, "action": action, "before": before, "after": after,
            "job_id": job_id,
        })

    def insert(self, model: type[Any], rows: list[dict[str, Any]]) -> None:
        """Core bulk INSERT in chunks (bulk mode on SQLite: straight to the driver)."""
        if not rows:
            return
        table = model.__table__
        if self.to_driver:
            _insert_driver(self.session, table, rows)
            return
        for i in range(0, len(rows), CHUNK):
            self.session.execute(insert(table), rows[i:i + CHUNK])

    def flush_rows(self) -> None:
        """Insert the collected job rows (foreign-key order) and forget them."""
        rows = self.rows
        statements: list[Statement] = []
        for model, batch, name in (
            (Job, rows.jobs, "jobs"), (JobTransition, rows.transitions, "transitions"),
            (Run, rows.runs, "runs"), (RunReading, rows.readings, "readings"),
            (Correction, rows.corrections, "corrections"), (AuditEvent, rows.audits, "audits"),
        ):
            if self.sink is not None:
                if batch:
                    statements.append(driver_statement(self.dialect, model.__table__, batch))
            else:
                self.insert(model, batch)
            self.counts[name] += len(batch)
        if self.sink is not None and statements:
            self.sink(statements)
        self.job_states.extend(r["state"] for r in rows.jobs)
        for batch in (rows.jobs, rows.transitions, rows.runs, rows.readings, rows.corrections,
                      rows.audits):
            batch.clear()

    def move_sequences(self) -> None:
        """After explicit ids, move PostgreSQL's id sequences past the largest id."""
        if self.session.get_bind().dialect.name != "postgresql":
            return
        for model in ID_TABLES:
            name = model.__tablename__
            self.session.execute(text(
                f"SELECT setval(pg_get_serial_sequence('{name}', 'id'), "
                f"(SELECT COALESCE(MAX(id), 0) + 1 FROM {name}), false)"
            ))


def _insert_driver(session: Session, table: Any, rows: list[dict[str, Any]]) -> None:
    """executemany through the driver, each value stored as its column type stores it."""
    execute_statements(session, [driver_statement(session.get_bind().dialect, table, rows)])


def execute_statements(session: Session, statements: list[Statement]) -> None:
    """Run :func:`driver_statement` results in the session's transaction, in chunks."""
    conn = session.connection()
    for sql, params in statements:
        for start in range(0, len(params), CHUNK):
            conn.exec_driver_sql(sql, params[start:start + CHUNK])


def driver_statement(dialect: Any, table: Any, rows: list[dict[str, Any]]) -> Statement:
    """The INSERT of ``rows`` and its parameters as the driver takes them (each value
    turned into what its column type stores)."""
    cols = list(rows[0])
    sql = (f"INSERT INTO {table.name} ({', '.join(cols)}) "
           f"VALUES ({', '.join('?' for _ in cols)})")
    get = operator.itemgetter(*cols)
    # Column by column (transposed with zip, in C), so a column without a processor is
    # not touched row by row.
    columns: list[Any] = (list(zip(*map(get, rows), strict=True)) if len(cols) > 1
                          else [[get(row) for row in rows]])
    for i, c in enumerate(cols):
        process = bind_processor(table.c[c].type, dialect)
        if process is not None:
            columns[i] = [None if v is None else process(v) for v in columns[i]]
    return sql, list(zip(*columns, strict=True))


def sqlite_utc_text(value: dt.datetime) -> str:
    """What :class:`~shopapp.models.base.UTCDateTime` stores on SQLite for ``value``: the
    UTC time as ``YYYY-MM-DD HH:MM:SS.ffffff`` (SQLAlchemy's SQLite DATETIME format).

    One C call instead of the type's two processors (they took about a tenth of a bulk
    worker's time); tested equal to them (``tests/demo/test_simulator.py``).
    """
    if value.tzinfo is dt.UTC:  # the generator's own times: drop the "+00:00"
        return value.isoformat(" ", "microseconds")[:-6]
    if value.tzinfo is None:
        raise ValueError("naive datetime given; shopapp stores UTC-aware datetimes only")
    return value.astimezone(dt.UTC).replace(tzinfo=None).isoformat(" ", "microseconds")


def bind_processor(column_type: Any, dialect: Any) -> Callable[[Any], Any] | None:
    """The function that turns a value of ``column_type`` into what the driver stores:
    the type's own bind processor, or :func:`sqlite_utc_text` for UTC times on SQLite."""
    if dialect.name == "sqlite" and isinstance(column_type, UTCDateTime):
        return sqlite_utc_text
    return column_type.dialect_impl(dialect).bind_processor(dialect)


#: The tables the bulk generator's workers fill (a 100 000-job shop: about 6 million rows).
BULK_TABLES = (Job, JobTransition, Run, RunReading, Correction, AuditEvent)


@contextmanager
def sqlite_indexes_built_after(session: Session, models: tuple[type[Any], ...] = BULK_TABLES
                               ) -> Iterator[None]:
    """On SQLite: the non-unique indexes of ``models`` are dropped inside, and created again
    at the end from their own stored DDL (``sqlite_master.sql``), in the same transaction.

    Building an index once over sorted keys is far cheaper than keeping it up to date row
    by row through millions of inserts; unique indexes stay, so every constraint is checked
    as the rows go in. Nothing may read these tables inside. An error leaves the indexes to
    the caller's rollback (SQLite's DDL is transactional).
    """
    conn = session.connection()
    if conn.dialect.name != "sqlite":
        raise ValueError("SQLite only (the bulk generator's parallel path), "
                         f"not {conn.dialect.name}")
    names = [m.__tablename__ for m in models]
    marks = ", ".join("?" for _ in names)
    kept = [(str(name), str(sql)) for name, sql in conn.exec_driver_sql(
        f"SELECT name, sql FROM sqlite_master WHERE type = 'index' AND sql IS NOT NULL "
        f"AND tbl_name IN ({marks}) ORDER BY name", tuple(names))]
    dropped = [(name, sql) for name, sql in kept
               if not sql.lstrip().upper().startswith("CREATE UNIQUE")]
    for name, _sql in dropped:
        conn.exec_driver_sql(f'DROP INDEX "{name}"')
    yield
    for _name, sql in dropped:
        conn.exec_driver_sql(sql)

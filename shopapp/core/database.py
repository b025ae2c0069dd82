"""Engine and session factory.

One :class:`Database` per application. Requests and CLI commands open a session,
call services (which flush), and commit once at the end; any error rolls back.
"""

from __future__ import annotations

from collections.abc import Iterator
from contextlib import contextmanager
from typing import Any

from sqlalchemy import Engine, create_engine, event
from sqlalchemy.engine import make_url
from sqlalchemy.orm import Session, sessionmaker


def _sqlite_pragmas(dbapi_connection: Any, _record: Any) -> None:
    # pysqlite opens transactions lazily and breaks SAVEPOINT; take control of
    # BEGIN ourselves (SQLAlchemy docs, "Serializable isolation / Savepoints /
    # Transactional DDL" for pysqlite).
    dbapi_connection.isolation_level = None
    cur = dbapi_connection.cursor()
    cur.execute("PRAGMA foreign_keys=ON")
    cur.execute("PRAGMA journal_mode=WAL")
    cur.execute("PRAGMA busy_timeout=5000")
    cur.close()


# Execution option: on SQLite, BEGIN IMMEDIATE (take the write lock at the start). A deferred
# transaction that reads first fails at its first write ("database is locked", no waiting) when
# another process committed after it began (WAL snapshot); an immediate one waits for the lock
# (busy_timeout) and then sees the latest data. For work that will write (requests that may
# change data, a background load committing in slices).
SQLITE_IMMEDIATE = "shopapp_sqlite_immediate"


def _sqlite_begin(conn: Any) -> None:
    immediate = conn.get_execution_options().get(SQLITE_IMMEDIATE)
    conn.exec_driver_sql("BEGIN IMMEDIATE" if immediate else "BEGIN")


def make_engine(url: str, *, echo: bool = False) -> Engine:
    """Create an engine; SQLite gets foreign keys, WAL and working savepoints."""
    parsed = make_url(url)
    kwargs: dict[str, Any] = {"echo": echo}
    if parsed.get_backend_name() == "postgresql" and parsed.drivername == "postgresql":
        # psycopg 3 is the driver we ship; a bare postgresql:// would look for psycopg2.
        parsed = parsed.set(drivername="postgresql+psycopg")
    if parsed.get_backend_name() == "sqlite":
        kwargs["connect_args"] = {"check_same_thread": False}
    else:
        kwargs["pool_pre_ping"] = True
    engine = create_engine(parsed, **kwargs)
    if parsed.get_backend_name() == "sqlite":
        event.listen(engine, "connect", _sqlite_pragmas)
        event.listen(engine, "begin", _sqlite_begin)
    return engine


class Database:
    """Holds the engine and the session factory of one application."""

    def __init__(self, url: str, *, echo: bool = False) -> None:
        self.url = url
        self.engine = make_engine(url, echo=echo)
        self.sessionmaker = sessionmaker(bind=self.engine, expire_on_commit=False)

    @property
    def backend(self) -> str:
        """``"sqlite"`` or ``"postgresql"``."""
        return self.engine.dialect.name

    @contextmanager
    def session(self) -> Iterator[Session]:
        """A session that commits on success and rolls back on any error."""
        sess = self.sessionmaker()
        try:
            yield sess
            sess.commit()
        except BaseException:
            sess.rollback()
            raise
        finally:
            sess.close()

    def dispose(self) -> None:
        self.engine.dispose()

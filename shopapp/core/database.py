"""Engine and session factory.

One :class:`Database` per application. Requests and CLI commands open a session,
call services (which flush), and commit once at the end; any error rolls back.

Writes take their lock up front. SQLite's default deferred ``BEGIN`` reads first
and upgrades to the write lock later; when another writer got in between, SQLite
refuses the upgrade at once ("database is locked", ``busy_timeout`` cannot help an
upgrade). A session that will write therefore starts with ``BEGIN IMMEDIATE``
(:meth:`Database.write_session`, and every unsafe-method request through
:func:`shopapp.core.extensions.db_session`), which waits up to ``busy_timeout``
for the lock and then holds it. PostgreSQL needs no such thing: its row locks
(``number_lock``, ``SELECT … FOR UPDATE`` on the job) serialise what must be.
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
    cur.execute(f"PRAGMA busy_timeout={SQLITE_BUSY_TIMEOUT_MS}")
    # INSERT OR REPLACE then fires the DELETE trigger of the row it replaces, so an issued
    # certificate cannot be replaced (migration 0003 also refuses it without this pragma).
    cur.execute("PRAGMA recursive_triggers=ON")
    cur.close()


# How long a writer waits for another writer's transaction to end (SQLite).
SQLITE_BUSY_TIMEOUT_MS = 20_000
# Execution option that marks a connection whose transaction will write.
WRITE_OPTION = "shopapp_write"
# The same option under the name the demo loader and its tests use.
SQLITE_IMMEDIATE = WRITE_OPTION


def _sqlite_begin(conn: Any) -> None:
    if conn.get_execution_options().get(WRITE_OPTION):
        conn.exec_driver_sql("BEGIN IMMEDIATE")
    else:
        conn.exec_driver_sql("BEGIN")


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

    def begin_write(self, sess: Session) -> None:
        """Start ``sess``'s transaction as a writer (``BEGIN IMMEDIATE`` on SQLite).

        Must be called before the session's first statement; later it is a no-op
        for the transaction already open.
        """
        sess.connection(execution_options={"shopapp_write": True})  # WRITE_OPTION

    @contextmanager
    def write_session(self) -> Iterator[Session]:
        """Like :meth:`session`, with the write lock taken up front (CLI commands that write)."""
        with self.session() as sess:
            self.begin_write(sess)
            yield sess

    def dispose(self) -> None:
        self.engine.dispose()

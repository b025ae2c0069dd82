"""Flask extensions, created unbound; ``create_app`` binds them.

Also the per-request database session: ``db_session()`` opens one on first use;
the request's teardown rolls back anything uncommitted and closes it. Views
commit once, after the service call succeeded. A request that may change data
(not GET/HEAD/OPTIONS) begins its SQLite transaction IMMEDIATE, so another
process's commit meanwhile cannot make its write fail (``SQLITE_IMMEDIATE``).
"""

from __future__ import annotations

from flask import current_app, g, has_request_context, request
from flask_login import LoginManager
from flask_wtf.csrf import CSRFProtect
from sqlalchemy.orm import Session

from shopapp.core.database import Database

login_manager = LoginManager()
csrf = CSRFProtect()


def get_database() -> Database:
    """The application's :class:`~shopapp.core.database.Database`."""
    return current_app.extensions["shopapp.db"]


UNSAFE_METHODS = frozenset({"POST", "PUT", "PATCH", "DELETE"})


def db_session() -> Session:
    """The session of the current request (or app context).

    A request that may write (POST, PUT, PATCH, DELETE) takes the write lock up
    front (see :mod:`shopapp.core.database`); a GET only reads.
    """
    if "db_session" not in g:
        database = get_database()
        sess = database.sessionmaker()
        if has_request_context() and request.method in UNSAFE_METHODS:
            database.begin_write(sess)
        g.db_session = sess
    return g.db_session


def close_db_session(_exc: BaseException | None = None) -> None:
    sess = g.pop("db_session", None)
    if sess is not None:
        sess.rollback()
        sess.close()


def discard_db_session() -> None:
    """Throw away the request's session after an error: roll back and close it.

    Objects already loaded (the logged-in user) are detached first so that the
    rollback does not expire them; nothing after this touches the database
    through them.
    """
    sess = g.pop("db_session", None)
    if sess is None:
        return
    try:
        sess.expunge_all()
        sess.rollback()
    finally:
        sess.close()

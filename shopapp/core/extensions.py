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

from shopapp.core.database import SQLITE_IMMEDIATE, Database

login_manager = LoginManager()
csrf = CSRFProtect()


def get_database() -> Database:
    """The application's :class:`~shopapp.core.database.Database`."""
    return current_app.extensions["shopapp.db"]


def db_session() -> Session:
    """The session of the current request (or app context)."""
    if "db_session" not in g:
        g.db_session = get_database().sessionmaker()
        if has_request_context() and request.method not in ("GET", "HEAD", "OPTIONS"):
            g.db_session.connection(execution_options={SQLITE_IMMEDIATE: True})
    return g.db_session


def close_db_session(_exc: BaseException | None = None) -> None:
    sess = g.pop("db_session", None)
    if sess is not None:
        sess.rollback()
        sess.close()

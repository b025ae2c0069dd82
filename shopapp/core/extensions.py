"""Flask extensions, created unbound; ``create_app`` binds them.

Also the per-request database session: ``db_session()`` opens one on first use;
the request's teardown rolls back anything uncommitted and closes it. Views
commit once, after the service call succeeded.
"""

from __future__ import annotations

from flask import current_app, g
from flask_login import LoginManager
from flask_wtf.csrf import CSRFProtect
from sqlalchemy.orm import Session

from shopapp.core.database import Database

login_manager = LoginManager()
csrf = CSRFProtect()


def get_database() -> Database:
    """The application's :class:`~shopapp.core.database.Database`."""
    return current_app.extensions["shopapp.db"]


def db_session() -> Session:
    """The session of the current request (or app context)."""
    if "db_session" not in g:
        g.db_session = get_database().sessionmaker()
    return g.db_session


def close_db_session(_exc: BaseException | None = None) -> None:
    sess = g.pop("db_session", None)
    if sess is not None:
        sess.rollback()
        sess.close()

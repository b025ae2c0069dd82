"""Fixtures that read like the trade: app, client, runner, login_as, factories.

The database: SQLite in a temp folder, or PostgreSQL when
``SHOPAPP_TEST_POSTGRES_URL`` is set (``scripts/test --postgres`` sets it). The
schema is created once per run; each test runs inside an outer transaction that
is rolled back afterwards (SQLAlchemy's "join a session into an external
transaction" recipe), so views may commit and tests still stay isolated.
CSRF stays ON: the test client adds the token a real browser would have.
"""

from __future__ import annotations

import contextlib
import itertools
import os
import re
import uuid
from collections.abc import Callable, Iterator
from pathlib import Path
from typing import Any

import pytest
from flask import Flask
from flask.testing import FlaskClient
from sqlalchemy import Connection, Engine, event, text
from sqlalchemy.engine import make_url
from sqlalchemy.orm import Session

from shopapp import create_app
from shopapp.core.database import make_engine
from shopapp.core.forms import new_form_token
from shopapp.models import Base
from tests import factories

PASSWORD = "correct-horse-42"
_CSRF_RE = re.compile(r'name="csrf_token"[^>]*value="([^"]+)"')


def _postgres_url() -> str | None:
    return os.environ.get("SHOPAPP_TEST_POSTGRES_URL") or None


@pytest.fixture(scope="session")
def backend() -> str:
    return "postgresql" if _postgres_url() else "sqlite"


@pytest.fixture(scope="session")
def database_url(tmp_path_factory: pytest.TempPathFactory) -> str:
    pg = _postgres_url()
    if pg:
        return pg
    return f"sqlite:///{tmp_path_factory.mktemp('db') / 'test.sqlite3'}"


@pytest.fixture(scope="session")
def engine(database_url: str) -> Iterator[Engine]:
    eng = make_engine(database_url)
    Base.metadata.drop_all(eng)
    Base.metadata.create_all(eng)
    yield eng
    Base.metadata.drop_all(eng)
    eng.dispose()


@pytest.fixture()
def connection(engine: Engine) -> Iterator[Connection]:
    conn = engine.connect()
    outer = conn.begin()
    yield conn
    outer.rollback()
    conn.close()


@pytest.fixture()
def app(database_url: str, connection: Connection, tmp_path: Path) -> Iterator[Flask]:
    application = create_app(
        {
            "TESTING": True,
            "SECRET_KEY": "test-only-secret",
            "DATABASE_URL": database_url,
            "INSTANCE_PATH": str(tmp_path),
            "WTF_CSRF_ENABLED": True,
        }
    )
    application.extensions["shopapp.db"].sessionmaker.configure(
        bind=connection, join_transaction_mode="create_savepoint"
    )
    # No app context is held open here: each request must get its own, or
    # ``g`` (and the request's db session) would leak from one request to the next.
    yield application
    application.extensions["shopapp.db"].dispose()


@pytest.fixture()
def db(app: Flask) -> Iterator[Session]:
    """A session on the test's transaction (what the views see)."""
    sess = app.extensions["shopapp.db"].sessionmaker()
    yield sess
    sess.close()


def with_form_token(data: dict[str, Any]) -> dict[str, Any]:
    """``data`` plus a fresh one-time form token, as a form freshly drawn by the page would
    carry (``form_token``, and ``<prefix>-form_token`` for each prefix of the fields).
    Data that already has a token (a test of double submits) is left as it is."""
    if any(str(k).endswith("form_token") for k in data):
        return data
    token = new_form_token()
    prefixes = {str(k).split("-", 1)[0] for k in data if "-" in str(k)}
    return {**data, "form_token": token, **{f"{p}-form_token": token for p in prefixes}}


class ShopClient(FlaskClient):
    """A test client that sends the CSRF token and the one-time form token a browser
    would, unless told not to (``csrf=False``, ``form_token=False``)."""

    csrf_value: str | None = None

    def refresh_csrf(self, url: str = "/login") -> str | None:
        page = super().get(url)
        match = _CSRF_RE.search(page.get_data(as_text=True))
        self.csrf_value = match.group(1) if match else None
        return self.csrf_value

    def post(self, *args: Any, csrf: bool = True, form_token: bool = True,  # type: ignore[override]
             **kwargs: Any):
        if csrf and "json" not in kwargs:
            data = dict(kwargs.pop("data", None) or {})
            if "csrf_token" not in data:
                data["csrf_token"] = self.csrf_value or self.refresh_csrf("/login")
            kwargs["data"] = with_form_token(data) if form_token else data
        return super().post(*args, **kwargs)


@pytest.fixture()
def client(app: Flask) -> ShopClient:
    app.test_client_class = ShopClient
    return app.test_client()  # type: ignore[return-value]


@pytest.fixture()
def runner(app: Flask):  # type: ignore[no-untyped-def]
    return app.test_cli_runner()


_counter = itertools.count(1)


@pytest.fixture()
def make_user(db: Session) -> Callable[..., Any]:
    def make(role: str = "operator", username: str | None = None, **kw: Any):  # type: ignore[no-untyped-def]
        name = username or f"{role}{next(_counter)}"
        user = factories.user(db, username=name, role=role, password=PASSWORD, **kw)
        db.commit()
        return user

    return make


@pytest.fixture()
def login_as(client: ShopClient, make_user: Callable[..., Any]) -> Callable[..., Any]:
    """``login_as("quality")`` creates a user of that role and logs the client in."""

    def login(role: str = "operator", **kw: Any):  # type: ignore[no-untyped-def]
        user = make_user(role, **kw)
        client.refresh_csrf("/login")
        resp = client.post("/login", data={"username": user.username, "password": PASSWORD})
        assert resp.status_code == 302, resp.get_data(as_text=True)[:500]
        client.refresh_csrf("/")
        return user

    return login


@pytest.fixture()
def shop(db: Session) -> factories.ShopFactory:
    """Factories for customers, rotor types, rotors, machines and jobs."""
    return factories.ShopFactory(db)


@pytest.fixture()
def count_queries(connection: Connection) -> Callable[[], Any]:
    """``with count_queries() as q: ...``; then ``q.count`` is the number of SQL statements."""

    class Counter:
        def __init__(self) -> None:
            self.count = 0
            self.statements: list[str] = []

        def _on(self, _conn: Any, _cur: Any, statement: str, *_a: Any) -> None:
            if statement.strip().upper().startswith(("SAVEPOINT", "RELEASE", "ROLLBACK TO")):
                return
            self.count += 1
            self.statements.append(statement)

        def __enter__(self) -> Counter:
            event.listen(connection, "before_cursor_execute", self._on)
            return self

        def __exit__(self, *exc: Any) -> None:
            event.remove(connection, "before_cursor_execute", self._on)

    return Counter


@contextlib.contextmanager
def empty_database(database_url: str, tmp_path: Path, label: str) -> Iterator[str]:
    """An empty database of the suite's backend named after ``label``, removed afterwards."""
    url = make_url(database_url)
    if url.get_backend_name() == "sqlite":
        yield f"sqlite:///{tmp_path / f'{label}.sqlite3'}"
        return
    name = f"shopapp_{label}_{uuid.uuid4().hex[:10]}"
    base = make_engine(database_url)
    admin = base.execution_options(isolation_level="AUTOCOMMIT")
    with admin.connect() as conn:
        conn.execute(text(f'CREATE DATABASE "{name}"'))
    try:
        yield url.set(database=name).render_as_string(hide_password=False)
    finally:
        with admin.connect() as conn:
            conn.execute(
                text(
                    "SELECT pg_terminate_backend(pid) FROM pg_stat_activity "
                    "WHERE datname = :n AND pid <> pg_backend_pid()"
                ),
                {"n": name},
            )
            conn.execute(text(f'DROP DATABASE IF EXISTS "{name}"'))
        # The option engine shares its parent's pool: dispose the parent itself.
        base.dispose()


@pytest.fixture()
def fresh_database_url(database_url: str, tmp_path: Path) -> Iterator[str]:
    """An empty database of the same backend, for migrations and CLI tests."""
    with empty_database(database_url, tmp_path, "fresh") as url:
        yield url

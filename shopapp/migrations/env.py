"""Alembic environment: the URL comes from shopapp's configuration.

``shopapp db upgrade`` passes it in explicitly (``sqlalchemy.url``); a bare
``alembic -c alembic.ini upgrade head`` falls back to shopapp's config loader.
"""

from __future__ import annotations

from alembic import context

from shopapp.core.config import load_config
from shopapp.core.database import make_engine
from shopapp.models import Base

config = context.config


def render_item(type_: str, obj, autogen_context):  # type: ignore[no-untyped-def]
    """Write our UTCDateTime as a plain timezone-aware DateTime: migrations stay frozen."""
    from shopapp.models.base import UTCDateTime

    if type_ == "type" and isinstance(obj, UTCDateTime):
        return "sa.DateTime(timezone=True)"
    return False
target_metadata = Base.metadata


def _url() -> str:
    url = config.get_main_option("sqlalchemy.url")
    return url or str(load_config()["DATABASE_URL"])


def run_migrations_offline() -> None:
    context.configure(
        url=_url(),
        target_metadata=target_metadata,
        literal_binds=True,
        render_as_batch=True,
        compare_type=True,
    )
    with context.begin_transaction():
        context.run_migrations()


def run_migrations_online() -> None:
    connection = config.attributes.get("connection")
    if connection is not None:
        _run(connection)
        return
    engine = make_engine(_url())
    with engine.connect() as conn:
        _run(conn)
    engine.dispose()


def _run(connection) -> None:  # type: ignore[no-untyped-def]
    sqlite = connection.dialect.name == "sqlite"
    if sqlite:
        # A batch copy drops and recreates a table; with foreign keys enforced, dropping a
        # table that other rows reference fails (rotor_type under rotor and job). SQLite
        # ignores this pragma inside a transaction, and the engine's begin hook opens one
        # on any statement, so it goes straight to the driver (autocommit) first.
        _pragma(connection, "foreign_keys=OFF")
    try:
        _migrate(connection)
        if sqlite:
            broken = connection.exec_driver_sql("PRAGMA foreign_key_check").fetchall()
            connection.commit()
            if broken:
                raise RuntimeError(f"migration left dangling foreign keys: {broken[:5]}")
    finally:
        if sqlite:
            _pragma(connection, "foreign_keys=ON")


def _pragma(connection, setting: str) -> None:  # type: ignore[no-untyped-def]
    if connection.in_transaction():
        connection.commit()
    connection.connection.driver_connection.execute(f"PRAGMA {setting}")


def _migrate(connection) -> None:  # type: ignore[no-untyped-def]
    context.configure(
        connection=connection,
        target_metadata=target_metadata,
        render_as_batch=True,  # SQLite cannot ALTER most things; batch mode copies the table
        compare_type=True,
        render_item=render_item,
    )
    with context.begin_transaction():
        context.run_migrations()


if context.is_offline_mode():
    run_migrations_offline()
else:
    run_migrations_online()

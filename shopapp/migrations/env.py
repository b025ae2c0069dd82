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

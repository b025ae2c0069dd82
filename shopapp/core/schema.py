"""Alembic, driven from code: upgrade, downgrade, current and "is the schema at head"."""

from __future__ import annotations

import functools
from pathlib import Path

from alembic import command
from alembic.config import Config
from alembic.runtime.migration import MigrationContext
from alembic.script import ScriptDirectory
from sqlalchemy import Connection, Engine

# shopapp/migrations, shipped inside the wheel.
MIGRATIONS_DIR = Path(__file__).resolve().parent.parent / "migrations"


def alembic_config(url: str) -> Config:
    """An Alembic config pointing at ``migrations/`` and the given database URL."""
    cfg = Config()
    cfg.set_main_option("script_location", str(MIGRATIONS_DIR))
    # '%' must be doubled for configparser interpolation.
    cfg.set_main_option("sqlalchemy.url", url.replace("%", "%%"))
    return cfg


def upgrade(url: str, revision: str = "head") -> None:
    command.upgrade(alembic_config(url), revision)


def downgrade(url: str, revision: str = "base") -> None:
    command.downgrade(alembic_config(url), revision)


def head_revision(url: str) -> str | None:
    """The newest migration shipped with this code (the ``url`` only completes the config)."""
    return _shipped_head()


@functools.cache
def _shipped_head() -> str | None:
    # Read once a process: the migration files ship with the code and do not change under a
    # running server, and reading them costs ~40 ms, which every /healthz paid.
    return ScriptDirectory.from_config(alembic_config("sqlite://")).get_current_head()


def current_revision(engine: Engine) -> str | None:
    with engine.connect() as conn:
        return MigrationContext.configure(conn).get_current_revision()


def is_at_head(engine: Engine, url: str) -> bool:
    """True when the database's revision is the newest migration."""
    return current_revision(engine) == head_revision(url)


def _scripts() -> ScriptDirectory:
    cfg = Config()
    cfg.set_main_option("script_location", str(MIGRATIONS_DIR))
    return ScriptDirectory.from_config(cfg)


def code_head() -> str | None:
    """The newest migration this code ships (no database needed)."""
    return _scripts().get_current_head()


def known_revisions() -> set[str]:
    """Every migration revision this code ships."""
    return {script.revision for script in _scripts().walk_revisions()}


def connection_revision(conn: Connection) -> str | None:
    """The schema revision of the database behind ``conn`` (inside its transaction)."""
    return MigrationContext.configure(conn).get_current_revision()

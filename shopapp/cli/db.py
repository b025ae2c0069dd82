"""``shopapp db upgrade|downgrade|current``: Alembic, with the URL from the config."""

from __future__ import annotations

import click
from flask.cli import with_appcontext

from shopapp.cli.common import app_db, one_line_errors
from shopapp.core import schema


@click.group("db", help="Bring the database schema up or down, or show where it stands.")
def db_group() -> None:
    pass


@db_group.command("upgrade", help="Upgrade the schema to REVISION (default: the newest).")
@click.argument("revision", default="head")
@with_appcontext
@one_line_errors
def upgrade(revision: str) -> None:
    db = app_db()
    schema.upgrade(db.url, revision)
    click.echo(f"database at {schema.current_revision(db.engine) or 'base'} ({db.backend})")


@db_group.command("downgrade", help="Downgrade the schema to REVISION (default: empty).")
@click.argument("revision", default="base")
@click.option("--yes", is_flag=True, help="Do not ask; needed when going to base.")
@with_appcontext
@one_line_errors
def downgrade(revision: str, yes: bool) -> None:
    db = app_db()
    if revision == "base" and not yes:
        click.confirm("Downgrading to base drops every table and all data. Go on?", abort=True)
    schema.downgrade(db.url, revision)
    click.echo(f"database at {schema.current_revision(db.engine) or 'base'} ({db.backend})")


@db_group.command("current", help="Show the schema revision and whether it is the newest.")
@with_appcontext
@one_line_errors
def current() -> None:
    db = app_db()
    cur = schema.current_revision(db.engine)
    head = schema.head_revision(db.url)
    state = "newest" if cur == head else f"behind (newest is {head})"
    click.echo(f"{cur or 'base'} — {state} — {db.backend}")

"""``shopapp db upgrade|downgrade|current``: Alembic, with the URL from the config;
``shopapp db check``: do the stored certificates still hold what was certified."""

from __future__ import annotations

import click
from flask.cli import with_appcontext

from shopapp.certificates import integrity
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


@db_group.command(
    "check",
    help="Check every certificate: its stored data and PDF against their SHA-256, and each "
    "valid certificate against the job's stored runs, readings and corrections. Lists every "
    "mismatch with the certificate number; exit status 1 when there is any.",
)
@with_appcontext
@one_line_errors
def check() -> None:
    with app_db().session() as sess:
        result = integrity.check_certificates(sess)
    for finding in result.findings:
        click.echo(str(finding))
    for note in result.notes:
        click.echo(f"note: {note}")
    bad = len({(f.number, f.revision) for f in result.findings})
    click.echo(f"{result.certificates} certificates checked ({result.issued} valid): "
               + (f"{bad} do not agree" if bad else "all agree with their data and evidence"))
    if bad:
        raise SystemExit(1)

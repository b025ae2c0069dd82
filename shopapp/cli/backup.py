"""``shopapp backup FILE`` and ``shopapp restore FILE``: the whole shop in one archive.

The archive format and the rules are in :mod:`shopapp.core.backup`.
"""

from __future__ import annotations

import datetime as dt
from pathlib import Path

import click
from flask.cli import with_appcontext

from shopapp.cli.common import app_db, one_line_errors
from shopapp.core import backup
from shopapp.models import BackupLog, utcnow


def _size(n: int) -> str:
    if n < 1000:
        return f"{n} bytes"
    value = float(n)
    for unit in ("kB", "MB"):
        value /= 1000
        if value < 1000:
            return f"{value:.1f} {unit}"
    return f"{value / 1000:.1f} GB"


def _age(at: dt.datetime) -> str:
    seconds = max(0.0, (utcnow() - at).total_seconds())
    if seconds < 3600:
        return f"{seconds / 60:.0f} minutes ago"
    if seconds < 2 * 86400:
        return f"{seconds / 3600:.0f} hours ago"
    return f"{seconds / 86400:.0f} days ago"


def _when(at: dt.datetime) -> str:
    return f"{at.astimezone(dt.UTC):%Y-%m-%d %H:%M:%S} UTC ({_age(at)})"


def _logged(entry: BackupLog) -> str:
    return (f"{_when(entry.at)}, {entry.path}, {_size(entry.size_bytes)}, {entry.row_count} "
            f"rows, schema {entry.schema_revision}, SHA-256 {entry.sha256}")


@click.command(
    "backup",
    help="Write the whole database to FILE (a ZIP archive: every table's rows, a manifest "
    "with row counts and SHA-256 per table and the schema revision; on SQLite also the "
    "database file itself). Safe while the shop is working. FILE may be a folder: the "
    "archive is then named shopapp-backup-<date>-<time>.zip inside it. --last shows when "
    "the last backup was taken instead.",
)
@click.argument("file", required=False, type=click.Path(path_type=Path))
@click.option("--last", is_flag=True, help="Show the last backup (and restore); write nothing.")
@click.option("--overwrite", is_flag=True, help="Replace FILE when it exists.")
@with_appcontext
@one_line_errors
def backup_command(file: Path | None, last: bool, overwrite: bool) -> None:
    db = app_db()
    if last:
        with db.session() as sess:
            latest, restored = backup.last_entries(sess)
            click.echo(f"last backup: {_logged(latest)}" if latest is not None
                       else "last backup: none logged for this database")
            if restored is not None:
                click.echo(f"last restore: {_logged(restored)}")
        return
    if file is None:
        raise click.UsageError("give the FILE (or folder) to write the backup to, or --last")
    with db.session() as sess:
        result = backup.take_backup(sess, file, overwrite=overwrite)
    m = result.manifest
    click.echo(f"backup written: {result.path}")
    click.echo(f"  {_size(result.size_bytes)}, {len(m.tables)} tables, {m.total_rows} rows, "
               f"schema {m.schema_revision} ({m.backend}), {result.seconds:.1f} s")
    click.echo(f"  SHA-256 {result.sha256}")


@click.command(
    "restore",
    help="Restore the database from a FILE written by `shopapp backup` (from SQLite or "
    "PostgreSQL alike). The archive is checked against its manifest first; its schema "
    "revision must be this shopapp's. The database must be empty (after `shopapp db "
    "upgrade`) unless --force, which deletes everything in it first. All in one "
    "transaction: on any error nothing changes.",
)
@click.argument("file", type=click.Path(path_type=Path, dir_okay=False))
@click.option("--force", is_flag=True,
              help="Delete every row in the database (certificates too) and restore FILE.")
@with_appcontext
@one_line_errors
def restore_command(file: Path, force: bool) -> None:
    with app_db().write_session() as sess:
        result = backup.restore(sess, file, force=force)
    m = result.manifest
    click.echo(f"restored {result.restored_rows} rows in {len(backup.restored_tables())} tables "
               f"from {result.path}")
    click.echo(f"  backup taken {m.created_at} ({m.backend}), schema {m.schema_revision}; "
               f"checked against its manifest before and after; {result.seconds:.1f} s")
    if result.deleted_rows:
        click.echo(f"  {result.deleted_rows} rows that were in the database were deleted first")

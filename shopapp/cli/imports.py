"""``shopapp import KIND FILE``: bring customers, rotor types, rotors or past jobs over
from a spreadsheet (CSV or xlsx), in one transaction; ``--dry-run`` only reports.

The file's size is checked before it is read (``shopapp.imports.files.MAX_FILE_BYTES``);
every row is judged by the same use-cases as the pages (``shopapp.imports.service``).
A refused row refuses the file: the rows and reasons are printed and the exit status is 1.
"""

from __future__ import annotations

import os
import sys
from pathlib import Path

import click
from flask.cli import with_appcontext
from sqlalchemy import select
from sqlalchemy.orm import Session

from shopapp.cli.common import app_db, one_line_errors
from shopapp.core.errors import NotFound, ValidationFailed
from shopapp.imports import files, service
from shopapp.imports.kinds import KIND_NAMES, kind_of, template_csv
from shopapp.models import User

PROGRESS_FROM_ROWS = 200  # a bar only where a file takes a noticeable while


def _user(sess: Session, username: str) -> User:
    user = sess.scalars(select(User).where(User.username == username)).first()
    if user is None:
        raise NotFound(f"no user called {username!r} (see `shopapp user list`)")
    return user


def _read(path: Path) -> files.Sheet:
    refusal = files.size_refusal(os.stat(path).st_size)  # before a byte is read
    if refusal is not None:
        raise ValidationFailed("file", refusal)
    return files.read_sheet(path.read_bytes(), path.name)


def _run(sess: Session, kind: str, sheet: files.Sheet, user: User,
         dry_run: bool) -> service.ImportReport:
    use_case = service.preview if dry_run else service.apply
    if len(sheet.rows) < PROGRESS_FROM_ROWS:
        return use_case(sess, by=user, kind=kind, sheet=sheet)
    with click.progressbar(length=len(sheet.rows), label=f"{kind} rows",
                           file=sys.stderr) as bar:
        return use_case(sess, by=user, kind=kind, sheet=sheet, progress=bar.update)


@click.command("import", help="Import KIND (customers, rotor-types, rotors, jobs) from FILE "
               "(.csv comma or semicolon, UTF-8; or .xlsx), all rows or none. "
               "--template prints the template CSV instead.")
@click.argument("kind", type=click.Choice(KIND_NAMES))
@click.argument("file", required=False, type=click.Path(exists=True, dir_okay=False,
                                                         path_type=Path))
@click.option("--user", "username", help="The user the import is done as (their role "
              "must allow it).")
@click.option("--dry-run", is_flag=True, help="Report per row what would be created, "
              "updated or refused, and write nothing.")
@click.option("--template", is_flag=True, help="Print the KIND template (CSV) and stop.")
@with_appcontext
@one_line_errors
def import_command(kind: str, file: Path | None, username: str | None, dry_run: bool,
                   template: bool) -> None:
    if template:
        click.echo(template_csv(kind_of(kind)), nl=False)
        return
    if file is None or not username:
        raise click.UsageError("give FILE and --user USERNAME (or --template)")
    sheet = _read(file)
    database = app_db()
    with database.session() as sess:
        if not dry_run:
            database.begin_write(sess)
        user = _user(sess, username)
        try:
            report = _run(sess, kind, sheet, user, dry_run)
        except service.ImportRefused as exc:
            for row in exc.report.rows:
                if row.action == "refused":
                    click.echo(row.message, err=True)
            raise click.ClickException(
                f"nothing imported from {file.name}: {exc.report.summary()}") from None
    for row in report.rows:
        click.echo(row.message)
    if dry_run:
        click.echo(f"dry run of {file.name}, nothing written: {report.summary()}")
        if report.refused:
            raise click.ClickException(f"{len(report.refused)} rows would be refused")
    else:
        click.echo(f"imported {file.name} (batch {report.batch_id}, sha256 "
                   f"{report.sha256[:12]}…): {report.summary()}")

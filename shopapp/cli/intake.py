"""``shopapp intake file|watch``: runs from a machine's files (issue 14 part 2).

Thin: read the file, call one use-case of :mod:`shopapp.intake.imports`, commit once
per file, print. A file is imported whole or not at all.
"""

from __future__ import annotations

import time
from pathlib import Path

import click
from flask.cli import with_appcontext
from sqlalchemy import select
from sqlalchemy.exc import IntegrityError
from sqlalchemy.orm import Session

from shopapp.cli.common import app_db, one_line_errors
from shopapp.core.display import counted
from shopapp.core.errors import NotFound, ValidationFailed
from shopapp.intake import files, folder, imports
from shopapp.models import Machine, User


def _user(sess: Session, username: str) -> User:
    user = sess.scalars(select(User).where(User.username == username)).first()
    if user is None:
        raise NotFound(f"no user called {username!r} (see `shopapp user list`)")
    return user


def _machine(sess: Session, name: str | None) -> Machine | None:
    if name is None:
        return None
    machine = sess.scalars(select(Machine).where(Machine.name == name)).first()
    if machine is None:
        raise NotFound(f"no machine called {name!r}")
    return machine


def _print_plan(plan: imports.ImportPlan) -> None:
    if plan.refusal:
        click.echo(f"{plan.file_name}: refused: {plan.refusal}")
        return
    click.echo(f"{plan.file_name} ({plan.kind}, sha256 {plan.sha256[:12]}…):")
    for r in plan.runs:
        if r.refusal:
            click.echo(f"  {r.where}: REFUSED: {r.refusal}")
        else:
            click.echo(f"  {r.where}: job {r.job_number} run {r.seq}: {r.summary}")


@click.group("intake", help="Import runs from a balancing machine's files (see "
             "docs/exchange-format.md).")
def intake_group() -> None:
    pass


@intake_group.command("file", help="Import the runs of FILE: shopapp's exchange format, or "
                      "the export of --machine through its saved column mapping. All runs "
                      "or none; the same file is never imported twice.")
@click.argument("path", metavar="FILE", type=click.Path(exists=True, dir_okay=False,
                                                        path_type=Path))
@click.option("--machine", "machine_name", help="The machine the file comes from (its name).")
@click.option("--user", "username", required=True,
              help="Who logs the runs (a user who may work jobs).")
@click.option("--dry-run", is_flag=True, help="Show what would be imported; write nothing.")
@with_appcontext
@one_line_errors
def file_command(path: Path, machine_name: str | None, username: str, dry_run: bool) -> None:
    data = files.read_bytes(path)
    with app_db().write_session() as sess:
        by, machine = _user(sess, username), _machine(sess, machine_name)
        if dry_run:
            plan = imports.plan_file(sess, data, file_name=path.name, machine=machine, by=by)
            _print_plan(plan)
            sess.rollback()
            if not plan.ok:
                raise click.ClickException("the file would be refused; nothing was written")
            click.echo("dry run: nothing was written")
            return
        try:
            plan = imports.import_file(sess, data, file_name=path.name, machine=machine, by=by,
                                       source="file")
        except imports.ImportRefused as exc:
            _print_plan(exc.plan)
            raise click.ClickException("the file was refused; nothing was written") from None
    _print_plan(plan)
    click.echo(f"imported {counted(len(plan.runs), 'run')}")


def _one(path: Path, machine_name: str, username: str) -> str:
    """Import one ready file in its own transaction, then move it; what happened, in words."""
    try:
        data = files.read_bytes(path)
    except FileNotFoundError:
        return f"{path.name}: gone before it was read (moved by someone else?); skipped"
    except ValidationFailed as exc:
        sha = imports.sha256_of(path.name.encode())  # never read whole: named by its name
        folder.move_refused(path, sha, exc.errors.get("file", exc.message))
        return f"{path.name}: refused: {exc.errors.get('file', exc.message)}"
    sha = imports.sha256_of(data)
    refused: imports.ImportPlan | None = None
    try:
        with app_db().write_session() as sess:
            by, machine = _user(sess, username), _machine(sess, machine_name)
            earlier = imports.already_imported(sess, sha)
            if earlier is None:
                try:
                    plan = imports.import_file(sess, data, file_name=path.name,
                                               machine=machine, by=by, source="watch")
                except imports.ImportRefused as exc:
                    sess.rollback()
                    refused = exc.plan
    except IntegrityError:
        # Another watcher of the same folder imported these bytes first (the hash is
        # unique): this one's transaction is rolled back; the next scan moves the file.
        return f"{path.name}: imported by another process meanwhile; moved at the next scan"
    # Moved only after the commit: a stop before this line re-imports nothing (the hash
    # is stored) and the next scan only moves the file.
    if refused is not None:
        folder.move_refused(path, sha, refused.why())
        return f"{path.name}: refused ({len(refused.refused) or 'whole file'}): " \
               + refused.why().splitlines()[0]
    folder.move_done(path, sha)
    if earlier is not None:
        return f"{path.name}: already imported ({earlier.outcome}); moved to {folder.DONE}/"
    return f"{path.name}: imported {counted(len(plan.runs), 'run')}"


@intake_group.command("watch", help="Import every new file in DIR with --machine's mapping "
                      "(or the exchange format), moving each to DIR/done/ or DIR/refused/ "
                      "(with a .why.txt). Polls until Ctrl-C; --once scans once and exits.")
@click.argument("directory", metavar="DIR", type=click.Path(exists=True, file_okay=False,
                                                            path_type=Path))
@click.option("--machine", "machine_name", required=True, help="The machine writing the files.")
@click.option("--user", "username", required=True,
              help="Who logs the runs (a user who may work jobs).")
@click.option("--once", is_flag=True, help="Scan once and exit.")
@click.option("--interval", type=click.FloatRange(0.5, 3600), default=5.0, show_default=True,
              help="Seconds between scans.")
@click.option("--settle", type=click.FloatRange(0, 3600), default=2.0, show_default=True,
              help="Leave a file alone until it has not changed for this many seconds.")
@with_appcontext
@one_line_errors
def watch_command(directory: Path, machine_name: str, username: str, once: bool,
                  interval: float, settle: float) -> None:
    with app_db().session() as sess:  # fail at once on a wrong name, not at the first file
        _user(sess, username)
        _machine(sess, machine_name)
    try:
        while True:
            for path in folder.ready_files(directory, settle_s=settle):
                click.echo(_one(path, machine_name, username))
            if once:
                return
            time.sleep(interval)
    except KeyboardInterrupt:
        click.echo("stopped")

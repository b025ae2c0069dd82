"""``shopapp measures rebuild``: recompute every job's and run's facts for the shop measures.

The facts (:mod:`shopapp.jobs.facts`) are kept in step with every change made through
shopapp; rebuilding is for data written around it (an import, a hand-made SQL change)
or to confirm nothing drifted. It takes the write lock, replaces every row in one
transaction and commits once.
"""

from __future__ import annotations

import time

import click
from flask.cli import with_appcontext

from shopapp.cli.common import app_db, one_line_errors
from shopapp.jobs import facts


@click.group("measures", help="The shop measures' stored facts.")
def measures_group() -> None:
    pass


@measures_group.command("rebuild", help="Recompute every job's and run's facts from the "
                        "runs, corrections and transitions (one transaction).")
@with_appcontext
@one_line_errors
def rebuild_command() -> None:
    database = app_db()
    start = time.perf_counter()
    with database.session() as sess:
        database.begin_write(sess)
        jobs = facts.rebuild(sess)
    click.echo(f"rebuilt the facts of {jobs} jobs in {time.perf_counter() - start:.1f} s")

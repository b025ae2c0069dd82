"""``shopapp first-start``: on an empty database, make it usable and say how to log in.

Called by ``scripts/serve`` on every start (in the background, beside the
server); does nothing once users exist except remind where the first logins
were written (and mark a demo load an earlier start left unfinished as failed).

The demo shop loads in two steps: the shop and its jobs in one transaction
(seconds) — then the logins are printed and written to ``first-logins.txt``
— and the certificates of its historical jobs in short slices, each
committed (minutes: a PDF each), while ``demo-status.json`` tells every page
that the demo is still loading and that some jobs have no certificate yet.
"""

from __future__ import annotations

import secrets
import time

import click
from flask.cli import with_appcontext
from sqlalchemy.exc import OperationalError
from sqlalchemy.orm import Session

from shopapp.accounts import users
from shopapp.balancing.numtext import short
from shopapp.cli.common import app_db, one_line_errors
from shopapp.cli.demo import (
    LOGINS_FILE,
    demo_signing,
    instance_folder,
    print_logins,
    reason_of,
    report_failure,
    write_logins,
)
from shopapp.core.database import SQLITE_IMMEDIATE
from shopapp.demo import loader as demo
from shopapp.demo.status import read_status, write_status

SEED = 1
YEARS = 2.0
SLICE_SECONDS = 1.0  # certificates written per commit (the web waits at most this long)
# Between slices the write lock is free this long: SQLite's busy handler retries at most every
# 100 ms, so a request waiting to write gets its turn instead of losing every race.
PAUSE_SECONDS = 0.2
BUSY_RETRIES = 5
RESET = ("shopapp db downgrade --yes && shopapp db upgrade && "
         f"shopapp demo load --seed {SEED} --years {short(YEARS)}")


@click.command("first-start", help="On an empty database: load the demo shop (or a first admin).")
@click.option("--no-demo", is_flag=True, help="Create only a first admin user, no demo data.")
@with_appcontext
@one_line_errors
def first_start(no_demo: bool) -> None:
    path = instance_folder() / LOGINS_FILE
    with app_db().session() as sess:
        if users.count_users(sess):
            status = read_status(instance_folder())
            if status is not None and status.state == "loading":
                report_failure(
                    "The demo shop did not finish loading (an earlier start stopped while it "
                    f"was loading: {status.message}). To start again from an empty database "
                    f"(this deletes everything in it): {RESET}")
            if path.is_file():
                click.echo(f"log in with one of the accounts in {path}")
            return
    if not no_demo:
        _load_demo()
        return
    password = secrets.token_urlsafe(12)
    with app_db().session() as sess:
        users.create_user(
            sess, username="admin", full_name="Shop administrator", role="admin",
            password=password,
        )
    lines = [f"admin     admin        {password}"]
    click.echo("created a first admin user (role, username, password):")
    for line in lines:
        click.echo("  " + line)
    click.echo(f"(also written to {write_logins(lines)})")


def _load_demo() -> None:
    """The shop and its jobs, the logins, then the certificates in committed slices."""
    folder = instance_folder()
    write_status(folder, "loading", "The demo shop is still loading: its people, machines and "
                 "jobs are being written (a few seconds); the logins follow.")
    click.echo(f"loading the demo shop (about {short(YEARS)} years of jobs); the logins follow in "
               "a few seconds")
    sess = app_db().sessionmaker()
    try:
        try:
            signing_dir, base_url = demo_signing()
            load = demo.DemoLoad(sess, seed=SEED, years=YEARS, progress=click.echo,
                                 signing_dir=signing_dir, base_url=base_url)
            logins = load.people_and_machines()
            sess.commit()
        except BaseException as exc:
            sess.rollback()
            report_failure(f"The demo shop did not load: {reason_of(exc)}. Nothing of it was "
                           f"kept; to load it run: shopapp demo load --seed {SEED} "
                           f"--years {short(YEARS)}")
            raise
        write_status(folder, "loading", "The demo shop is still loading: its jobs of the last "
                     f"{short(YEARS)} years are being written (seconds). Until then the lists, "
                     "the dashboard and the papers are incomplete; please leave the demo "
                     "jobs alone until this note goes.")
        print_logins("demo shop: log in with (role, username, password); its jobs are still "
                     "being written, the pages say so until they are:", logins)
        try:
            load.history_rows()
            sess.commit()
        except BaseException as exc:
            sess.rollback()
            report_failure(f"The demo shop's jobs did not load: {reason_of(exc)} (its people "
                           "and machines are kept). To start again from an empty database "
                           f"(this deletes everything in it): {RESET}")
            raise
        total = load.certificates_total
        _loading_certificates(load)
        click.echo(f"demo jobs written; the certificates of its {len(load.history.cert_jobs)} "
                   f"certified jobs ({total} steps: issues, voids and new revisions) are "
                   "issued in the background now; the pages say so until it is done")
        try:
            while load.certificates_remaining:
                _certificate_slice(sess, load)
                _loading_certificates(load)
        except BaseException as exc:
            sess.rollback()
            report_failure(
                f"The demo shop's certificates did not finish: {reason_of(exc)} "
                f"({load.certificates_total - load.certificates_remaining} of "
                f"{load.certificates_total} written; the jobs are loaded). To start again from "
                f"an empty database (this deletes everything in it): {RESET}")
            raise
        summary = load.summary()
    finally:
        sess.close()
    skipped = load.skipped
    message = (f"The demo shop is loaded ({summary.certificates} certificate revisions on "
               f"{len(load.history.cert_jobs)} jobs).")
    if skipped:
        message += (f" Jobs changed while loading kept no new certificate: "
                    f"{', '.join(sorted(skipped.values()))}.")
        click.echo(message)
    write_status(folder, "ready", message)
    click.echo("demo shop fully loaded")


def _loading_certificates(load: demo.DemoLoad) -> None:
    done = load.certificates_total - load.certificates_remaining
    write_status(instance_folder(), "loading",
                 f"The demo shop is still loading: certificates of its historical jobs are "
                 f"being issued (step {done} of {load.certificates_total}). Until then some "
                 "certified or dispatched jobs show no certificate yet; please leave the demo "
                 "jobs as they are until this note goes.")


def _certificate_slice(sess: Session, load: demo.DemoLoad) -> None:
    """One slice, committed; again when a person's save made the database busy meanwhile."""
    for attempt in range(BUSY_RETRIES):
        try:
            sess.connection(execution_options={SQLITE_IMMEDIATE: True})
            n = load.certificates(seconds=SLICE_SECONDS)
            sess.commit()
        except OperationalError:
            sess.rollback()
            if attempt == BUSY_RETRIES - 1:
                raise
            time.sleep(0.5 * (attempt + 1))
            continue
        load.advance(n)
        time.sleep(PAUSE_SECONDS)
        return

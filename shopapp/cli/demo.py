"""``shopapp demo load``: fill an empty database with the invented demo shop.

Every command that prints logins also writes them to ``first-logins.txt`` in
the instance folder; a load writes its state to ``demo-status.json`` there
(:mod:`shopapp.demo.status`), which every page shows while it is loading or
when it failed, with the command that recovers.
"""

from __future__ import annotations

import datetime as dt
import logging
import os
from pathlib import Path
from typing import Any

import click
from flask import current_app
from flask.cli import with_appcontext

from shopapp.balancing.numtext import short
from shopapp.certificates import signing
from shopapp.cli.common import Day, app_db, one_line_errors
from shopapp.demo import bulk as demo_bulk
from shopapp.demo import loader as demo
from shopapp.demo.status import write_status

log = logging.getLogger("shopapp.demo")

LOGINS_FILE = "first-logins.txt"


def instance_folder() -> Path:
    return Path(current_app.instance_path)


def demo_signing() -> tuple[Path, str]:
    """What the demo's certificates are signed and addressed with: the instance's signing
    folder and the shop's BASE_URL, as the certificate pages use them."""
    return (signing.signing_folder(current_app.instance_path),
            str(current_app.config.get("BASE_URL") or ""))


def write_logins(lines: list[str]) -> Path:
    """The logins as printed, readable by the owner only."""
    path = instance_folder() / LOGINS_FILE
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_text("\n".join(lines) + "\n")
    os.chmod(path, 0o600)
    return path


def print_logins(title: str, logins: list[demo.Login]) -> None:
    """Print the logins and write them to first-logins.txt."""
    lines = [f"{role:<9} {name:<16} {pw}" for role, name, pw in logins]
    click.echo(title)
    for line in lines:
        click.echo("  " + line)
    click.echo(f"(also written to {write_logins(lines)})")


def reason_of(exc: BaseException) -> str:
    """One line saying why a load stopped."""
    if isinstance(exc, KeyboardInterrupt | SystemExit):
        return "the load was interrupted"
    text = str(exc).strip().splitlines()
    return text[0] if text else exc.__class__.__name__


def report_failure(message: str) -> None:
    """A failed load: in the log (stderr) and on every page through the status file."""
    log.error("%s", message)
    write_status(instance_folder(), "failed", message)


class _Bars:
    """A click progress bar per phase: a new bar whenever the total changes."""

    def __init__(self) -> None:
        self._bar: Any = None
        self._total = 0
        self._done = 0

    def __call__(self, done: int, total: int) -> None:
        if self._bar is None or total != self._total:
            self.close()
            self._bar = click.progressbar(length=total, label="  ", show_pos=True)
            self._bar.__enter__()
            self._total, self._done = total, 0
        self._bar.update(max(0, done - self._done))
        self._done = done

    def message(self, text: str) -> None:
        self.close()
        click.echo(text)

    def close(self) -> None:
        if self._bar is not None:
            self._bar.__exit__(None, None, None)
            self._bar = None


@click.group("demo", help="The invented demo shop (fictional customers, rotors and history).")
def demo_group() -> None:
    pass


@demo_group.command(
    "load",
    help="Load the demo shop: users, customers, rotor types, machines and YEARS of jobs "
    "simulated with the balancing core. Refuses a database that already has customers or jobs "
    "unless --force, which adds the demo shop beside them under distinct names and deletes "
    "nothing. Its certificates are signed with the instance's key (instance/signing, made at "
    "the first one) and print the verify address on BASE_URL. Prints the logins.",
)
@click.option("--seed", type=int, default=1, show_default=True,
              help="Same seed, same shop and history (passwords are new each time).")
@click.option("--years", type=click.FloatRange(min=0.05, max=10.0), default=2.0,
              show_default=True, help="Length of the history, ending today (or --end).")
@click.option("--end", "end_date", type=Day(), default=None,
              help="Last day of the history, YYYY-MM-DD (default today).")
@click.option("--jobs-per-year", type=click.IntRange(min=1, max=100_000), default=None,
              help=f"New jobs per year (default {demo.DEFAULT_JOBS_PER_YEAR}).")
@click.option("--no-certificates", is_flag=True,
              help="Skip the signed certificate PDFs (much faster).")
@click.option("--force", is_flag=True,
              help="Add the demo shop beside existing data (distinct names; nothing deleted).")
@with_appcontext
@one_line_errors
def load(seed: int, years: float, end_date: dt.date | None, jobs_per_year: int | None,
         no_certificates: bool, force: bool) -> None:
    bars = _Bars()
    command = (f"shopapp demo load --seed {seed} --years {short(years)}"
               + (f" --end {end_date.isoformat()}" if end_date else "")
               + (f" --jobs-per-year {jobs_per_year}" if jobs_per_year else "")
               + (" --no-certificates" if no_certificates else "") + (" --force" if force else ""))
    with app_db().session() as sess:
        demo.demo_tag(sess, force)  # refused before any status: the shop there stays as it is
    write_status(instance_folder(), "loading",
                 f"The demo shop is still loading ({command}); its pages fill in when it is "
                 "done.")
    signing_dir, base_url = demo_signing()
    try:
        with app_db().session() as sess:
            logins = demo.load_demo(
                sess, seed=seed, years=years, progress=bars.message, steps=bars,
                end_date=end_date, jobs_per_year=jobs_per_year,
                force=force, certificates=not no_certificates, signing_dir=signing_dir,
                base_url=base_url,
            )
    except BaseException as exc:
        report_failure(f"The demo shop did not load: {reason_of(exc)}. Nothing of it was "
                       f"kept; to try again run: {command}")
        raise
    finally:
        bars.close()
    write_status(instance_folder(), "ready", "The demo shop is loaded.")
    print_logins("demo shop loaded; log in with (role, username, password):", logins)


@demo_group.command(
    "bulk",
    help="Generate a large history for benchmarks (e.g. --jobs 100000 --runs-per-job 10): "
    "same shop and physics, no certificates. Refuses a non-empty database unless --force.",
)
@click.option("--jobs", type=click.IntRange(min=1, max=2_000_000), required=True,
              help="About this many jobs.")
@click.option("--runs-per-job", type=click.IntRange(min=4, max=50), default=10,
              show_default=True, help="Runs per job (final runs repeated to reach it).")
@click.option("--seed", type=int, default=1, show_default=True)
@click.option("--years", type=click.FloatRange(min=0.05, max=10.0), default=2.0,
              show_default=True)
@click.option("--force", is_flag=True, help="Add beside existing data (nothing deleted).")
@with_appcontext
@one_line_errors
def bulk(jobs: int, runs_per_job: int, seed: int, years: float, force: bool) -> None:
    bars = _Bars()
    try:
        with app_db().session() as sess:
            summary = demo_bulk.generate_bulk(
                sess, jobs=jobs, runs_per_job=runs_per_job, seed=seed, years=years, force=force,
                progress=bars.message, steps=bars)
    finally:
        bars.close()
    click.echo(f"{summary.jobs} jobs, {summary.runs} runs, {summary.readings} readings, "
               f"{summary.audit_events} audit events in {summary.seconds:.0f} s")
    print_logins("log in with (role, username, password):", summary.logins)

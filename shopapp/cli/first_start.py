"""``shopapp first-start``: on an empty database, make it usable and say how to log in.

Called by ``scripts/serve`` on every start; does nothing once users exist except
remind where the first logins were written.
"""

from __future__ import annotations

import os
import secrets
from pathlib import Path

import click
from flask import current_app
from flask.cli import with_appcontext

from shopapp.accounts import users
from shopapp.cli.common import app_db, one_line_errors
from shopapp.demo import loader as demo

LOGINS_FILE = "first-logins.txt"


def _write_logins(lines: list[str]) -> Path:
    path = Path(current_app.instance_path) / LOGINS_FILE
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_text("\n".join(lines) + "\n")
    os.chmod(path, 0o600)
    return path


@click.command("first-start", help="On an empty database: load the demo shop (or a first admin).")
@click.option("--no-demo", is_flag=True, help="Create only a first admin user, no demo data.")
@with_appcontext
@one_line_errors
def first_start(no_demo: bool) -> None:
    path = Path(current_app.instance_path) / LOGINS_FILE
    with app_db().session() as sess:
        if users.count_users(sess):
            if path.is_file():
                click.echo(f"log in with one of the accounts in {path}")
            return
    if not no_demo:
        click.echo("loading the demo shop (about two years of jobs); logins follow when done")
        with app_db().session() as sess:
            logins = demo.load_demo(sess, seed=1, years=2, progress=click.echo)
        lines = [f"{role:<9} {name:<12} {pw}" for role, name, pw in logins]
        click.echo("demo shop loaded; log in with (role, username, password):")
    else:
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
    click.echo(f"(also written to {_write_logins(lines)})")

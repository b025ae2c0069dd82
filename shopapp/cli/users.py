"""``shopapp user add|list``."""

from __future__ import annotations

import sys

import click
from flask.cli import with_appcontext

from shopapp.accounts import users
from shopapp.cli.common import app_db, one_line_errors
from shopapp.models import ROLES


@click.group("user", help="Manage user accounts.")
def user_group() -> None:
    pass


@user_group.command(
    "add", help="Create a user. Asks for the password twice unless --password-stdin."
)
@click.argument("username")
@click.option("--role", type=click.Choice(ROLES), required=True, help="What the user may do.")
@click.option("--full-name", default="", help="Name shown on pages and certificates.")
@click.option("--password-stdin", is_flag=True, help="Read the password from standard input.")
@with_appcontext
@one_line_errors
def add(username: str, role: str, full_name: str, password_stdin: bool) -> None:
    password = _read_password(password_stdin)
    with app_db().session() as sess:
        user = users.create_user(
            sess, username=username, full_name=full_name, role=role, password=password
        )
        click.echo(f"created {user.username} ({user.role})")


def _read_password(from_stdin: bool) -> str:
    if from_stdin:
        return sys.stdin.readline().rstrip("\r\n")
    return str(click.prompt("Password", hide_input=True, confirmation_prompt=True))


@user_group.command(
    "password",
    help="Set a new password for a user (the same rules as on the admin page) and end "
    "the user's sessions. Asks twice unless --password-stdin.",
)
@click.argument("username")
@click.option("--password-stdin", is_flag=True, help="Read the password from standard input.")
@with_appcontext
@one_line_errors
def set_password(username: str, password_stdin: bool) -> None:
    new = _read_password(password_stdin)
    with app_db().write_session() as sess:
        user = users.reset_password(sess, users.get_user_by_name(sess, username), by=None,
                                    password=new)
        click.echo(f"new password set for {user.username}; their sessions have ended")


@user_group.command("list", help="List user accounts.")
@with_appcontext
@one_line_errors
def list_() -> None:
    with app_db().session() as sess:
        rows = users.list_users(sess)
        if not rows:
            click.echo("no users yet — add one with: shopapp user add NAME --role admin")
        for u in rows:
            flag = "" if u.active else "  (inactive)"
            click.echo(f"{u.username:<20} {u.role:<9} {u.full_name}{flag}")

"""``shopapp token add|list|revoke``: API tokens from the server's shell.

Whoever runs these commands holds the database already; the token's own user is
recorded as the one who made or revoked it.
"""

from __future__ import annotations

import click
from flask.cli import with_appcontext
from sqlalchemy import select
from sqlalchemy.orm import Session

from shopapp.accounts import api_tokens
from shopapp.cli.common import app_db, one_line_errors
from shopapp.core.display import date as show_date
from shopapp.core.errors import NotFound
from shopapp.models import User


def _user(sess: Session, username: str) -> User:
    user = sess.scalars(select(User).where(User.username == username)).first()
    if user is None:
        raise NotFound(f"no user called {username!r} (see `shopapp user list`)")
    return user


@click.group("token", help="Manage API tokens (the JSON API's keys for scripts).")
def token_group() -> None:
    pass


@token_group.command("add", help="Make an API token for USERNAME; it is printed once.")
@click.argument("username")
@click.option("--name", required=True, help="What the token is for, e.g. the script's name.")
@with_appcontext
@one_line_errors
def add(username: str, name: str) -> None:
    with app_db().write_session() as sess:
        user = _user(sess, username)
        made = api_tokens.create_token(sess, by=user, user=user, name=name)
        secret, prefix = made.secret, made.token.prefix
    click.echo(f"token {prefix}… for {username} ({name}); copy it now, it is not shown again:")
    click.echo(secret)


@token_group.command("list", help="List USERNAME's API tokens (never their secrets).")
@click.argument("username")
@with_appcontext
@one_line_errors
def list_(username: str) -> None:
    with app_db().session() as sess:
        user = _user(sess, username)
        rows = api_tokens.tokens_of(sess, by=user, user=user)
        if not rows:
            click.echo(f"{username} has no API tokens")
        for t in rows:
            state = f"revoked {show_date(t.revoked_at)}" if t.revoked_at else "working"
            used = show_date(t.last_used_at) if t.last_used_at else "never used"
            click.echo(f"{t.id:>5}  {t.prefix}…  {t.name:<30} made {show_date(t.created_at)}"
                       f"  {used:<12} {state}")


@token_group.command("revoke", help="Revoke the API token with id TOKEN_ID (see `token list`).")
@click.argument("token_id", type=click.IntRange(1, 2**31 - 1))
@with_appcontext
@one_line_errors
def revoke(token_id: int) -> None:
    with app_db().write_session() as sess:
        token = api_tokens.get_token(sess, token_id)
        api_tokens.revoke_token(sess, token, by=token.user)
        click.echo(f"revoked {token.prefix}… ({token.name}) of {token.user.username}")

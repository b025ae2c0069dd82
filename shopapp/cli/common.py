"""What every command shares: one-line errors and the app for commands that need one."""

from __future__ import annotations

import datetime as dt
import functools
import secrets
from collections.abc import Callable
from typing import Any, TypeVar

import click
from flask import Flask, current_app, has_app_context
from sqlalchemy.exc import IntegrityError, SQLAlchemyError

from shopapp.balancing.errors import BalancingInputError
from shopapp.core.checks import day_refusal
from shopapp.core.config import ConfigError
from shopapp.core.errors import ServiceError

F = TypeVar("F", bound=Callable[..., Any])


class Day(click.ParamType):
    """A ``YYYY-MM-DD`` option inside the shop's date window
    (:func:`shopapp.core.checks.day_refusal`)."""

    name = "YYYY-MM-DD"

    def __init__(self, ahead_days: int = 0) -> None:
        self.ahead_days = ahead_days

    def convert(self, value: Any, param: click.Parameter | None,
                ctx: click.Context | None) -> dt.date:
        if isinstance(value, dt.date):
            day = value
        else:
            try:
                day = dt.date.fromisoformat(str(value).strip())
            except ValueError:
                self.fail(f"{str(value)[:40]!r} is not a date; write it as YYYY-MM-DD", param, ctx)
        refusal = day_refusal(day, ahead_days=self.ahead_days)
        if refusal is not None:
            self.fail(refusal, param, ctx)
        return day


def cli_app() -> Flask:
    """The app for management commands: they serve no sessions, so no secret key is needed."""
    from shopapp import create_app

    return create_app({"REQUIRE_SECRET_KEY": False, "SECRET_KEY": secrets.token_hex(16)})


def one_line_errors(func: F) -> F:
    """Turn the errors a person can cause into one line and exit status 1, not a traceback."""

    @functools.wraps(func)
    def wrapper(*args: Any, **kwargs: Any) -> Any:
        try:
            return func(*args, **kwargs)
        except click.ClickException:
            raise
        except (ServiceError, BalancingInputError, ConfigError) as exc:
            raise click.ClickException(str(exc)) from None
        except IntegrityError as exc:
            raise click.ClickException(
                f"the database refused the change: {str(exc.orig).splitlines()[0]}"
            ) from None
        except SQLAlchemyError as exc:
            first = str(getattr(exc, "orig", exc) or exc).splitlines()
            raise click.ClickException(
                f"database error: {first[0] if first else exc.__class__.__name__}"
            ) from None
        except OSError as exc:
            raise click.ClickException(str(exc)) from None
        finally:
            # A command is a whole process's work: hand its connections back now.
            if has_app_context() and "shopapp.db" in current_app.extensions:
                current_app.extensions["shopapp.db"].dispose()

    return wrapper  # type: ignore[return-value]


def app_db():  # type: ignore[no-untyped-def]
    """The Database of the current Flask app (commands run inside its app context)."""
    return current_app.extensions["shopapp.db"]

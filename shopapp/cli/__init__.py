"""The ``shopapp`` command (also reachable as ``flask --app shopapp``)."""

from __future__ import annotations

import click
from flask import Flask
from flask.cli import FlaskGroup

from shopapp.cli.common import cli_app
from shopapp.cli.db import db_group
from shopapp.cli.first_start import first_start
from shopapp.cli.serve import serve
from shopapp.cli.users import user_group


def _commands() -> list[click.Command]:
    cmds: list[click.Command] = [db_group, user_group, serve, first_start]
    for module, name in (
        ("shopapp.cli.calc", "calc_command"),
        ("shopapp.cli.demo", "demo_group"),
        ("shopapp.cli.report", "report_group"),
    ):
        try:
            mod = __import__(module, fromlist=[name])
        except ModuleNotFoundError as exc:
            if exc.name != module:
                raise
            continue
        cmds.append(getattr(mod, name))
    return cmds


def register_commands(app: Flask) -> None:
    """Make the same commands reachable as ``flask --app shopapp ...``."""
    for cmd in _commands():
        if cmd.name != "serve":
            app.cli.add_command(cmd)


main = FlaskGroup(
    name="shopapp",
    create_app=cli_app,
    add_default_commands=False,
    add_version_option=False,
    load_dotenv=False,
    set_debug_flag=False,
    help="shopapp: jobs, balancing calculations and certificates for a rotor-balancing shop.",
)
for _cmd in _commands():
    main.add_command(_cmd)

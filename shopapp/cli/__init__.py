"""The ``shopapp`` command (also reachable as ``flask --app shopapp``)."""

from __future__ import annotations

import click
from flask import Flask
from flask.cli import FlaskGroup

from shopapp.cli.backup import backup_command, restore_command
from shopapp.cli.calc import calc_command
from shopapp.cli.common import cli_app
from shopapp.cli.db import db_group
from shopapp.cli.demo import demo_group
from shopapp.cli.first_start import first_start
from shopapp.cli.imports import import_command
from shopapp.cli.intake import intake_group
from shopapp.cli.measures import measures_group
from shopapp.cli.report import report_group
from shopapp.cli.serve import serve
from shopapp.cli.signing import signing_group
from shopapp.cli.tokens import token_group
from shopapp.cli.users import user_group

COMMANDS: tuple[click.Command, ...] = (
    db_group, user_group, serve, first_start, calc_command, demo_group, report_group,
    signing_group, backup_command, restore_command, measures_group, token_group,
    intake_group,
    import_command,
)


def register_commands(app: Flask) -> None:
    """Make the same commands reachable as ``flask --app shopapp ...``."""
    for cmd in COMMANDS:
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
for _cmd in COMMANDS:
    main.add_command(_cmd)

# FlaskGroup's own --app/--env-file/--debug options mean nothing here: the app is ours.
main.params = [p for p in main.params if p.name not in {"app", "env_file", "debug"}]

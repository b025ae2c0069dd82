"""The ``shopapp`` command through click's runner: db, user, help, one-line errors."""

from __future__ import annotations

import pytest
from click.testing import CliRunner

from shopapp.cli import main


@pytest.fixture()
def cli(fresh_database_url, tmp_path, monkeypatch):  # type: ignore[no-untyped-def]
    monkeypatch.setenv("SHOPAPP_DATABASE_URL", fresh_database_url)
    monkeypatch.setenv("SHOPAPP_INSTANCE_PATH", str(tmp_path))
    runner = CliRunner()

    def run(*args: str, input: str | None = None):  # type: ignore[no-untyped-def]
        return runner.invoke(main, list(args), input=input, catch_exceptions=False)

    return run


def test_help_lists_the_commands(cli) -> None:
    out = cli("--help").output
    for name in ("db", "user", "serve"):
        assert f"  {name}" in out


def test_every_command_has_help(cli) -> None:
    for args in (["db", "--help"], ["db", "upgrade", "--help"], ["db", "downgrade", "--help"],
                 ["db", "current", "--help"], ["user", "add", "--help"],
                 ["user", "list", "--help"], ["user", "password", "--help"],
                 ["serve", "--help"]):
        result = cli(*args)
        assert result.exit_code == 0, args
        assert "Usage:" in result.output


def test_db_upgrade_current_downgrade(cli) -> None:
    assert "base" in cli("db", "current").output
    up = cli("db", "upgrade")
    assert up.exit_code == 0
    assert "newest" in cli("db", "current").output
    down = cli("db", "downgrade", "--yes")
    assert down.exit_code == 0
    assert "database at base" in down.output


def test_downgrade_to_base_asks_first(cli) -> None:
    cli("db", "upgrade")
    result = cli("db", "downgrade", input="n\n")
    assert result.exit_code != 0
    assert "newest" in cli("db", "current").output  # nothing dropped


def test_user_add_with_password_stdin_then_list(cli) -> None:
    cli("db", "upgrade")
    result = cli("user", "add", "Mara", "--role", "quality", "--full-name", "Mara Quill",
                 "--password-stdin", input="long-enough-pw\n")
    assert result.exit_code == 0, result.output
    assert "created mara (quality)" in result.output
    listing = cli("user", "list").output
    assert "mara" in listing and "quality" in listing and "Mara Quill" in listing


def test_user_add_asks_password_twice(cli) -> None:
    cli("db", "upgrade")
    result = cli("user", "add", "olek", "--role", "operator",
                 input="long-enough-pw\nlong-enough-pw\n")
    assert result.exit_code == 0, result.output
    assert "created olek" in result.output


@pytest.mark.parametrize(
    "args, stdin, message",
    [
        (["user", "add", "x1", "--role", "operator", "--password-stdin"], "short\n",
         "password: must be at least 8 characters"),
        (["user", "add", "Bad Name!", "--role", "operator", "--password-stdin"],
         "long-enough-pw\n", "username: 'bad name!' is not allowed"),
        (["user", "add", "x2", "--role", "wizard", "--password-stdin"], "long-enough-pw\n",
         "'wizard' is not one of"),
    ],
)
def test_user_add_errors_are_one_line(cli, args, stdin, message) -> None:
    cli("db", "upgrade")
    result = cli(*args, input=stdin)
    assert result.exit_code != 0
    assert message in result.output
    assert "Traceback" not in result.output


def test_duplicate_user_is_refused(cli) -> None:
    cli("db", "upgrade")
    cli("user", "add", "sam", "--role", "owner", "--password-stdin", input="long-enough-pw\n")
    again = cli("user", "add", "sam", "--role", "owner", "--password-stdin",
                input="long-enough-pw\n")
    assert again.exit_code == 1
    assert "'sam' is already taken" in again.output


def test_user_list_on_unmigrated_database_is_one_clear_line(cli) -> None:
    result = cli("user", "list")
    assert result.exit_code == 1
    assert result.output.startswith("Error: database error:")
    assert "Traceback" not in result.output


def test_first_start_without_demo_creates_one_admin_then_only_reminds(cli, tmp_path) -> None:
    cli("db", "upgrade")
    first = cli("first-start", "--no-demo")
    assert first.exit_code == 0, first.output
    assert "created a first admin user" in first.output
    logins = (tmp_path / "first-logins.txt").read_text()
    password = logins.split()[-1]
    assert len(password) >= 12
    assert "admin" in cli("user", "list").output
    again = cli("first-start")
    assert again.exit_code == 0
    assert "log in with one of the accounts in" in again.output
    assert cli("user", "list").output.count("\n") == 1  # still exactly one user


@pytest.mark.parametrize("stdin, message", [
    ("mara.quill99\n", "password: must not be the username"),
    ("Password123\n", "password: is one of the 3000 most used passwords"),
    ("          \n", "password: must not be only blanks"),
])
def test_user_add_applies_the_password_rules(cli, stdin, message) -> None:
    cli("db", "upgrade")
    result = cli("user", "add", "mara.quill", "--role", "quality", "--password-stdin",
                 input=stdin)
    assert result.exit_code == 1
    assert message in result.output and "Traceback" not in result.output
    assert "mara.quill" not in cli("user", "list").output


def test_user_password_resets_with_the_rules(cli) -> None:
    cli("db", "upgrade")
    cli("user", "add", "sam", "--role", "owner", "--password-stdin", input="long-enough-pw\n")
    weak = cli("user", "password", "sam", "--password-stdin", input="qwertyuiop\n")
    assert weak.exit_code == 1 and "most used passwords" in weak.output
    ok = cli("user", "password", "SAM", "--password-stdin", input="spindle-night-31\n")
    assert ok.exit_code == 0, ok.output
    assert "new password set for sam" in ok.output
    missing = cli("user", "password", "nobody", "--password-stdin", input="spindle-night-31\n")
    assert missing.exit_code == 1 and "no user called 'nobody'" in missing.output

"""``shopapp import`` on a migrated database: template, dry run, apply, refusal, size limit.

Expected rows are read off tests/data/imports/ by hand.
"""

from __future__ import annotations

from pathlib import Path

import pytest
from click.testing import CliRunner

from shopapp.cli import main

DATA = Path(__file__).resolve().parents[1] / "data" / "imports"


@pytest.fixture()
def cli(fresh_database_url, tmp_path, monkeypatch):  # type: ignore[no-untyped-def]
    monkeypatch.setenv("SHOPAPP_DATABASE_URL", fresh_database_url)
    monkeypatch.setenv("SHOPAPP_INSTANCE_PATH", str(tmp_path))
    runner = CliRunner()

    def run(*args: str, input: str | None = None):  # type: ignore[no-untyped-def]
        return runner.invoke(main, list(args), input=input, catch_exceptions=False)

    run("db", "upgrade")
    made = run("user", "add", "ines", "--role", "admin", "--password-stdin",
               input="long-enough-pw-1\n")
    assert made.exit_code == 0, made.output
    return run


def test_template_dry_run_then_apply(cli) -> None:
    template = cli("import", "customers", "--template")
    assert template.exit_code == 0
    assert template.output.splitlines()[0] == (
        "name,contact,email,phone,address,notes,requires_residual_test")
    dry = cli("import", "customers", str(DATA / "customers.csv"), "--user", "ines",
              "--dry-run")
    assert dry.exit_code == 0, dry.output
    assert "line 2 (Brackwater Pumps (invented)): create" in dry.output
    assert "nothing written: 2 rows: 2 create" in dry.output
    real = cli("import", "customers", str(DATA / "customers.csv"), "--user", "ines")
    assert real.exit_code == 0, real.output
    assert "2 rows: 2 create, 0 update, 0 unchanged, 0 refused" in real.output
    again = cli("import", "customers", str(DATA / "customers.csv"), "--user", "ines",
                "--dry-run")
    assert "2 rows: 0 create, 0 update, 2 unchanged" in again.output
    for kind in ("rotor-types", "rotors", "jobs"):
        done = cli("import", kind, str(DATA / f"{kind}.csv"), "--user", "ines")
        assert done.exit_code == 0, done.output


def test_a_refused_row_prints_its_reason_and_exits_1(cli) -> None:
    cli("import", "customers", str(DATA / "customers.csv"), "--user", "ines")
    cli("import", "rotor-types", str(DATA / "rotor-types.csv"), "--user", "ines")
    result = cli("import", "rotors", str(DATA / "bad_truncated_rotors.csv"), "--user", "ines")
    assert result.exit_code == 1
    assert "line 3 (Brackwater Pumps (invented) / BW-2002): refused" in result.output
    assert "nothing imported from bad_truncated_rotors.csv" in result.output
    listed = cli("import", "rotors", str(DATA / "rotors.csv"), "--user", "ines", "--dry-run")
    assert "3 rows: 3 create" in listed.output  # the refused file left nothing behind


def test_a_file_over_the_limit_is_refused_before_it_is_read(cli, tmp_path) -> None:
    big = tmp_path / "big.csv"
    with big.open("wb") as fh:  # sparse: 200 MB on paper only
        fh.truncate(200 * 1024 * 1024)
    result = cli("import", "customers", str(big), "--user", "ines")
    assert result.exit_code == 1
    assert "the file has 200 MB; the limit is 20 MB" in result.output

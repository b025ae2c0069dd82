"""``shopapp backup`` / ``shopapp restore``: a small shop round-trips, row by row.

The comparison reads every table of both databases with plain SQLAlchemy selects
(not the archive's own serialisation), so a value the archive loses or changes
shows as a differing row. Runs on the backend the suite runs on (SQLite, or
PostgreSQL with ``SHOPAPP_TEST_POSTGRES_URL``).
"""

from __future__ import annotations

import datetime as dt
import hashlib
import json
import sqlite3
import uuid
import zipfile
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import pytest
from click.testing import CliRunner
from sqlalchemy import select, text
from sqlalchemy.engine import make_url
from sqlalchemy.exc import DBAPIError
from sqlalchemy.orm import Session

from shopapp.certificates import issue as certificates
from shopapp.cli import main
from shopapp.core import backup, schema
from shopapp.core.database import WRITE_OPTION, make_engine
from shopapp.core.settings import settings_for_update
from shopapp.models import (
    BackupLog,
    Base,
    Certificate,
    Customer,
    InfluenceSet,
    SubmissionToken,
    User,
)
from tests import factories
from tests.reports.samples import job_ready_for_certificate

PASSWORD = "long-enough-1"


@pytest.fixture()
def other_database_url(database_url: str, tmp_path: Path) -> Iterator[str]:
    """A second empty database of the suite's backend (the restore target)."""
    url = make_url(database_url)
    if url.get_backend_name() == "sqlite":
        yield f"sqlite:///{tmp_path / 'restored.sqlite3'}"
        return
    name = f"shopapp_restore_{uuid.uuid4().hex[:10]}"
    base = make_engine(database_url)
    admin = base.execution_options(isolation_level="AUTOCOMMIT")
    with admin.connect() as conn:
        conn.execute(text(f'CREATE DATABASE "{name}"'))
    try:
        yield url.set(database=name).render_as_string(hide_password=False)
    finally:
        with admin.connect() as conn:
            conn.execute(text("SELECT pg_terminate_backend(pid) FROM pg_stat_activity "
                              "WHERE datname = :n AND pid <> pg_backend_pid()"), {"n": name})
            conn.execute(text(f'DROP DATABASE IF EXISTS "{name}"'))
        base.dispose()


def _seed(url: str) -> None:
    """A small shop: settings, users, a reissued and a plain certificate, a job that
    learned an influence set another job uses (the job ↔ influence_set cycle), a return
    job (a job pointing at a job), a form token and the number locks."""
    schema.upgrade(url, "head")
    engine = make_engine(url)
    with Session(engine) as db:
        settings = settings_for_update(db)
        settings.shop_name = "Backup Test Balancing Ltd"
        operator = factories.user(db, username="ola", role="operator", password=PASSWORD)
        quality = factories.user(db, username="quinn", role="quality", password=PASSWORD)
        shop = factories.ShopFactory(db)
        job = job_ready_for_certificate(db, shop, operator)
        first = certificates.issue(db, job, by=quality)
        certificates.reissue(db, first, by=quality, reason="order reference corrected")
        learned = InfluenceSet(rotor_type_id=job.rotor.rotor_type_id, machine_id=job.machine_id,
                               speed_rpm=600.0, planes=2, reading_unit="g·mm",
                               coefficients=[[1.0, 0.0], [0.125, -0.5], [0.0, 0.1], [1.0, 0.0]],
                               condition_number=1.37, source_job_id=job.id)
        db.add(learned)
        db.flush()
        second = job_ready_for_certificate(db, shop, operator)
        second.influence_set_id = learned.id
        certificates.issue(db, second, by=quality)
        shop.job(job.rotor, kind="return", return_of_job_id=job.id, notes="returned: noisy")
        db.add(SubmissionToken(token="tok-é-1", user_id=operator.id, entity="job",
                               entity_id=job.id))
        db.commit()
    engine.dispose()


def _contents(url: str) -> dict[str, list[tuple[Any, ...]]]:
    """Every table's rows (typed values), in primary-key order."""
    engine = make_engine(url)
    try:
        with engine.connect() as conn:
            return {t.name: sorted((tuple(r) for r in conn.execute(select(t))),
                                   key=lambda r: repr(r[0]))
                    for t in Base.metadata.sorted_tables}
    finally:
        engine.dispose()


class Shop:
    """The CLI pointed at one database or another."""

    def __init__(self, monkeypatch: pytest.MonkeyPatch, tmp_path: Path) -> None:
        self.monkeypatch = monkeypatch
        monkeypatch.setenv("SHOPAPP_INSTANCE_PATH", str(tmp_path))

    def run(self, url: str, *args: str):  # type: ignore[no-untyped-def]
        self.monkeypatch.setenv("SHOPAPP_DATABASE_URL", url)
        return CliRunner().invoke(main, list(args), catch_exceptions=False)


@pytest.fixture()
def cli(monkeypatch, tmp_path) -> Shop:  # type: ignore[no-untyped-def]
    return Shop(monkeypatch, tmp_path)


@pytest.fixture()
def seeded(fresh_database_url: str) -> str:
    _seed(fresh_database_url)
    return fresh_database_url


def _without_log(contents: dict[str, list[tuple[Any, ...]]]) -> dict[str, list[tuple[Any, ...]]]:
    return {k: v for k, v in contents.items() if k != "backup_log"}


def test_round_trip_into_an_empty_database_keeps_every_row(
        cli, seeded, other_database_url, tmp_path) -> None:  # type: ignore[no-untyped-def]
    before = _contents(seeded)
    assert len(before["certificate"]) == 3 and before["influence_set"]
    archive = tmp_path / "shop.zip"
    made = cli.run(seeded, "backup", str(archive))
    assert made.exit_code == 0, made.output
    assert f"backup written: {archive}" in made.output
    schema.upgrade(other_database_url, "head")
    restored = cli.run(other_database_url, "restore", str(archive))
    assert restored.exit_code == 0, restored.output
    assert not before["backup_log"]
    total = sum(len(rows) for rows in before.values())
    assert f"restored {total} rows in {len(before) - 1} tables" in restored.output
    after = _contents(other_database_url)
    for table, rows in _without_log(before).items():
        assert after[table] == rows, table
    # The restore itself is logged in the restored database (its only log row).
    assert [(r.kind, r.path) for r in _log(other_database_url)] == [("restore", str(archive))]
    # The restored shop is sound and keeps working: certificates agree with their evidence,
    # new rows get new ids (PostgreSQL sequences continue), the guards are still there.
    check = cli.run(other_database_url, "db", "check")
    assert check.exit_code == 0, check.output
    assert "3 certificates checked (2 valid): all agree" in check.output
    engine = make_engine(other_database_url)
    try:
        with Session(engine) as db:
            customer = factories.ShopFactory(db).customer(name="After the restore")
            assert customer.id > max(r[0] for r in before["customer"])
            db.commit()
            with pytest.raises(DBAPIError, match="immutable"):
                db.execute(text("UPDATE certificate SET reason = 'x' WHERE state = 'issued'"))
    finally:
        engine.dispose()


def _log(url: str) -> list[BackupLog]:
    engine = make_engine(url)
    try:
        with Session(engine) as db:
            return list(db.scalars(select(BackupLog).order_by(BackupLog.id)))
    finally:
        engine.dispose()


def test_force_restores_over_a_changed_shop_certificates_and_all(cli, seeded, tmp_path) -> None:  # type: ignore[no-untyped-def]
    archive = tmp_path / "shop.zip"
    assert cli.run(seeded, "backup", str(archive)).exit_code == 0
    before = _contents(seeded)
    engine = make_engine(seeded)
    try:
        with Session(engine) as db:  # the day after the backup: more work, a voided certificate
            quality = db.scalars(select(User).where(
                User.username == "quinn")).one()
            cert = db.scalars(select(Certificate).where(Certificate.state == "issued")).first()
            certificates.void(db, cert, by=quality, reason="customer cancelled the order")
            factories.ShopFactory(db).customer(name="New since the backup")
            db.commit()
    finally:
        engine.dispose()
    refused = cli.run(seeded, "restore", str(archive))
    assert refused.exit_code == 1
    assert "the database is not empty" in refused.output
    assert "add --force" in refused.output
    assert _without_log(_contents(seeded)) != _without_log(before)  # nothing was changed
    forced = cli.run(seeded, "restore", "--force", str(archive))
    assert forced.exit_code == 0, forced.output
    assert "were deleted first" in forced.output
    assert _without_log(_contents(seeded)) == _without_log(before)
    # The database's own backup log is kept and the restore added to it.
    assert [r.kind for r in _log(seeded)] == ["backup", "restore"]


def test_backup_last_says_when_and_where(cli, seeded, tmp_path) -> None:  # type: ignore[no-untyped-def]
    none = cli.run(seeded, "backup", "--last")
    assert none.exit_code == 0
    assert "last backup: none logged" in none.output
    folder = tmp_path / "backups"
    folder.mkdir()
    made = cli.run(seeded, "backup", str(folder))
    assert made.exit_code == 0, made.output
    written = list(folder.iterdir())
    assert len(written) == 1 and written[0].name.startswith("shopapp-backup-")
    digest = hashlib.sha256(written[0].read_bytes()).hexdigest()
    last = cli.run(seeded, "backup", "--last")
    today = dt.datetime.now(dt.UTC).date().isoformat()
    assert f"last backup: {today}" in last.output
    assert str(written[0]) in last.output and digest in last.output
    again = cli.run(seeded, "backup", str(written[0]))
    assert again.exit_code == 1
    assert "exists already" in again.output


def test_archive_holds_manifest_tables_and_on_sqlite_the_file(  # type: ignore[no-untyped-def]
        cli, seeded, tmp_path, backend) -> None:
    archive = tmp_path / "shop.zip"
    assert cli.run(seeded, "backup", str(archive)).exit_code == 0
    with zipfile.ZipFile(archive) as zf:
        manifest = json.loads(zf.read("manifest.json"))
        assert manifest["schema_revision"] == schema.code_head()
        for entry in manifest["tables"]:
            data = zf.read(f"tables/{entry['name']}.jsonl")
            assert hashlib.sha256(data).hexdigest() == entry["sha256"]
            assert len(data.splitlines()) == entry["rows"]
        counts = {t["name"]: t["rows"] for t in manifest["tables"]}
        assert counts["certificate"] == 3 and counts["job"] == 3
        if backend == "sqlite":
            copy = tmp_path / "copy.sqlite3"
            copy.write_bytes(zf.read("shopapp.sqlite3"))
            assert hashlib.sha256(copy.read_bytes()).hexdigest() == \
                manifest["sqlite_file"]["sha256"]
            con = sqlite3.connect(copy)
            try:
                assert con.execute("SELECT count(*) FROM certificate").fetchone() == (3,)
            finally:
                con.close()


def _rewrite(archive: Path, target: Path, change) -> None:  # type: ignore[no-untyped-def]
    """Copy ``archive`` to ``target`` with ``change(name, data) -> data`` applied."""
    with zipfile.ZipFile(archive) as src, zipfile.ZipFile(target, "w") as dst:
        for info in src.infolist():
            dst.writestr(info.filename, change(info.filename, src.read(info.filename)))


def _with_manifest(archive: Path, target: Path, **fields: Any) -> None:
    def change(name: str, data: bytes) -> bytes:
        if name != "manifest.json":
            return data
        return json.dumps({**json.loads(data), **fields}).encode()
    _rewrite(archive, target, change)


@pytest.fixture()
def archive(cli, seeded, tmp_path) -> Path:  # type: ignore[no-untyped-def]
    path = tmp_path / "shop.zip"
    assert cli.run(seeded, "backup", str(path)).exit_code == 0
    return path


@pytest.fixture()
def empty(other_database_url: str) -> str:
    schema.upgrade(other_database_url, "head")
    return other_database_url


def _is_empty(url: str) -> bool:
    return all(not rows for rows in _contents(url).values())


@pytest.mark.parametrize("revision, message", [
    ("0003", "holds schema revision 0003, this shopapp's is"),
    ("0099", "was made by a newer shopapp (schema revision 0099"),
])
def test_restore_refuses_another_schema_revision(cli, archive, empty, tmp_path, revision,
                                                 message) -> None:  # type: ignore[no-untyped-def]
    other = tmp_path / "other.zip"
    _with_manifest(archive, other, schema_revision=revision)
    result = cli.run(empty, "restore", str(other))
    assert result.exit_code == 1
    assert message in result.output
    assert "Traceback" not in result.output
    assert _is_empty(empty)


def test_restore_refuses_a_damaged_archive(cli, archive, empty, tmp_path) -> None:  # type: ignore[no-untyped-def]
    damaged = tmp_path / "damaged.zip"
    _rewrite(archive, damaged, lambda name, data: data.replace(b"Backup Test", b"Backup Tost"))
    result = cli.run(empty, "restore", str(damaged))
    assert result.exit_code == 1
    assert "is damaged: table shop_settings holds 1 rows with SHA-256" in result.output
    assert _is_empty(empty)
    junk = tmp_path / "junk.zip"
    junk.write_bytes(b"not an archive at all")
    result = cli.run(empty, "restore", str(junk))
    assert result.exit_code == 1
    assert "is not a shopapp backup (not a ZIP archive)" in result.output
    result = cli.run(empty, "restore", str(tmp_path / "missing.zip"))
    assert "missing.zip: no such file" in result.output


def test_restore_is_one_transaction(cli, archive, empty, tmp_path) -> None:  # type: ignore[no-untyped-def]
    """An archive that agrees with its manifest but breaks a rule of the schema (a job
    pointing at a customer that is not in it) restores nothing at all."""
    broken = tmp_path / "broken.zip"
    tables: dict[str, bytes] = {}

    def change(name: str, data: bytes) -> bytes:
        if name == "tables/job.jsonl":
            rows = [json.loads(line) for line in data.splitlines()]
            rows[-1]["customer_id"] = 999_999
            data = b"".join(json.dumps(r, sort_keys=True, separators=(",", ":"),
                                       ensure_ascii=False).encode() + b"\n" for r in rows)
        tables[name] = data
        return data

    _rewrite(archive, broken, change)
    manifest = json.loads(tables["manifest.json"])
    for entry in manifest["tables"]:
        entry["sha256"] = hashlib.sha256(tables[f"tables/{entry['name']}.jsonl"]).hexdigest()
    _rewrite(broken, tmp_path / "broken2.zip",
             lambda name, data: json.dumps(manifest).encode() if name == "manifest.json"
             else data)
    result = cli.run(empty, "restore", str(tmp_path / "broken2.zip"))
    assert result.exit_code == 1
    assert "the database refused the change" in result.output
    assert "FOREIGN KEY" in result.output or "foreign key" in result.output
    assert _is_empty(empty)


def test_restore_needs_a_schema_first(cli, archive, other_database_url) -> None:  # type: ignore[no-untyped-def]
    result = cli.run(other_database_url, "restore", str(archive))
    assert result.exit_code == 1
    assert "has no shopapp schema yet: create it with `shopapp db upgrade`" in result.output


def test_backup_of_a_database_behind_the_code_is_refused(cli, fresh_database_url, tmp_path) -> None:  # type: ignore[no-untyped-def]
    schema.upgrade(fresh_database_url, "0003")
    result = cli.run(fresh_database_url, "backup", str(tmp_path / "x.zip"))
    assert result.exit_code == 1
    assert "run `shopapp db upgrade` first" in result.output
    assert not (tmp_path / "x.zip").exists()
    assert not list(tmp_path.glob(".x.zip.*"))  # no partial file left behind


def test_sqlite_backup_takes_the_committed_state_while_a_writer_works(  # type: ignore[no-untyped-def]
        cli, seeded, tmp_path, backend) -> None:
    """A write transaction open during the copy neither blocks it nor gets into it.

    (The command then logs the backup, which waits for that writer like any write.)"""
    if backend != "sqlite":
        pytest.skip("the SQLite online backup API")
    committed = len(_contents(seeded)["customer"])
    engine = make_engine(seeded)
    try:
        with engine.connect().execution_options(**{WRITE_OPTION: True}) as writer:
            writer.begin()  # BEGIN IMMEDIATE: the write lock is held from here on
            writer.execute(Customer.__table__.insert().values(name="Half-way Ltd"))
            made = backup.write_archive(engine, tmp_path / "during.zip")
            writer.commit()
    finally:
        engine.dispose()
    assert made.manifest.backend == "sqlite"
    with zipfile.ZipFile(tmp_path / "during.zip") as zf:
        rows = {t["name"]: t["rows"] for t in json.loads(zf.read("manifest.json"))["tables"]}
    assert rows["customer"] == committed
    assert len(_contents(seeded)["customer"]) == committed + 1

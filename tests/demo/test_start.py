"""Starting with the demo shop: any seed, any time of day, a status every page shows.

The certificate PDFs are replaced by a stub here (``render`` returns the
certified JSON), so a load takes seconds; every rule of issuing — the
register rule for the machine, the job's verdict, the residual tests, "not in
the future" — is the certificates service's own.
"""

from __future__ import annotations

import datetime as dt
import importlib
import logging
from collections.abc import Callable
from pathlib import Path
from typing import Any

import pytest
from click.testing import CliRunner
from sqlalchemy import Connection, Date, create_engine, func, select
from sqlalchemy.exc import OperationalError
from sqlalchemy.orm import Session

from shopapp.certificates import issue as cert_service
from shopapp.certificates import pdfsign
from shopapp.cli import main
from shopapp.core.database import SQLITE_IMMEDIATE, make_engine
from shopapp.core.errors import ServiceError, ValidationFailed
from shopapp.core.extensions import db_session
from shopapp.demo import loader as demo
from shopapp.demo import replay, status
from shopapp.demo import shop as demo_shop
from shopapp.models import Base, Certificate, Job, User
from shopapp.models.base import UTCDateTime
from shopapp.reports import certificate as certificate_report

END_DAY = dt.date(2026, 3, 27)  # a Friday
# Times of day a first start may happen (UTC): after midnight, before the shift, after
# lunch (the reported failure: certificates placed later that day), a minute before midnight.
HOURS = ((0, 30), (7, 45), (12, 45), (23, 59))
# The module (``shopapp.cli`` exports the command of the same name).
first_start_cli = importlib.import_module("shopapp.cli.first_start")


@pytest.fixture()
def quick_certificates(monkeypatch: pytest.MonkeyPatch) -> None:
    """A certificate's PDF is its certified JSON (unique per certificate, no drawing), and
    sealing passes it through (a stub is no PDF to sign; tests/demo/test_simulator.py
    loads the demo with real, signed PDFs)."""
    monkeypatch.setattr(certificate_report, "render",
                        lambda data: b"%PDF stub\n" + certificate_report.canonical_json(
                            data).encode())
    monkeypatch.setattr(pdfsign, "seal", lambda unsigned, data_json, key, reason: unsigned)


def _session(connection: Connection) -> Session:
    return Session(bind=connection, join_transaction_mode="create_savepoint")


def _after(ds: Session, now: dt.datetime) -> list[str]:
    """Every stored moment later than ``now`` and every day later than its date (but promises)."""
    found = []
    for table in Base.metadata.sorted_tables:
        for col in table.columns:
            if isinstance(col.type, UTCDateTime):
                limit: Any = now
            elif isinstance(col.type, Date) and col.name != "promised_on":
                limit = now.date()
            else:
                continue
            n = ds.scalar(select(func.count()).select_from(table).where(col > limit))
            if n:
                top = ds.scalar(select(func.max(col)))
                found.append(f"{table.name}.{col.name}: {n} after {limit} (latest {top})")
    return found


@pytest.mark.parametrize("seed", range(16))
def test_the_demo_loads_for_every_seed_and_start_time_and_never_dates_after_now(
        seed: int, connection: Connection, quick_certificates: None,
        monkeypatch: pytest.MonkeyPatch) -> None:
    hour, minute = HOURS[seed % len(HOURS)]
    now = dt.datetime(END_DAY.year, END_DAY.month, END_DAY.day, hour, minute, tzinfo=dt.UTC)
    # The certificates service refuses a moment after its clock: the load started at `now`.
    monkeypatch.setattr(cert_service, "_now", lambda: now)
    monkeypatch.setattr(demo_shop, "hash_password", lambda pw: "not-a-hash")  # speed only
    ds = _session(connection)
    demo.load_demo(ds, seed=seed, years=0.25, now=now, signing_dir=None)
    ds.flush()
    assert _after(ds, now) == []
    jobs = list(ds.scalars(select(Job)))
    assert len(jobs) > 50
    valid = {c.job_id for c in ds.scalars(select(Certificate).where(
        Certificate.state == "issued"))}
    # Every certified or dispatched job holds its certificate (none was refused).
    assert {j.id for j in jobs if j.state in ("certified", "dispatched")} == valid


def test_a_history_ending_at_a_given_moment_keeps_the_jobs_of_that_morning_open(
        connection: Connection) -> None:
    """Before 07:30 nothing of the end day has happened; by 23:59 its jobs were booked."""
    early = dt.datetime(2026, 3, 27, 0, 30, tzinfo=dt.UTC)
    ds = _session(connection)
    demo.load_demo(ds, seed=2, years=0.25, now=early, certificates=False,
                   signing_dir=None)
    assert ds.scalar(select(func.count()).select_from(Job).where(
        Job.received_on == early.date())) == 0
    assert ds.scalar(select(func.max(Job.created_at))) < early
    assert demo.history_end(early, END_DAY) == early  # a given end day never passes now
    assert demo.history_end(dt.datetime(2026, 3, 30, 9, 0, tzinfo=dt.UTC), END_DAY) == \
        dt.datetime(2026, 3, 27, 23, 59, 59, tzinfo=dt.UTC)
    with pytest.raises(ValidationFailed, match="now"):
        demo.history_end(dt.datetime(2026, 3, 27, 12, 0))


def test_certificates_in_slices_leave_alone_a_job_a_person_changed(
        connection: Connection, quick_certificates: None) -> None:
    now = dt.datetime(2026, 3, 27, 12, 45, tzinfo=dt.UTC)
    ds = _session(connection)
    load = demo.DemoLoad(ds, seed=4, years=0.25, now=now, signing_dir=None)
    load.shop_and_history()
    ds.commit()
    total = load.certificates_total
    assert total > 20 and ds.scalar(select(func.count()).select_from(Certificate)) == 0
    load.advance(load.certificates(seconds=0.0))  # one operation, then committed
    ds.commit()
    assert load.certificates_remaining == total - 1
    # A person reopens a dispatched job whose certificate is still to come.
    ops = load.replay.cert_ops  # type: ignore[union-attr]
    pending = {op[2] for op in ops[1:]} - {ops[0][2]}
    other = _session(connection)
    job = next(j for j in other.scalars(select(Job).where(Job.state == "dispatched"))
               if j.id in pending)
    job.state = "on_machine"
    other.commit()
    while load.certificates_remaining:
        load.advance(load.certificates(seconds=0.2))
        ds.commit()
    assert load.skipped == {job.id: job.number}
    ds.expire_all()
    assert ds.get(Job, job.id).state == "on_machine"  # the person's change stands
    assert not list(ds.scalars(select(Certificate).where(Certificate.job_id == job.id)))


# --------------------------------------------------------------------------- every page


@pytest.mark.parametrize("state, shown, css", [
    ("loading", True, "flash info"), ("failed", True, "flash error"), ("ready", False, ""),
])
def test_every_page_shows_a_demo_load_that_is_running_or_failed(
        app: Any, client: Any, state: str, shown: bool, css: str) -> None:
    message = f"The demo shop test note ({state}); run: shopapp demo load --seed 1"
    status.write_status(app.instance_path, state, message)
    for url in ("/login", "/no-such-page"):
        page = client.get(url).get_data(as_text=True)
        assert (message in page) is shown, url
        if shown:
            assert f'class="{css} demo-status"' in page


# --------------------------------------------------------------------------- the commands


@pytest.fixture()
def cli(fresh_database_url: str, tmp_path: Path, monkeypatch: pytest.MonkeyPatch
        ) -> Callable[..., Any]:
    monkeypatch.setenv("SHOPAPP_DATABASE_URL", fresh_database_url)
    monkeypatch.setenv("SHOPAPP_INSTANCE_PATH", str(tmp_path))
    runner = CliRunner()

    def run(*args: str, input: str | None = None) -> Any:
        return runner.invoke(main, list(args), input=input, catch_exceptions=False)

    run("db", "upgrade")
    return run


def test_demo_load_writes_the_logins_it_prints_and_says_ready(cli: Any, tmp_path: Path) -> None:
    result = cli("demo", "load", "--seed", "3", "--years", "0.1", "--no-certificates")
    assert result.exit_code == 0, result.output
    logins = (tmp_path / "first-logins.txt").read_text().splitlines()
    assert len(logins) == 6
    for line in logins:
        assert "  " + line in result.output
    assert status.read_status(tmp_path).state == "ready"  # type: ignore[union-attr]


def test_a_refused_demo_load_leaves_no_status(cli: Any, tmp_path: Path) -> None:
    cli("demo", "load", "--seed", "3", "--years", "0.1", "--no-certificates")
    (tmp_path / status.STATUS_FILE).unlink()
    again = cli("demo", "load", "--seed", "3", "--years", "0.1")
    assert again.exit_code == 1 and "--force" in again.output
    assert status.read_status(tmp_path) is None  # the shop there is not a failed demo


def _broken_evidence(self: Any) -> None:
    raise ServiceError("a record was refused (test)")


@pytest.mark.parametrize("args, command", [
    (("demo", "load", "--seed", "3", "--years", "0.1"), "shopapp demo load --seed 3 --years 0.1"),
    (("first-start",), "shopapp demo load --seed 1 --years 2"),
])
def test_a_failed_load_says_so_in_the_log_and_on_the_pages_with_the_command(
        cli: Any, tmp_path: Path, monkeypatch: pytest.MonkeyPatch, args: tuple[str, ...],
        command: str, caplog: pytest.LogCaptureFixture) -> None:
    monkeypatch.setattr(replay.Replay, "evidence", _broken_evidence)
    logger = logging.getLogger("shopapp.demo")
    logger.addHandler(caplog.handler)  # shopapp's loggers do not propagate to the root
    try:
        result = cli(*args)
    finally:
        logger.removeHandler(caplog.handler)
    assert result.exit_code == 1
    assert "a record was refused (test)" in result.output
    assert any(r.levelname == "ERROR" and command in r.getMessage()
               for r in caplog.records)  # the log
    note = status.notice(tmp_path)
    assert note is not None and note.failed
    assert "a record was refused (test)" in note.message and command in note.message


def test_first_start_prints_the_logins_before_the_certificates_then_says_ready(
        cli: Any, tmp_path: Path, monkeypatch: pytest.MonkeyPatch, quick_certificates: None,
        fresh_database_url: str) -> None:
    monkeypatch.setattr(first_start_cli, "YEARS", 0.1)
    seen: list[tuple[str, str, int, int, int]] = []
    engine = create_engine(fresh_database_url)
    real_write = first_start_cli.write_status

    def watch(folder: Any, state: str, message: str) -> Path:
        """What another process sees whenever the status changes."""
        with engine.connect() as conn:
            counts = [conn.scalar(select(func.count()).select_from(t))
                      for t in (User, Job, Certificate)]
        seen.append((state, message, *counts))  # type: ignore[arg-type]
        return real_write(folder, state, message)

    monkeypatch.setattr(first_start_cli, "write_status", watch)
    result = cli("first-start")
    engine.dispose()
    assert result.exit_code == 0, result.output
    out = result.output
    # The logins come before the jobs are simulated (seconds), not after them.
    assert out.index("log in with (role, username, password)") < out.index(
        "demo: simulating") < out.index("demo jobs written") < out.index(
        "demo shop fully loaded")
    logins = (tmp_path / "first-logins.txt").read_text().splitlines()
    assert len(logins) == 6 and all("  " + line in out for line in logins)
    states = [s[0] for s in seen]
    assert states[0] == "loading" and states[-1] == "ready" and states.count("ready") == 1
    # Before the people are committed: nothing to trip over (no users, no jobs yet).
    assert seen[0][2:] == (0, 0, 0)
    # Then the people and the note that the jobs are still being written, before the
    # logins are printed: whoever logs in at once is told.
    assert seen[1][0] == "loading" and seen[1][2:] == (6, 0, 0)
    assert "jobs" in seen[1][1] and "being written" in seen[1][1]
    # While certificates are issued: users and jobs are there, and the note says the
    # certificates are still coming.
    slices = [s for s in seen if "certificates" in s[1] and s[0] == "loading"]
    assert slices and slices[0][2] == 6 and slices[0][3] > 0 and slices[0][4] == 0
    assert all("show no certificate yet" in s[1] for s in slices)
    assert seen[-1][4] > 0


def test_a_later_start_marks_an_unfinished_load_as_failed(cli: Any, tmp_path: Path) -> None:
    cli("user", "add", "ada", "--role", "admin", "--password-stdin", input="long-enough-pw\n")
    status.write_status(tmp_path, "loading", "certificates 10 of 500")
    result = cli("first-start")
    assert result.exit_code == 0
    note = status.notice(tmp_path)
    assert note is not None and note.failed
    assert "did not finish loading" in note.message and "shopapp db upgrade" in note.message


# --------------------------------------------------------------------------- writing beside a load


def test_sqlite_immediate_keeps_a_reader_that_writes_from_failing_on_a_commit_meanwhile(
        tmp_path: Path) -> None:
    """SQLite in WAL mode: a deferred transaction that has read cannot write once another
    connection committed (SQLITE_BUSY_SNAPSHOT: "database is locked" at once, no waiting) —
    what a login (read the user, write its last login) met while the demo committed
    certificate slices. BEGIN IMMEDIATE takes the write lock first, so others wait instead."""
    engine = make_engine(f"sqlite:///{tmp_path / 'lock.sqlite3'}")
    with engine.begin() as conn:
        conn.exec_driver_sql("CREATE TABLE t (x INTEGER)")
        conn.exec_driver_sql("INSERT INTO t VALUES (1)")
    reader = engine.connect()
    reader.begin()
    reader.exec_driver_sql("SELECT x FROM t").all()
    with engine.begin() as other:
        other.exec_driver_sql("UPDATE t SET x = 2")
    with pytest.raises(OperationalError, match="locked"):
        reader.exec_driver_sql("UPDATE t SET x = 3")
    reader.rollback()
    reader.close()

    writer = engine.connect().execution_options(**{SQLITE_IMMEDIATE: True})
    writer.begin()
    assert writer.exec_driver_sql("SELECT x FROM t").scalar() == 2
    other = engine.connect()
    other.exec_driver_sql("PRAGMA busy_timeout=50")
    other.commit()
    with pytest.raises(OperationalError, match="locked"):  # must wait for the writer
        other.begin()
        other.exec_driver_sql("UPDATE t SET x = 4")
    other.rollback()
    other.close()
    writer.exec_driver_sql("UPDATE t SET x = 3")
    writer.commit()
    writer.close()
    with engine.connect() as conn:
        assert conn.exec_driver_sql("SELECT x FROM t").scalar() == 3
    engine.dispose()


@pytest.mark.parametrize("method, immediate", [("POST", True), ("GET", False)])
def test_a_request_that_may_write_begins_immediate(app: Any, method: str,
                                                    immediate: bool) -> None:
    with app.test_request_context("/login", method=method):
        options = db_session().connection().get_execution_options()
        assert bool(options.get(SQLITE_IMMEDIATE)) is immediate

"""The database itself refuses impossible data, and the migrations equal the models."""

from __future__ import annotations

import datetime as dt
import hashlib

import pytest
from alembic.autogenerate import compare_metadata
from alembic.runtime.migration import MigrationContext
from sqlalchemy import delete, inspect, select, text, update
from sqlalchemy.exc import DBAPIError, IntegrityError

from shopapp.core import schema
from shopapp.core.database import make_engine
from shopapp.models import (
    Base,
    Certificate,
    Customer,
    Job,
    Machine,
    Rotor,
    RotorType,
    Run,
    RunReading,
    utcnow,
)


def _refused(db, obj) -> None:
    """Flushing ``obj`` must be refused by the database; the session is usable after."""
    db.add(obj)
    with pytest.raises(IntegrityError):
        db.flush()
    db.rollback()


# --- CHECK constraints -------------------------------------------------------


@pytest.mark.parametrize(
    "field, value",
    [
        ("mass_kg", 0.0),
        ("mass_kg", -3.0),
        ("service_speed_rpm", 0.0),
        ("radius_1_mm", -1.0),
        ("positions_1", 1),
        ("kind", "toaster"),
        ("method_1", "glue"),
        ("bearing_b_mm", 0.0),  # bearings in one place
    ],
)
def test_rotor_type_checks(db, shop, field, value) -> None:
    customer = shop.customer()
    good = shop.rotor_type(customer)
    assert good.id  # the factory's values are acceptable
    kwargs = {field: value, "part_number": f"BAD-{field}-{value}"}
    with pytest.raises(IntegrityError):
        shop.rotor_type(customer, **kwargs)
    db.rollback()


def test_plane_two_needs_its_radius(db, shop) -> None:
    with pytest.raises(IntegrityError):
        shop.rotor_type(radius_2_mm=None)
    db.rollback()


@pytest.mark.parametrize(
    "field, value",
    [
        ("balancing_speed_rpm", 0.0),
        ("service_speed_rpm", -1480.0),
        ("state", "lost"),
        ("kind", "warranty"),
        ("tolerance_grade", None),  # method 'grade' without a grade
        ("reopen_count", -1),
        ("promised_on", dt.date(2026, 10, 1)),  # before received
    ],
)
def test_job_checks(db, shop, field, value) -> None:
    rotor = shop.rotor()
    with pytest.raises(IntegrityError):
        shop.job(rotor, **{field: value})
    db.rollback()


def test_return_job_must_link_the_earlier_job(db, shop) -> None:
    with pytest.raises(IntegrityError):
        shop.job(kind="return")
    db.rollback()


def test_run_and_reading_checks(db, shop) -> None:
    job = shop.job()
    _refused(db, Run(job_id=job.id, seq=1, purpose="initial", speed_rpm=-5))
    job = shop.job()
    _refused(db, Run(job_id=job.id, seq=1, purpose="trial", speed_rpm=600))  # trial w/o mass
    job = shop.job()
    run = Run(job_id=job.id, seq=1, purpose="initial", speed_rpm=600)
    db.add(run)
    db.flush()
    _refused(db, RunReading(run_id=run.id, plane=1, amplitude=10, angle_deg=360.0))
    job = shop.job()
    run = Run(job_id=job.id, seq=1, purpose="initial", speed_rpm=600)
    db.add(run)
    db.flush()
    _refused(db, RunReading(run_id=run.id, plane=3, amplitude=10, angle_deg=10))


# --- UNIQUE constraints ------------------------------------------------------


def test_job_numbers_are_unique(db, shop) -> None:
    shop.job(number="J-1")
    with pytest.raises(IntegrityError):
        shop.job(number="J-1")
    db.rollback()


def test_serial_unique_per_customer_only(db, shop) -> None:
    rt = shop.rotor_type()
    shop.rotor(rt, serial_number="S-100")
    other = shop.rotor_type()
    assert shop.rotor(other, serial_number="S-100").id  # another customer: fine
    with pytest.raises(IntegrityError):
        shop.rotor(rt, serial_number="S-100")
    db.rollback()


def test_run_sequence_unique_per_job(db, shop) -> None:
    job = shop.job()
    db.add(Run(job_id=job.id, seq=1, purpose="initial", speed_rpm=600))
    db.flush()
    _refused(db, Run(job_id=job.id, seq=1, purpose="check", speed_rpm=600))


# --- foreign keys: history is never cascaded away ---------------------------


def test_customer_with_jobs_cannot_be_deleted(db, shop) -> None:
    job = shop.job()
    db.commit()
    with pytest.raises(IntegrityError):
        db.execute(delete(Customer).where(Customer.id == job.customer_id))
    db.rollback()


def test_rotor_must_exist(db, shop) -> None:
    customer = shop.customer()
    _refused(db, Rotor(customer_id=customer.id, rotor_type_id=999_999, serial_number="X"))


def test_rotor_type_with_rotors_cannot_be_deleted(db, shop) -> None:
    rotor = shop.rotor()
    db.commit()
    with pytest.raises(IntegrityError):
        db.execute(delete(RotorType).where(RotorType.id == rotor.rotor_type_id))
    db.rollback()


# --- certificates are immutable in the database itself ----------------------


def _certificate(db, shop, user) -> Certificate:
    job = shop.job()
    pdf = b"%PDF-1.4 test"
    cert = Certificate(
        number="C-0001", revision=1, job_id=job.id, state="issued", issued_by_id=user.id,
        pdf=pdf, pdf_sha256=hashlib.sha256(pdf).hexdigest(), data_json="{}",
        data_sha256=hashlib.sha256(b"{}").hexdigest(),
    )
    db.add(cert)
    db.flush()
    return cert


def test_issued_certificate_content_cannot_be_updated(db, shop, make_user) -> None:
    user = make_user("quality")
    cert = _certificate(db, shop, user)
    with pytest.raises(DBAPIError, match="immutable"):
        db.execute(update(Certificate).where(Certificate.id == cert.id).values(data_json='{"a":1}'))
    db.rollback()


def test_certificate_can_be_voided_once_then_never_changed(db, shop, make_user) -> None:
    from shopapp.models import utcnow

    user = make_user("quality")
    cert = _certificate(db, shop, user)
    db.execute(
        update(Certificate).where(Certificate.id == cert.id)
        .values(state="void", voided_at=utcnow(), void_reason="typo", voided_by_id=user.id)
    )
    with pytest.raises(DBAPIError, match="immutable"):
        db.execute(update(Certificate).where(Certificate.id == cert.id).values(void_reason="x"))
    db.rollback()


def test_certificate_cannot_be_deleted(db, shop, make_user) -> None:
    user = make_user("quality")
    cert = _certificate(db, shop, user)
    with pytest.raises(DBAPIError, match="never deleted"):
        db.execute(delete(Certificate).where(Certificate.id == cert.id))
    db.rollback()


# --- backend settings --------------------------------------------------------


def test_sqlite_runs_with_foreign_keys_and_wal(engine, backend) -> None:
    if backend != "sqlite":
        pytest.skip("SQLite pragmas only apply to SQLite")
    with engine.connect() as conn:
        assert conn.execute(text("PRAGMA foreign_keys")).scalar() == 1
        assert conn.execute(text("PRAGMA journal_mode")).scalar() == "wal"


def test_every_foreign_key_is_indexed(engine) -> None:
    insp = inspect(engine)
    missing = []
    for table in Base.metadata.sorted_tables:
        indexed = {ix["column_names"][0] for ix in insp.get_indexes(table.name)}
        indexed |= {u["column_names"][0] for u in insp.get_unique_constraints(table.name)}
        # A primary key is an index too (job_fact.job_id is both the key and the link).
        pk = insp.get_pk_constraint(table.name)["constrained_columns"]
        indexed |= set(pk[:1])
        for fk in table.foreign_keys:
            if fk.parent.name not in indexed:
                missing.append(f"{table.name}.{fk.parent.name}")
    assert missing == []


def test_timestamps_come_back_aware_utc(db, shop) -> None:
    job = shop.job()
    db.commit()
    db.expire_all()
    again = db.get(Job, job.id)
    assert again.created_at.tzinfo is not None
    assert again.created_at.utcoffset() == dt.timedelta(0)


# --- migrations == models ----------------------------------------------------


def test_upgrade_head_gives_exactly_the_models_schema(fresh_database_url: str) -> None:
    schema.upgrade(fresh_database_url, "head")
    eng = make_engine(fresh_database_url)
    try:
        with eng.connect() as conn:
            ctx = MigrationContext.configure(conn, opts={"compare_type": True})
            diff = compare_metadata(ctx, Base.metadata)
        assert diff == []
    finally:
        eng.dispose()


def test_downgrade_base_then_upgrade_head(fresh_database_url: str) -> None:
    schema.upgrade(fresh_database_url, "head")
    schema.downgrade(fresh_database_url, "base")
    eng = make_engine(fresh_database_url)
    try:
        names = set(inspect(eng).get_table_names()) - {"alembic_version"}
        assert names == set()
        schema.upgrade(fresh_database_url, "head")
        assert set(Base.metadata.tables) <= set(inspect(eng).get_table_names())
        assert schema.is_at_head(eng, fresh_database_url)
    finally:
        eng.dispose()


def test_migrated_database_keeps_certificate_triggers(fresh_database_url: str) -> None:
    schema.upgrade(fresh_database_url, "head")
    eng = make_engine(fresh_database_url)
    try:
        with eng.connect() as conn:
            if eng.dialect.name == "sqlite":
                names = set(conn.execute(
                    text("SELECT name FROM sqlite_master WHERE type = 'trigger'")).scalars())
            else:
                names = set(conn.execute(text(
                    "SELECT tgname FROM pg_trigger WHERE NOT tgisinternal")).scalars())
        assert "certificate_immutable" in names
    finally:
        eng.dispose()


def test_migration_0020_gives_every_existing_revision_its_own_code(fresh_database_url: str
                                                                   ) -> None:
    """Certificates stored before 0020 (two of them void, which the guards keep most
    strictly) get random codes; afterwards a code can no more change than the PDF, on an
    issued row or a void one, while voiding still works; INSERT OR REPLACE (SQLite) and
    TRUNCATE (PostgreSQL) stay refused; the downgrade puts 0003's guards back exactly."""
    import re

    from sqlalchemy import column, insert, table
    from sqlalchemy.orm import Session

    from shopapp.models import utcnow
    from tests import factories

    before_0020 = schema._scripts().get_revision("0020").down_revision
    schema.upgrade(fresh_database_url, before_0020)
    eng = make_engine(fresh_database_url)
    cert = table("certificate", *(column(c) for c in (
        "number", "revision", "job_id", "state", "issued_by_id", "issued_at", "reason",
        "voided_at", "voided_by_id", "void_reason", "pdf", "pdf_sha256", "data_json",
        "data_sha256")))
    try:
        with eng.connect() as conn:
            guards_before = _guards(conn)
        with Session(eng) as db:
            # The user by a Core INSERT too: the model has columns added after 0020
            # (user_account.must_change_password, 0025).
            account = table("user_account", *(column(c) for c in (
                "id", "username", "full_name", "role", "password_hash", "active",
                "created_at", "session_version")))
            user_id = db.execute(insert(account).values(
                username="quinn", full_name="Quinn", role="quality",
                password_hash="not-a-login", active=True, created_at=utcnow(),
                session_version=0).returning(account.c.id)).scalar_one()
            # The job by a Core INSERT: the ORM's flush hook keeps the job facts with
            # today's SQL, which reads imported_job (0022), not there at this revision.
            rotor = factories.ShopFactory(db).rotor()
            job_id = db.execute(insert(Job.__table__).values(
                number="T-0020-1", customer_id=rotor.customer_id, rotor_id=rotor.id,
                state="booked_in", kind="new", received_on=dt.date(2026, 11, 2),
                tolerance_method="grade", tolerance_grade=6.3, service_speed_rpm=1480.0,
                balancing_speed_rpm=600.0, residual_test_required=False, reopen_count=0,
                reject_reason="", notes="", customer_order_ref="", created_at=utcnow(),
                updated_at=utcnow()).returning(Job.__table__.c.id)).scalar_one()
            for rev in (1, 2, 3):
                pdf = f"%PDF-1.4 rev {rev}".encode()
                db.execute(insert(cert).values(
                    number="BC-2025-00001", revision=rev, job_id=job_id,
                    state="void" if rev < 3 else "issued", issued_by_id=user_id,
                    issued_at=utcnow().replace(tzinfo=None), reason="",
                    voided_at=utcnow().replace(tzinfo=None) if rev < 3 else None,
                    voided_by_id=user_id if rev < 3 else None, void_reason="",
                    pdf=pdf, pdf_sha256=hashlib.sha256(pdf).hexdigest(), data_json="{}",
                    data_sha256=hashlib.sha256(f"{{}}{rev}".encode()).hexdigest()))
            db.commit()
        schema.upgrade(fresh_database_url, "head")
        with eng.connect() as conn:
            codes = list(conn.execute(text(
                "SELECT verification_code FROM certificate ORDER BY revision")).scalars())
            assert len(codes) == 3 and len(set(codes)) == 3
            assert all(re.fullmatch(r"[A-Z2-7]{10}", c) for c in codes)
        for revision in (3, 1):  # issued, then void
            with eng.connect() as conn, pytest.raises(DBAPIError, match="immutable"):
                conn.execute(text("UPDATE certificate SET verification_code = 'AAAAAAAAAA' "
                                  "WHERE revision = :r"), {"r": revision})
        with eng.connect() as conn, pytest.raises(DBAPIError, match="immutable"):
            conn.execute(text(  # voiding is no way to change the code
                "UPDATE certificate SET state = 'void', voided_at = issued_at, "
                "voided_by_id = issued_by_id, verification_code = 'AAAAAAAAAA' "
                "WHERE revision = 3"))
        with eng.connect() as conn:  # voiding alone still passes
            conn.execute(text(
                "UPDATE certificate SET state = 'void', voided_at = issued_at, "
                "voided_by_id = issued_by_id WHERE revision = 3"))
        with eng.connect() as conn, pytest.raises(IntegrityError, match="verification_code"):
            conn.execute(text(  # a new revision may not reuse a code
                "INSERT INTO certificate (number, revision, job_id, state, issued_by_id, "
                "issued_at, reason, void_reason, pdf, pdf_sha256, data_json, data_sha256, "
                "verification_code) SELECT number, 4, job_id, 'issued', issued_by_id, "
                "issued_at, '', '', pdf, :sha, '{}', data_sha256, verification_code "
                "FROM certificate WHERE revision = 1"), {"sha": "0" * 64})
        with eng.connect() as conn, pytest.raises(DBAPIError, match="never"):
            if eng.dialect.name == "sqlite":
                conn.execute(text(
                    "INSERT OR REPLACE INTO certificate (number, revision, job_id, state, "
                    "issued_by_id, issued_at, reason, void_reason, pdf, pdf_sha256, data_json, "
                    "data_sha256, verification_code) SELECT number, revision, job_id, "
                    "'issued', issued_by_id, issued_at, '', '', x'00', pdf_sha256, '{}', "
                    "data_sha256, 'BBBBBBBBBB' FROM certificate WHERE revision = 1"))
            else:
                conn.execute(text("TRUNCATE certificate CASCADE"))
        schema.downgrade(fresh_database_url, before_0020)  # and back: the column goes again
        assert "verification_code" not in {
            c["name"] for c in inspect(eng).get_columns("certificate")}
        with eng.connect() as conn:
            assert _guards(conn) == guards_before
    finally:
        eng.dispose()


def _guards(conn) -> dict[str, str]:  # type: ignore[no-untyped-def]
    """Every trigger (and PostgreSQL trigger function) of the database with its SQL."""
    if conn.dialect.name == "sqlite":
        rows = conn.execute(text("SELECT name, sql FROM sqlite_master WHERE type = 'trigger'"))
        return {name: " ".join(sql.split()) for name, sql in rows}
    rows = conn.execute(text(
        "SELECT tgname, pg_get_triggerdef(oid) FROM pg_trigger WHERE NOT tgisinternal"))
    out = {name: sql for name, sql in rows}
    funcs = conn.execute(text(
        "SELECT proname, prosrc FROM pg_proc p JOIN pg_namespace n ON n.oid = p.pronamespace "
        "WHERE n.nspname = 'public' AND p.prorettype = 'trigger'::regtype"))
    out.update({f"function {name}": " ".join(src.split()) for name, src in funcs})
    return out


def test_migrations_and_models_install_the_same_guards(fresh_database_url: str) -> None:
    """Triggers are not compared by Alembic: the ones ``create_all`` makes (tests) must be
    the ones the migrations make (shops)."""
    schema.upgrade(fresh_database_url, "head")
    eng = make_engine(fresh_database_url)
    try:
        with eng.connect() as conn:
            migrated = _guards(conn)
        schema.downgrade(fresh_database_url, "base")
        with eng.connect() as conn:
            assert _guards(conn) == {}  # the downgrade removes every trigger and function
        Base.metadata.create_all(eng)
        with eng.connect() as conn:
            created = _guards(conn)
        Base.metadata.drop_all(eng)
        with eng.connect() as conn:
            assert _guards(conn) == {}
    finally:
        eng.dispose()
    assert "certificate_immutable" in migrated
    assert {"run_reading_certified_update", "run_reading_certified_guard"} & set(migrated)
    assert migrated == created


def test_downgrading_0003_restores_the_0001_certificate_guard(fresh_database_url: str) -> None:
    schema.upgrade(fresh_database_url, "0002")
    eng = make_engine(fresh_database_url)
    try:
        with eng.connect() as conn:
            before = _guards(conn)
        schema.upgrade(fresh_database_url, "head")
        schema.downgrade(fresh_database_url, "0002")
        with eng.connect() as conn:
            after = _guards(conn)
    finally:
        eng.dispose()
    assert after == before


def test_0012_gives_existing_machines_the_unit_their_runs_were_logged_in(
        fresh_database_url: str) -> None:
    """Issue 11: machines had no reading unit; the upgrade takes the unit most of a
    machine's run readings are in, g·mm (the old form default) when it has no runs.
    Rows made at head survive a downgrade below 0012 and the upgrade back."""
    from sqlalchemy.orm import Session

    from tests.factories import ShopFactory, user

    schema.upgrade(fresh_database_url, "head")
    before_0012 = schema._scripts().get_revision("0012").down_revision
    eng = make_engine(fresh_database_url)
    try:
        with Session(eng) as s:
            shop = ShopFactory(s)
            vib, idle = shop.machine(reading_unit="mm/s"), shop.machine(reading_unit="um")
            job = shop.job(machine_id=vib.id)
            op = user(s, username="u12", role="operator", password="correct-horse-42",
                      full_name="U Twelve")
            for seq, unit in ((1, "mm/s"), (2, "mm/s"), (3, "um")):
                run = Run(job_id=job.id, seq=seq, purpose="initial", speed_rpm=600.0)
                run.readings = [RunReading(plane=1, amplitude=2.0, angle_deg=10.0, unit=unit)]
                s.add(run)
            s.flush()
            run.struck_at, run.struck_by_id, run.struck_reason = utcnow(), op.id, "typo"
            s.commit()
            ids = (vib.id, idle.id, run.id)
        eng.dispose()
        schema.downgrade(fresh_database_url, before_0012)
        schema.upgrade(fresh_database_url, "head")
        with Session(eng) as s:
            assert s.get(Machine, ids[0]).reading_unit == "mm/s"  # 2 of its 3 readings
            assert s.get(Machine, ids[1]).reading_unit == "g·mm"  # no runs: check its page
            assert s.get(Machine, ids[0]).reading_planes == 2
            assert s.get(Run, ids[2]).struck_at is None  # the downgrade dropped the marks
            assert len(s.scalars(select(RunReading)).all()) == 3  # and no reading was lost
    finally:
        eng.dispose()

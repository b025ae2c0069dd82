"""``shopapp db check``: certificates against their hashes and against the job's evidence.

The database refuses these changes (migration 0003), so each test first takes the
guards off the way an intruder with DDL rights would (drop or disable the triggers),
changes a row, puts the guards back, and then expects the check to name the
certificate and what differs. The expected values come from the tampering itself
(the machine reads g·mm, so a reading *is* the residual unbalance it certifies).
"""

from __future__ import annotations

import datetime as dt
import hashlib

import pytest
from click.testing import CliRunner
from sqlalchemy import Connection, text
from sqlalchemy.orm import Session

from shopapp.certificates import integrity, pdfsign, signing
from shopapp.certificates import issue as certificates
from shopapp.cli import main
from shopapp.core import clock
from shopapp.core.database import make_engine
from shopapp.jobs import states as jobs
from shopapp.models import Base, Correction, Run, RunReading
from tests import factories
from tests.certificates.signed import BASE
from tests.reports.samples import RESIDUAL_GMM, job_ready_for_certificate


@pytest.fixture()
def seeded(fresh_database_url, tmp_path, monkeypatch):  # type: ignore[no-untyped-def]
    """Two certified jobs; the first certificate reissued (rev 1 void, rev 2 valid); all
    signed with the instance's key as the certificate pages sign them (issue 15)."""
    signed = {"signing_dir": signing.signing_folder(tmp_path), "base_url": BASE}
    engine = make_engine(fresh_database_url)
    Base.metadata.create_all(engine)
    with Session(engine) as db:
        operator = factories.user(db, username="ola", role="operator", password="long-enough-1")
        quality = factories.user(db, username="quinn", role="quality", password="long-enough-1")
        shop = factories.ShopFactory(db)
        job = job_ready_for_certificate(db, shop, operator)
        first = certificates.issue(db, job, by=quality, **signed)
        second = certificates.reissue(db, first, by=quality, reason="order reference corrected",
                                      **signed)
        other = certificates.issue(db, job_ready_for_certificate(db, shop, operator),
                                   by=quality, **signed)
        check = db.query(Run).filter_by(job_id=job.id, purpose="check").one()
        out = {
            "number": first.number, "other": other.number, "job": job.id,
            "check_run": check.id,
            "reading": db.query(RunReading).filter_by(run_id=check.id, plane=1).one().id,
            "correction": db.query(Correction).filter_by(job_id=job.id, plane=1).one().id,
            "rev1": first.id, "rev2": second.id,
        }
        db.commit()
    out["engine"] = engine
    monkeypatch.setenv("SHOPAPP_DATABASE_URL", fresh_database_url)
    monkeypatch.setenv("SHOPAPP_INSTANCE_PATH", str(tmp_path))
    yield out
    Base.metadata.drop_all(engine)
    engine.dispose()


def tamper(engine, tables: tuple[str, ...], *statements: tuple[str, dict]) -> None:  # type: ignore[no-untyped-def]
    """Run ``statements`` with the triggers of ``tables`` out of the way, then put them back."""
    with engine.begin() as conn:
        saved = [_guards_off(conn, table) for table in tables]
        for sql, params in statements:
            conn.execute(text(sql), params)
        for table, triggers in zip(tables, saved, strict=True):
            _guards_on(conn, table, triggers)


def _guards_off(conn: Connection, table: str) -> list[tuple[str, str]]:
    if conn.dialect.name == "postgresql":
        conn.execute(text(f"ALTER TABLE {table} DISABLE TRIGGER USER"))
        return []
    rows = [(name, sql) for name, sql in conn.execute(text(
        "SELECT name, sql FROM sqlite_master WHERE type = 'trigger' AND tbl_name = :t"),
        {"t": table})]
    for name, _sql in rows:
        conn.execute(text(f"DROP TRIGGER {name}"))
    return rows


def _guards_on(conn: Connection, table: str, triggers: list[tuple[str, str]]) -> None:
    if conn.dialect.name == "postgresql":
        conn.execute(text(f"ALTER TABLE {table} ENABLE TRIGGER USER"))
    for _name, sql in triggers:
        conn.execute(text(sql))


def check():  # type: ignore[no-untyped-def]
    return CliRunner().invoke(main, ["db", "check"], catch_exceptions=False)


def test_a_sound_database_passes(seeded) -> None:  # type: ignore[no-untyped-def]
    result = check()
    assert result.exit_code == 0, result.output
    assert "3 certificates checked (2 valid): all agree" in result.output


def test_a_changed_reading_is_found_with_the_certificate_and_the_values(seeded) -> None:  # type: ignore[no-untyped-def]
    certified_amplitude, angle = RESIDUAL_GMM[0]
    tamper(seeded["engine"], ("run_reading",),
           ("UPDATE run_reading SET amplitude = 123.5 WHERE id = :i", {"i": seeded["reading"]}))
    result = check()
    assert result.exit_code == 1
    lines = [ln for ln in result.output.splitlines() if ln.startswith(seeded["number"])]
    assert lines == [
        f"{seeded['number']} revision 2: residual unbalance plane 1: certified "
        f"{certified_amplitude:g} g·mm at {angle:g}°, the stored evidence gives "
        f"123.5 g·mm at {angle:g}°"
    ]
    assert seeded["other"] not in result.output  # the other job's certificate is fine
    assert "1 do not agree" in result.output


def test_a_changed_correction_is_found(seeded) -> None:  # type: ignore[no-untyped-def]
    tamper(seeded["engine"], ("correction",),
           ("UPDATE correction SET mass_g = 31.5 WHERE id = :i", {"i": seeded["correction"]}))
    result = check()
    assert result.exit_code == 1
    assert (f"{seeded['number']} revision 2: correction 1: certified plane 1 add 30 g at radius "
            "300 mm, 210°, the stored evidence gives plane 1 add 31.5 g at radius 300 mm, "
            "210°") in result.output


def test_a_deleted_check_run_is_found(seeded) -> None:  # type: ignore[no-untyped-def]
    run = {"i": seeded["check_run"]}
    tamper(seeded["engine"], ("run", "run_reading"),
           ("DELETE FROM run_reading WHERE run_id = :i", run),
           ("DELETE FROM run WHERE id = :i", run))
    result = check()
    assert result.exit_code == 1
    assert (f"{seeded['number']} revision 2: the stored evidence no longer certifies the job: "
            in result.output)
    assert "has no check or final run" in result.output


def test_a_run_added_to_a_certified_job_is_found(seeded) -> None:  # type: ignore[no-untyped-def]
    """Inserting is not refused by the database; the check still sees the new last run."""
    engine = seeded["engine"]
    with engine.begin() as conn:
        conn.execute(text(
            "INSERT INTO run (job_id, seq, purpose, speed_rpm, earlier_trial_left_on, notes, "
            "taken_at) SELECT job_id, seq + 1, 'check', speed_rpm, earlier_trial_left_on, '', "
            "taken_at FROM run WHERE id = :i"), {"i": seeded["check_run"]})
        conn.execute(text(
            "INSERT INTO run_reading (run_id, plane, amplitude, angle_deg, unit) "
            "SELECT (SELECT max(id) FROM run), plane, amplitude, angle_deg, unit "
            "FROM run_reading WHERE run_id = :i"), {"i": seeded["check_run"]})
    result = check()
    assert result.exit_code == 1
    assert f"{seeded['number']} revision 2: judged run: certified 2, the stored evidence " \
           "gives 3" in result.output


def test_rewritten_certified_data_and_pdf_are_found_even_on_void_revisions(seeded) -> None:  # type: ignore[no-untyped-def]
    engine = seeded["engine"]
    with engine.connect() as conn:
        data_json = conn.execute(text("SELECT data_json FROM certificate WHERE id = :i"),
                                 {"i": seeded["rev1"]}).scalar_one()
    forged = data_json.replace('"passed":true', '"passed":false')
    assert forged != data_json
    tamper(engine, ("certificate",),
           ("UPDATE certificate SET data_json = :d WHERE id = :i",
            {"d": forged, "i": seeded["rev1"]}),
           ("UPDATE certificate SET pdf = :p WHERE id = :i",
            {"p": b"%PDF-1.4 not the certificate", "i": seeded["rev2"]}))
    result = check()
    assert result.exit_code == 1
    forged_hash = hashlib.sha256(forged.encode()).hexdigest()
    assert (f"{seeded['number']} revision 1: the certified data hashes to {forged_hash[:16]}…"
            in result.output)
    assert f"{seeded['number']} revision 2: the stored PDF hashes to" in result.output
    assert "2 do not agree" in result.output


def test_the_pdf_hash_is_of_the_signed_file_and_finds_a_stripped_signature(  # type: ignore[no-untyped-def]
        seeded, tmp_path) -> None:
    """Issue 15 keeps one rule for the PDF hash: ``pdf_sha256`` is the SHA-256 of the stored
    (signed) bytes, not of the unsigned rendering they start with; the check hashes what is
    stored. A certificate whose file was swapped for its unsigned rendering (the signature
    stripped) no longer agrees."""
    engine = seeded["engine"]
    with Session(engine) as db:
        from shopapp.models import Certificate

        known = signing.known_certificates(signing.signing_folder(tmp_path))
        for cert in db.query(Certificate):
            unsigned = certificates.rerender(cert)
            assert pdfsign.inspect(cert.pdf, known).proven  # signed, intact, data attached
            assert cert.pdf.startswith(unsigned) and len(cert.pdf) > len(unsigned)
            assert cert.pdf_sha256 == hashlib.sha256(cert.pdf).hexdigest()
            assert cert.pdf_sha256 != hashlib.sha256(unsigned).hexdigest()
            if cert.id == seeded["rev2"]:
                stripped = unsigned
    tamper(engine, ("certificate",),
           ("UPDATE certificate SET pdf = :p WHERE id = :i",
            {"p": stripped, "i": seeded["rev2"]}))
    result = check()
    assert result.exit_code == 1
    stripped_hash = hashlib.sha256(stripped).hexdigest()
    assert (f"{seeded['number']} revision 2: the stored PDF hashes to {stripped_hash[:16]}…"
            in result.output)
    assert "1 do not agree" in result.output


def test_reopened_and_reworked_jobs_still_pass(seeded) -> None:  # type: ignore[no-untyped-def]
    """Rework through the application voids the certificate first: nothing to report."""
    engine = seeded["engine"]
    with Session(engine) as db:
        from shopapp.models import Job, User

        job = db.get(Job, seeded["job"])
        operator = db.query(User).filter_by(username="ola").one()
        jobs.reopen(db, job, by=operator, reason="customer reports vibration")
        db.execute(text("UPDATE run_reading SET amplitude = 123.5 WHERE id = :i"),
                   {"i": seeded["reading"]})
        db.commit()
    result = check()
    assert result.exit_code == 0, result.output
    assert "3 certificates checked (1 valid): all agree" in result.output


def _details_as_issued_before(c, show):  # type: ignore[no-untyped-def]
    """The split as certificates printed it before the job page's figures: 0.1 g."""
    from shopapp.core.display import fixed, quantity
    items = [f"{fixed(float(p['mass_g']), 1)} g at position {p['position']} "
             f"({quantity(show.angle(float(p['angle_deg'])), '°')})" for p in c.split or []]
    return "split: " + ", ".join(items) if items else ""


def test_an_old_format_split_still_verifies_and_a_changed_split_mass_is_found(  # type: ignore[no-untyped-def]
        fresh_database_url, tmp_path, monkeypatch) -> None:
    from shopapp.models import Certificate
    from shopapp.reports.certificate import CertificateData
    engine = make_engine(fresh_database_url)
    Base.metadata.create_all(engine)
    monkeypatch.setenv("SHOPAPP_DATABASE_URL", fresh_database_url)
    monkeypatch.setenv("SHOPAPP_INSTANCE_PATH", str(tmp_path))
    try:
        with Session(engine) as db:
            operator = factories.user(db, username="ola", role="operator", password="long-enough-1")
            quality = factories.user(db, username="quinn", role="quality",
                                     password="long-enough-1")
            shop = factories.ShopFactory(db)
            # 4.26 g prints 4.3 g at 0.1 g and 4.26 g at three figures. By hand, 4.26 g at
            # 0° and 19.04 g at 45° add up to 22.3 g at 37.2°: the correction they make up.
            made_up = (22.3, 37.2)
            old_job = job_ready_for_certificate(db, shop, operator, split_2_g=(4.26, 19.04),
                                                plane_2=made_up)
            with monkeypatch.context() as m:
                m.setattr(certificates, "_correction_details", _details_as_issued_before)
                old = certificates.issue(db, old_job, by=quality)
            new = certificates.issue(db, job_ready_for_certificate(db, shop, operator,
                                                                   split_2_g=(4.26, 19.04),
                                                                   plane_2=made_up),
                                     by=quality)
            split_id = db.query(Correction).filter_by(job_id=old_job.id, plane=2).one().id
            details = {c.number: CertificateData.from_json(c.data_json).corrections[1].details
                       for c in db.query(Certificate)}
            old_number, new_number = old.number, new.number
            db.commit()
        assert details[old_number].startswith("split: 4.3 g at position 1")
        assert details[new_number].startswith("split: 4.26 g at position 1")  # job page's figures
        result = check()
        assert result.exit_code == 0, result.output
        # A real change of a split mass is still found on the old certificate.
        split = ('[{"position": 1, "angle_deg": 0.0, "mass_g": 4.46}, '
                 '{"position": 2, "angle_deg": 45.0, "mass_g": 19.04}]')
        cast = "CAST(:s AS JSON)" if engine.dialect.name == "postgresql" else ":s"
        tamper(engine, ("correction",),
               (f"UPDATE correction SET split = {cast} WHERE id = :i", {"s": split, "i": split_id}))
        result = check()
        assert result.exit_code == 1
        assert f"{old_number} revision 1: correction 2: certified" in result.output
        assert "4.46 g at position 1" in result.output
    finally:
        Base.metadata.drop_all(engine)
        engine.dispose()


@pytest.mark.parametrize(("certified", "derived", "same"), [
    # Rounding by hand: 4.26 to 0.1 is 4.3; to three figures 4.26.
    ("split: 4.3 g at position 1 (0°)", "split: 4.26 g at position 1 (0°)", True),
    ("split: 4.2 g at position 1 (0°)", "split: 4.25 g at position 1 (0°)", True),
    ("split: 4.3 g at position 1 (0°)", "split: 4.46 g at position 1 (0°)", False),
    ("split: 4.3 g at position 1 (0°)", "split: 4.3 g at position 2 (45°)", False),
    ("split: 4.3 g at position 1 (0°)", "split: 4.3 g at position 1 (0°), 2.0 g at "
     "position 2 (45°)", False),
    ("drilled 2 holes Ø8 mm, depth 3.2 mm", "drilled 2 holes Ø8 mm, depth 3.2 mm", True),
    ("drilled 2 holes Ø8 mm, depth 3.2 mm", "drilled 3 holes Ø8 mm, depth 3.2 mm", False),
])
def test_details_are_compared_number_by_number_to_the_printed_precision(
        certified: str, derived: str, same: bool) -> None:
    from shopapp.certificates.integrity import same_printed_numbers
    assert same_printed_numbers(certified, derived) is same


def _judged_at(seeded):  # type: ignore[no-untyped-def]
    with Session(seeded["engine"]) as db:
        return db.get(Run, seeded["check_run"]).taken_at.astimezone(dt.UTC)


def test_a_certificate_stays_sound_when_the_shop_sets_its_time_zone_later(seeded, monkeypatch  # type: ignore[no-untyped-def]
                                                                          ) -> None:
    # Issued while the shop's days were UTC days. A zone where the judged run falls on
    # another calendar day (IANA tz database: Kiritimati is UTC+14, Etc/GMT+12 is UTC−12)
    # changes the day the evidence gives, not the evidence.
    taken = _judged_at(seeded)
    zone = "Pacific/Kiritimati" if taken.hour >= 10 else "Etc/GMT+12"
    monkeypatch.setenv("SHOPAPP_TIME_ZONE", zone)
    result = check()
    assert result.exit_code == 0, result.output
    assert "all agree" in result.output
    clock.set_shop_zone(None)


def test_a_judged_run_moved_by_two_days_is_still_found(seeded) -> None:  # type: ignore[no-untyped-def]
    moved = _judged_at(seeded) + dt.timedelta(days=2)
    tamper(seeded["engine"], ("run",),
           ("UPDATE run SET taken_at = :t WHERE id = :id",
            {"t": moved, "id": seeded["check_run"]}))
    result = check()
    assert result.exit_code == 1, result.output
    assert "balanced on" in result.output


def test_a_day_is_the_day_of_a_moment_somewhere_only_within_the_world_s_offsets() -> None:
    # UTC−12 to UTC+14 (IANA tz database): 2026-12-04 00:00 at UTC+14 is 12-03 10:00 UTC,
    # 2026-12-05 00:00 at UTC−12 is 12-05 12:00 UTC.
    day = "2026-12-04"
    assert integrity.day_of_moment_somewhere(day, dt.datetime(2026, 12, 3, 10, 0, tzinfo=dt.UTC))
    assert not integrity.day_of_moment_somewhere(day, dt.datetime(2026, 12, 3, 9, 59,
                                                                  tzinfo=dt.UTC))
    assert integrity.day_of_moment_somewhere(day, dt.datetime(2026, 12, 5, 11, 59,
                                                              tzinfo=dt.UTC))
    assert not integrity.day_of_moment_somewhere(day, dt.datetime(2026, 12, 5, 12, 0,
                                                                  tzinfo=dt.UTC))
    assert not integrity.day_of_moment_somewhere("not a day", dt.datetime.now(dt.UTC))

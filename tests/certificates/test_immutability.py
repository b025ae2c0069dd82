"""Issued certificates, and the evidence of a certified job, are unalterable in the database.

Every test goes around the application: raw SQL, as a person with a database
client would type it. The refusals come from the database's own triggers
(migration 0003; the same SQL is attached to the models for ``create_all``).
"""

from __future__ import annotations

import hashlib
import sqlite3

import pytest
from sqlalchemy import text
from sqlalchemy.engine import make_url
from sqlalchemy.exc import DBAPIError

from shopapp.certificates import issue as certificates
from shopapp.core import schema
from shopapp.jobs import states as jobs
from shopapp.models import Certificate, Correction, Run, RunReading
from tests.reports.samples import job_ready_for_certificate

IMMUTABLE = "immutable"
EVIDENCE = "certified job"


@pytest.fixture()
def people(make_user):  # type: ignore[no-untyped-def]
    return make_user("operator", full_name="Ola Operator"), make_user("quality",
                                                                       full_name="Quinn Quality")


@pytest.fixture()
def cert(db, shop, people) -> Certificate:  # type: ignore[no-untyped-def]
    operator, quality = people
    job = job_ready_for_certificate(db, shop, operator)
    issued = certificates.issue(db, job, by=quality)
    db.flush()
    return issued


def _refused(db, sql: str, match: str, **params) -> None:  # type: ignore[no-untyped-def]
    with pytest.raises(DBAPIError, match=match):
        db.execute(text(sql), params)
    db.rollback()


def _row(db, cert_id: int) -> tuple:  # type: ignore[no-untyped-def]
    return tuple(db.execute(text("SELECT * FROM certificate WHERE id = :i"), {"i": cert_id}).one())


# --- the certificate row ---------------------------------------------------------------


@pytest.mark.parametrize("column, value", [("void_reason", "'rewritten'"),
                                           ("voided_by_id", "issued_by_id")])
def test_void_columns_of_an_issued_certificate_change_only_when_it_is_voided(
        db, cert, column, value) -> None:  # type: ignore[no-untyped-def]
    before = _row(db, cert.id)
    db.commit()
    _refused(db, f"UPDATE certificate SET {column} = {value} WHERE id = :i", IMMUTABLE, i=cert.id)
    assert _row(db, cert.id) == before


def test_the_id_of_a_certificate_never_changes(db, cert) -> None:  # type: ignore[no-untyped-def]
    db.commit()
    _refused(db, "UPDATE certificate SET id = id + 1000 WHERE id = :i", IMMUTABLE, i=cert.id)


@pytest.mark.parametrize("column, value", [("void_reason", "'a nicer reason'"),
                                           ("voided_by_id", "issued_by_id"),
                                           ("voided_at", "issued_at"),
                                           ("state", "'issued'")])
def test_a_void_certificate_never_changes_again(db, cert, people, column, value) -> None:  # type: ignore[no-untyped-def]
    _operator, quality = people
    certificates.void(db, cert, by=quality, reason="wrong customer order")
    db.commit()
    before = _row(db, cert.id)
    _refused(db, f"UPDATE certificate SET {column} = {value} WHERE id = :i", IMMUTABLE, i=cert.id)
    assert _row(db, cert.id) == before


def test_voiding_changes_nothing_but_the_void_columns(db, cert) -> None:  # type: ignore[no-untyped-def]
    db.commit()
    _refused(db, "UPDATE certificate SET state = 'void', voided_at = issued_at, "
                 "void_reason = 'typo', reason = 'rewritten' WHERE id = :i", IMMUTABLE, i=cert.id)
    # The allowed transition itself still works through raw SQL (the app's own void).
    db.execute(text("UPDATE certificate SET state = 'void', voided_at = issued_at, "
                    "void_reason = 'typo' WHERE id = :i"), {"i": cert.id})
    db.rollback()


def test_insert_or_replace_cannot_replace_an_issued_certificate(db, cert, backend) -> None:  # type: ignore[no-untyped-def]
    if backend != "sqlite":
        pytest.skip("INSERT OR REPLACE is SQLite's")
    before = _row(db, cert.id)
    db.commit()
    forged = hashlib.sha256(b"forged").hexdigest()
    columns = ("number, revision, job_id, state, issued_by_id, issued_at, reason, void_reason, "
               "pdf, pdf_sha256, data_json, data_sha256")
    # Same id; then a new id with the same number and revision; then the same PDF hash.
    for id_expr, sha in (("id", forged), ("NULL", forged), ("NULL", "pdf_sha256")):
        _refused(
            db,
            f"INSERT OR REPLACE INTO certificate (id, {columns}) SELECT {id_expr}, number, "
            f"revision, job_id, 'issued', issued_by_id, issued_at, 'forged', '', X'00', "
            f"{'pdf_sha256' if sha == 'pdf_sha256' else ':sha'}, '{{}}', :sha "
            "FROM certificate WHERE id = :i",
            "never deleted|never replaced", i=cert.id, sha=forged,
        )
    assert _row(db, cert.id) == before
    assert db.execute(text("SELECT count(*) FROM certificate")).scalar() == 1


def test_sqlite_connections_fire_delete_triggers_on_replace(engine, backend) -> None:  # type: ignore[no-untyped-def]
    if backend != "sqlite":
        pytest.skip("an SQLite pragma")
    with engine.connect() as conn:
        assert conn.execute(text("PRAGMA recursive_triggers")).scalar() == 1


def test_replace_is_refused_even_without_the_pragma(fresh_database_url, backend) -> None:  # type: ignore[no-untyped-def]
    """A plain ``sqlite3`` client (no shopapp pragmas) cannot replace a certificate either."""
    if backend != "sqlite":
        pytest.skip("INSERT OR REPLACE is SQLite's")
    schema.upgrade(fresh_database_url, "head")
    path = make_url(fresh_database_url).database
    con = sqlite3.connect(path, isolation_level=None)
    try:
        cols = {r[1] for r in con.execute("PRAGMA table_info(certificate)")}
        assert "pdf_sha256" in cols
        # Foreign keys are off in a plain client (its default): no job or user is needed.
        row = ("BC-2026-00001", 1, 1, "issued", 1, "2026-01-01 00:00:00", "", "", b"%PDF",
               "a" * 64, "{}", "b" * 64, "AAAAAAAAAA")
        sql = ("INSERT {verb} INTO certificate (number, revision, job_id, state, issued_by_id, "
               "issued_at, reason, void_reason, pdf, pdf_sha256, data_json, data_sha256, "
               "verification_code) VALUES (?,?,?,?,?,?,?,?,?,?,?,?,?)")
        con.execute(sql.format(verb=""), row)
        assert con.execute("PRAGMA recursive_triggers").fetchone()[0] == 0
        forged = (*row[:6], "forged", "", b"%PDF", "c" * 64, "{}", "d" * 64, "BBBBBBBBBB")
        with pytest.raises(sqlite3.IntegrityError, match="never replaced"):
            con.execute(sql.format(verb="OR REPLACE"), forged)
        assert con.execute("SELECT reason FROM certificate").fetchall() == [("",)]
    finally:
        con.close()


def test_truncate_certificate_is_refused(db, cert, backend) -> None:  # type: ignore[no-untyped-def]
    if backend != "postgresql":
        pytest.skip("TRUNCATE is PostgreSQL's")
    db.commit()
    _refused(db, "TRUNCATE certificate", "never deleted")
    _refused(db, "TRUNCATE job CASCADE", "never deleted|certified job")
    assert db.execute(text("SELECT count(*) FROM certificate")).scalar() == 1


# --- the evidence of a certified job ----------------------------------------------------


def _evidence_ids(db, cert) -> dict[str, int]:  # type: ignore[no-untyped-def]
    run = db.query(Run).filter_by(job_id=cert.job_id, purpose="check").one()
    reading = db.query(RunReading).filter_by(run_id=run.id, plane=1).one()
    correction = db.query(Correction).filter_by(job_id=cert.job_id).first()
    return {"run": run.id, "run_reading": reading.id, "correction": correction.id}


EVIDENCE_CHANGES = [
    ("run", "UPDATE run SET speed_rpm = speed_rpm + 1 WHERE id = :i"),
    ("run", "UPDATE run SET within_tolerance = NULL WHERE id = :i"),
    ("run", "DELETE FROM run WHERE id = :i"),
    ("run_reading", "UPDATE run_reading SET amplitude = amplitude / 2 WHERE id = :i"),
    ("run_reading", "DELETE FROM run_reading WHERE id = :i"),
    ("correction", "UPDATE correction SET mass_g = mass_g + 5 WHERE id = :i"),
    ("correction", "DELETE FROM correction WHERE id = :i"),
]


@pytest.mark.parametrize("table, sql", EVIDENCE_CHANGES)
def test_evidence_of_a_certified_job_cannot_be_changed(db, cert, table, sql) -> None:  # type: ignore[no-untyped-def]
    ids = _evidence_ids(db, cert)
    db.commit()
    _refused(db, sql, EVIDENCE, i=ids[table])
    assert db.execute(text(f"SELECT count(*) FROM {table} WHERE id = :i"),
                      {"i": ids[table]}).scalar() == 1


def test_evidence_cannot_be_moved_onto_a_certified_job(db, shop, cert, people) -> None:  # type: ignore[no-untyped-def]
    operator, _quality = people
    other = job_ready_for_certificate(db, shop, operator, mark=False)
    run = db.query(Run).filter_by(job_id=other.id, purpose="check").one()
    db.commit()
    _refused(db, "UPDATE run SET job_id = :j, seq = 99 WHERE id = :i", EVIDENCE,
             j=cert.job_id, i=run.id)


def test_reopening_voids_the_certificate_and_frees_the_evidence(db, cert, people) -> None:  # type: ignore[no-untyped-def]
    operator, _quality = people
    ids = _evidence_ids(db, cert)
    jobs.reopen(db, cert.job, by=operator, reason="customer reports vibration")
    db.flush()
    assert cert.state == "void"
    db.execute(text("UPDATE run_reading SET amplitude = amplitude WHERE id = :i"),
               {"i": ids["run_reading"]})
    db.execute(text("DELETE FROM correction WHERE id = :i"), {"i": ids["correction"]})


def test_other_jobs_evidence_stays_editable(db, shop, cert, people) -> None:  # type: ignore[no-untyped-def]
    operator, _quality = people
    other = job_ready_for_certificate(db, shop, operator, mark=False)
    run = db.query(Run).filter_by(job_id=other.id, purpose="check").one()
    db.execute(text("UPDATE run SET notes = 'checked twice' WHERE id = :i"), {"i": run.id})
    db.execute(text("DELETE FROM run_reading WHERE run_id = :i"), {"i": run.id})


def test_truncate_of_evidence_is_refused_while_a_certificate_is_valid(db, cert, backend) -> None:  # type: ignore[no-untyped-def]
    if backend != "postgresql":
        pytest.skip("TRUNCATE is PostgreSQL's")
    db.commit()
    _refused(db, "TRUNCATE run_reading", EVIDENCE)
    _refused(db, "TRUNCATE correction", EVIDENCE)

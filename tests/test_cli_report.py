"""``shopapp report certificate | verify | rotor-history`` through click's runner.

The fresh database is built with ``Base.metadata.create_all`` rather than the
migrations: during this work the models are ahead of migration 0001 (the lead
regenerates it), and these tests are about the commands, not the migrations.
"""

from __future__ import annotations

import hashlib
import io

import pypdf
import pytest
from click.testing import CliRunner
from sqlalchemy.orm import Session

from shopapp.certificates import issue as certificates
from shopapp.cli import main
from shopapp.core.database import make_engine
from shopapp.models import Base
from tests import factories
from tests.reports.samples import job_ready_for_certificate


@pytest.fixture()
def seeded(fresh_database_url, tmp_path, monkeypatch):  # type: ignore[no-untyped-def]
    """A fresh database with one reissued certificate (rev 1 void, rev 2 valid)."""
    engine = make_engine(fresh_database_url)
    Base.metadata.create_all(engine)
    with Session(engine) as db:
        operator = factories.user(db, username="ola", role="operator", password="long-enough-1")
        quality = factories.user(db, username="quinn", role="quality", password="long-enough-1")
        shop = factories.ShopFactory(db)
        job = job_ready_for_certificate(db, shop, operator)
        first = certificates.issue(db, job, by=quality)
        second = certificates.reissue(db, first, by=quality, reason="order reference corrected")
        out = {"number": first.number, "serial": job.rotor.serial_number,
               "customer": job.customer.name, "rev1": first.pdf, "rev2": second.pdf,
               "job": job.id}
        db.commit()
    engine.dispose()
    monkeypatch.setenv("SHOPAPP_DATABASE_URL", fresh_database_url)
    monkeypatch.setenv("SHOPAPP_INSTANCE_PATH", str(tmp_path))
    yield out
    engine = make_engine(fresh_database_url)
    Base.metadata.drop_all(engine)
    engine.dispose()


def run(*args: str):  # type: ignore[no-untyped-def]
    return CliRunner().invoke(main, list(args), catch_exceptions=False)


def test_report_help_lists_the_commands() -> None:
    out = run("report", "--help").output
    for name in ("certificate", "verify", "rotor-history"):
        assert name in out


def test_certificate_writes_the_stored_pdf(seeded, tmp_path) -> None:  # type: ignore[no-untyped-def]
    latest = tmp_path / "latest.pdf"
    result = run("report", "certificate", seeded["number"], "--output", str(latest))
    assert result.exit_code == 0, result.output
    assert latest.read_bytes() == seeded["rev2"]
    assert "revision 2, valid" in result.output
    old = tmp_path / "old.pdf"
    result = run("report", "certificate", seeded["number"], "--revision", "1", "-o", str(old))
    assert result.exit_code == 0 and old.read_bytes() == seeded["rev1"]
    assert "void (superseded by revision 2)" in result.output
    text = pypdf.PdfReader(io.BytesIO(old.read_bytes())).pages[0].extract_text()
    assert seeded["number"] in text and seeded["serial"] in text


def test_unknown_certificate_is_one_line(seeded, tmp_path) -> None:  # type: ignore[no-untyped-def]
    result = run("report", "certificate", "BC-1999-00001", "-o", str(tmp_path / "x.pdf"))
    assert result.exit_code == 1
    assert "no certificate BC-1999-00001" in result.output
    assert not (tmp_path / "x.pdf").exists()


def test_verify_valid_superseded_and_unknown(seeded, tmp_path) -> None:  # type: ignore[no-untyped-def]
    good = tmp_path / "good.pdf"
    good.write_bytes(seeded["rev2"])
    result = run("report", "verify", str(good))
    assert result.exit_code == 0, result.output
    assert result.output.startswith("valid:")
    assert f"file sha256: {hashlib.sha256(seeded['rev2']).hexdigest()}" in result.output
    old = tmp_path / "old.pdf"
    old.write_bytes(seeded["rev1"])
    result = run("report", "verify", str(old))
    assert result.exit_code == 1 and result.output.startswith("superseded:")
    changed = tmp_path / "changed.pdf"
    changed.write_bytes(seeded["rev2"].replace(b"/Producer", b"/Producer ", 1))
    result = run("report", "verify", str(changed))
    assert result.exit_code == 1 and result.output.startswith("unknown:")
    assert "its bytes differ from the stored certificate" in result.output


def test_rotor_history_pdf(seeded, tmp_path) -> None:  # type: ignore[no-untyped-def]
    out = tmp_path / "history.pdf"
    result = run("report", "rotor-history", seeded["serial"], "--customer",
                 seeded["customer"].upper(), "--output", str(out))
    assert result.exit_code == 0, result.output
    assert "1 visit of serial" in result.output
    text = "\n".join(p.extract_text() for p in pypdf.PdfReader(str(out)).pages)
    assert seeded["serial"] in text and seeded["number"] in text
    missing = run("report", "rotor-history", "NO-SUCH", "-o", str(tmp_path / "n.pdf"))
    assert missing.exit_code == 1 and "no rotor with serial 'NO-SUCH'" in missing.output


# --- issue 15: signed certificates checked offline -------------------------------------


@pytest.fixture()
def signed(fresh_database_url, tmp_path, monkeypatch):  # type: ignore[no-untyped-def]
    """A fresh database with one signed certificate and one issued before signing; the
    instance folder holds the shop's signing key."""
    from shopapp.certificates import signing
    from tests.certificates.signed import issue_before_signing

    instance = tmp_path / "instance"
    engine = make_engine(fresh_database_url)
    Base.metadata.create_all(engine)
    with Session(engine) as db:
        operator = factories.user(db, username="ola", role="operator", password="long-enough-1")
        quality = factories.user(db, username="quinn", role="quality", password="long-enough-1")
        shop = factories.ShopFactory(db)
        job = job_ready_for_certificate(db, shop, operator)
        cert = certificates.issue(db, job, by=quality,
                                  signing_dir=signing.signing_folder(instance),
                                  base_url="https://balancing.example.test")
        db.commit()
        old = issue_before_signing(db, shop, operator, quality)
        out = {"signed": cert.pdf, "old": old.pdf, "number": cert.number,
               "hash": cert.data_sha256}
    engine.dispose()
    monkeypatch.setenv("SHOPAPP_DATABASE_URL", fresh_database_url)
    monkeypatch.setenv("SHOPAPP_INSTANCE_PATH", str(instance))
    yield out
    engine = make_engine(fresh_database_url)
    Base.metadata.drop_all(engine)
    engine.dispose()


def test_verify_offline_says_signed_by_the_shop_and_intact(signed, tmp_path) -> None:  # type: ignore[no-untyped-def]
    good = tmp_path / "good.pdf"
    good.write_bytes(signed["signed"])
    result = run("report", "verify", "--offline", str(good))
    assert result.exit_code == 0, result.output
    lines = result.output.splitlines()
    assert lines[0].startswith("signature: signed by CN=Balancing shop balance certificates")
    assert ", intact" in lines[0]
    assert "signer: the shop's current signing key" in result.output
    assert f"certificate-data.json matches the printed content hash {signed['hash']}" \
        in result.output
    assert "register: not consulted (offline)" in result.output


def test_verify_with_the_database_adds_the_register(signed, tmp_path) -> None:  # type: ignore[no-untyped-def]
    good = tmp_path / "good.pdf"
    good.write_bytes(signed["signed"])
    result = run("report", "verify", str(good))
    assert result.exit_code == 0, result.output
    assert result.output.startswith(f"valid: {signed['number']} revision 1 is valid.")
    assert ", intact" in result.output


def test_verify_without_a_database_checks_the_file_alone(signed, tmp_path, monkeypatch) -> None:  # type: ignore[no-untyped-def]
    monkeypatch.setenv("SHOPAPP_DATABASE_URL", f"sqlite:///{tmp_path / 'nowhere.sqlite3'}")
    good = tmp_path / "good.pdf"
    good.write_bytes(signed["signed"])
    result = run("report", "verify", str(good))
    assert result.exit_code == 0, result.output
    assert "register: not consulted (no database at" in result.output
    assert not (tmp_path / "nowhere.sqlite3").exists()  # nothing created on the way


def test_one_flipped_byte_fails_report_verify(signed, tmp_path) -> None:  # type: ignore[no-untyped-def]
    from tests.certificates.signed import flip_byte_in_title

    bad = tmp_path / "bad.pdf"
    bad.write_bytes(flip_byte_in_title(signed["signed"]))
    for args in (["--offline"], []):
        result = run("report", "verify", *args, str(bad))
        assert result.exit_code == 1, result.output
        assert "NOT intact" in result.output


def test_a_certificate_from_before_signing(signed, tmp_path) -> None:  # type: ignore[no-untyped-def]
    old = tmp_path / "old.pdf"
    old.write_bytes(signed["old"])
    result = run("report", "verify", str(old))
    assert result.exit_code == 0, result.output
    assert result.output.startswith("valid:")
    assert "issued before signing was introduced" in result.output
    offline = run("report", "verify", "--offline", str(old))
    assert offline.exit_code == 1  # nothing in the file itself proves it
    assert "issued before signing was introduced" in offline.output

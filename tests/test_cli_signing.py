"""``shopapp signing show|import|rotate`` through click's runner (issue 15)."""

from __future__ import annotations

import datetime as dt
import os
import stat

import pytest
from click.testing import CliRunner
from cryptography import x509
from cryptography.hazmat.primitives import hashes
from cryptography.hazmat.primitives.asymmetric import ec
from cryptography.hazmat.primitives.serialization import BestAvailableEncryption, pkcs12
from cryptography.x509.oid import NameOID
from sqlalchemy import select
from sqlalchemy.orm import Session

from shopapp.certificates import signing
from shopapp.cli import main
from shopapp.core.database import make_engine
from shopapp.models import AuditEvent, Base


@pytest.fixture()
def instance(fresh_database_url, tmp_path, monkeypatch):  # type: ignore[no-untyped-def]
    engine = make_engine(fresh_database_url)
    Base.metadata.create_all(engine)
    engine.dispose()
    monkeypatch.setenv("SHOPAPP_DATABASE_URL", fresh_database_url)
    monkeypatch.setenv("SHOPAPP_INSTANCE_PATH", str(tmp_path))
    yield tmp_path
    engine = make_engine(fresh_database_url)
    Base.metadata.drop_all(engine)
    engine.dispose()


def run(*args: str, stdin: str | None = None):  # type: ignore[no-untyped-def]
    return CliRunner().invoke(main, list(args), input=stdin, catch_exceptions=False)


def _audit(url: str) -> list[tuple[str, dict | None]]:
    engine = make_engine(url)
    try:
        with Session(engine) as db:
            return [(e.action, e.after) for e in db.scalars(
                select(AuditEvent).where(AuditEvent.entity == "signing_key")
                .order_by(AuditEvent.id))]
    finally:
        engine.dispose()


def test_show_before_any_key(instance) -> None:  # type: ignore[no-untyped-def]
    result = run("signing", "show")
    assert result.exit_code == 0, result.output
    assert "no signing key yet" in result.output


def test_rotate_then_show_then_rotate_again(instance, fresh_database_url) -> None:  # type: ignore[no-untyped-def]
    first = run("signing", "rotate", "--yes")
    assert first.exit_code == 0, first.output
    key = signing.current_key(signing.signing_folder(instance))
    assert key is not None and "Balancing shop" in key.info.subject
    path = signing.signing_folder(instance) / signing.SIGNER_FILE
    assert stat.S_IMODE(os.stat(path).st_mode) == 0o600
    shown = run("signing", "show", "--pem")
    assert key.info.fingerprint_groups in shown.output
    assert "-----BEGIN CERTIFICATE-----" in shown.output and "PRIVATE" not in shown.output
    second = run("signing", "rotate", "--yes", "--shop-name", "Northgate Rotor Works")
    assert second.exit_code == 0, second.output
    assert f"retired (still accepted): {key.info.subject}" in second.output
    shown = run("signing", "show")
    assert "Northgate Rotor Works" in shown.output.split("retired")[0]
    assert key.info.fingerprint_groups in shown.output.split("retired")[1]
    assert [a for a, _ in _audit(fresh_database_url)] == ["rotate", "rotate"]


def test_rotate_asks_first(instance) -> None:  # type: ignore[no-untyped-def]
    result = CliRunner().invoke(main, ["signing", "rotate"], input="n\n")
    assert result.exit_code == 1
    assert signing.current_key(signing.signing_folder(instance)) is None


def _p12(tmp_path, password: bytes):  # type: ignore[no-untyped-def]
    key = ec.generate_private_key(ec.SECP256R1())
    name = x509.Name([x509.NameAttribute(NameOID.COMMON_NAME, "Northgate own key")])
    now = dt.datetime.now(dt.UTC)
    cert = (x509.CertificateBuilder().subject_name(name).issuer_name(name)
            .public_key(key.public_key()).serial_number(1)
            .not_valid_before(now - dt.timedelta(days=1))
            .not_valid_after(now + dt.timedelta(days=300)).sign(key, hashes.SHA256()))
    path = tmp_path / "shop.p12"
    path.write_bytes(pkcs12.serialize_key_and_certificates(
        b"shop", key, cert, None, BestAvailableEncryption(password)))
    return path


def test_import_with_the_password_on_stdin(instance, tmp_path, fresh_database_url) -> None:  # type: ignore[no-untyped-def]
    path = _p12(tmp_path, b"pass-word-1")
    result = run("signing", "import", str(path), "--password-stdin", stdin="pass-word-1\n")
    assert result.exit_code == 0, result.output
    assert "CN=Northgate own key" in result.output and "imported" in result.output
    assert _audit(fresh_database_url)[0][0] == "import"
    wrong = run("signing", "import", str(path), "--password-stdin", stdin="nope\n")
    assert wrong.exit_code == 1
    assert "password: the password is wrong" in wrong.output

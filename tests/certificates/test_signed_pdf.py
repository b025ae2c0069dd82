"""Issue 15: every issued certificate PDF is signed (PAdES B-B) and carries its data.

Checked against readers outside the code under test: pyHanko's own validator
(``pyhanko.sign.validation.validate_pdf_signature``), an independent check with
pikepdf + asn1crypto + cryptography (``tests/certificates/signed.py``), pypdf for
the embedded file, and Debian's ``pdfsig`` (poppler-utils) when installed.
"""

from __future__ import annotations

import hashlib
import io
import json
import os
import shutil
import stat
import subprocess

import pypdf
import pytest
from pyhanko.pdf_utils.reader import PdfFileReader
from pyhanko.sign.validation import validate_pdf_signature
from pyhanko.sign.validation.status import SignatureCoverageLevel
from pyhanko_certvalidator import ValidationContext

from shopapp.certificates import issue as certificates
from shopapp.certificates import pdfsign, register, signing
from shopapp.models import AuditEvent
from shopapp.reports import certificate as report
from tests.certificates.signed import (
    BASE,
    flip_byte_in_title,
    independent_check,
    issue_before_signing,
    issue_signed,
    signing_dir,
)


@pytest.fixture()
def people(make_user):  # type: ignore[no-untyped-def]
    return (make_user("operator", full_name="Ola Operator"),
            make_user("quality", full_name="Quinn Quality"))


@pytest.fixture()
def cert(app, db, shop, people):  # type: ignore[no-untyped-def]
    return issue_signed(app, db, shop, *people)


def _pyhanko(pdf: bytes):  # type: ignore[no-untyped-def]
    sig = PdfFileReader(io.BytesIO(pdf), strict=False).embedded_signatures[0]
    return validate_pdf_signature(sig, ValidationContext(trust_roots=[sig.signer_cert]))


def test_the_stored_pdf_validates_with_pyhankos_validator(app, cert) -> None:
    status = _pyhanko(cert.pdf)
    assert status.intact and status.valid
    assert status.coverage == SignatureCoverageLevel.ENTIRE_FILE
    key = signing.current_key(signing_dir(app))
    assert key is not None
    assert status.signing_cert.dump() == key.info.der  # signed with the instance's key
    assert cert.pdf_sha256 == hashlib.sha256(cert.pdf).hexdigest()  # hash of signed bytes


def test_the_stored_pdf_validates_independently_of_pyhanko(app, cert) -> None:
    check = independent_check(cert.pdf)
    assert check.covers_whole_file and check.digest_matches and check.signature_verifies
    assert "balance certificates" in check.signer_subject


def test_one_flipped_byte_fails_both_checks_and_inspect(app, cert) -> None:
    changed = flip_byte_in_title(cert.pdf)
    assert len(changed) == len(cert.pdf) and changed != cert.pdf
    status = _pyhanko(changed)
    assert not status.intact
    check = independent_check(changed)
    assert not check.digest_matches
    proof = pdfsign.inspect(changed, signing.known_certificates(signing_dir(app)))
    assert not proof.proven and "NOT intact" in proof.signature_line()


@pytest.mark.skipif(shutil.which("pdfsig") is None, reason="pdfsig (poppler-utils) not installed")
def test_poppler_pdfsig_reads_a_valid_signature(cert, tmp_path) -> None:
    good = tmp_path / "good.pdf"
    good.write_bytes(cert.pdf)
    out = subprocess.run(["pdfsig", str(good)], capture_output=True, text=True, check=False)
    assert "Signature Validation: Signature is Valid." in out.stdout, out.stdout
    assert "Total document signed" in out.stdout
    bad = tmp_path / "bad.pdf"
    bad.write_bytes(flip_byte_in_title(cert.pdf))
    out = subprocess.run(["pdfsig", str(bad)], capture_output=True, text=True, check=False)
    assert "Signature is Valid." not in out.stdout


def test_the_embedded_json_is_the_certified_data(cert) -> None:
    reader = pypdf.PdfReader(io.BytesIO(cert.pdf))
    files = reader.attachments
    assert list(files) == ["certificate-data.json"]
    embedded = files["certificate-data.json"][0]
    assert hashlib.sha256(embedded).hexdigest() == cert.data_sha256
    assert embedded.decode("utf-8") == cert.data_json
    data = json.loads(embedded)
    assert data["verification_code"] == cert.verification_code
    assert data["verify_url"] == f"{BASE}/verify?n={cert.number}&c={cert.verification_code}"
    text = "".join(p.extract_text() for p in reader.pages).replace("\n", "")
    assert cert.data_sha256 in text  # the hash the page prints


def test_the_signed_file_starts_with_the_reproducible_rendering(cert) -> None:
    unsigned = certificates.rerender(cert)
    assert certificates.rerender(cert) == unsigned
    assert cert.pdf[:len(unsigned)] == unsigned
    # What follows is one incremental update, and the signature covers the whole file.
    reader = PdfFileReader(io.BytesIO(cert.pdf), strict=False)
    assert reader.xrefs.total_revisions == 2
    assert reader.embedded_signatures[0].signed_revision == 1


def test_inspect_says_signed_by_the_shop_and_intact(app, cert) -> None:
    proof = pdfsign.inspect(cert.pdf, signing.known_certificates(signing_dir(app)))
    assert proof.proven and proof.signer_known == "current"
    assert proof.signature_line().startswith("signed by CN=Balancing shop balance certificates")
    assert ", intact" in proof.signature_line()
    assert proof.printed_hash == cert.data_sha256 == proof.embedded_hash
    assert proof.number == cert.number and proof.revision == 1
    # Without the shop's keys at hand the signature is still checked, the signer just named.
    alone = pdfsign.inspect(cert.pdf, None)
    assert alone.proven and alone.signer_known == ""


def test_embedded_data_that_differs_from_the_printed_hash_is_caught(app, db, shop, people
                                                                    ) -> None:
    """A file whose embedded JSON is not the data behind its printed hash: sealed here
    with the shop key itself, so the signature is intact and only the data check fails."""
    cert = issue_signed(app, db, shop, *people)
    data = certificates.certificate_data(cert)
    key = signing.current_key(signing_dir(app))
    other = report.canonical_json(data).replace(data.serial_number, "SN-FORGED")
    forged = pdfsign.seal(certificates.rerender(cert), other, key, reason="test")
    proof = pdfsign.inspect(forged, signing.known_certificates(signing_dir(app)))
    assert proof.intact and not proof.data_ok and not proof.proven
    assert "does NOT match" in proof.data_line()


def test_the_key_is_made_on_first_issue_with_mode_600_and_audited(app, db, shop, people
                                                                    ) -> None:
    from shopapp.core.settings import settings_for_update

    settings_for_update(db).shop_name = "Northgate Rotor Works"
    db.commit()
    folder = signing_dir(app)
    assert signing.current_key(folder) is None  # nothing before the first issue
    cert = issue_signed(app, db, shop, *people)
    key_file = folder / signing.SIGNER_FILE
    assert stat.S_IMODE(os.stat(key_file).st_mode) == 0o600
    assert stat.S_IMODE(os.stat(folder).st_mode) == 0o700
    key = signing.current_key(folder)
    assert key is not None
    assert key.info.subject == ("CN=Northgate Rotor Works balance certificates, "
                                "O=Northgate Rotor Works")
    assert independent_check(cert.pdf).signer_subject.startswith("O=Northgate Rotor Works")
    events = db.query(AuditEvent).filter_by(entity="signing_key", action="create").all()
    assert len(events) == 1 and events[0].after["fingerprint"] == key.info.fingerprint


def test_reissue_is_signed_and_gets_its_own_code(app, db, cert, people) -> None:
    _operator, quality = people
    second = certificates.reissue(db, cert, by=quality, reason="order reference corrected",
                                  signing_dir=signing_dir(app), base_url=BASE)
    assert second.verification_code != cert.verification_code
    assert _pyhanko(second.pdf).intact
    assert independent_check(second.pdf).signature_verifies


def test_rotation_keeps_old_certificates_valid(app, db, shop, people, cert) -> None:
    folder = signing_dir(app)
    old = signing.current_key(folder)
    assert old is not None
    new, retired = signing.rotate(folder, "Test Shop")
    assert retired is not None and retired.fingerprint == old.info.fingerprint
    assert new.info.fingerprint != old.info.fingerprint
    later = issue_signed(app, db, shop, *people)
    known = signing.known_certificates(folder)
    assert [k.fingerprint for k in known] == [new.info.fingerprint, old.info.fingerprint]
    before = pdfsign.inspect(cert.pdf, known)
    assert before.proven and before.signer_known == "retired"
    after = pdfsign.inspect(later.pdf, known)
    assert after.proven and after.signer_known == "current"
    # The retired folder keeps the certificate only, never the private key.
    for path in (folder / signing.RETIRED_FOLDER).iterdir():
        assert b"PRIVATE KEY" not in path.read_bytes()


def test_a_foreign_key_is_named_as_not_the_shops(app, db, shop, people, cert, tmp_path) -> None:
    other = tmp_path / "other-instance" / "signing"
    signing.load_or_create(other, "Someone Else")
    proof = pdfsign.inspect(cert.pdf, signing.known_certificates(other))
    assert proof.intact and proof.signer_known == "unknown"
    assert "NOT one of this shop's signing keys" in proof.signer_line()


def test_certificates_issued_before_signing_still_verify(db, shop, people) -> None:
    old = issue_before_signing(db, shop, *people)
    assert certificates.rerender(old) == old.pdf  # unchanged: schema 1 draws as before
    proof = pdfsign.inspect(old.pdf, None)
    assert proof.era == "before_signing" and not proof.proven
    assert "issued before signing was introduced" in proof.signature_line()
    result, remark = register.verify_file(db, old.pdf)
    assert result.status == "valid" and remark == ""
    # Their footer prints the first 16 digits of the content hash: number + those works.
    v = register.check(db, old.number, old.data_sha256[:16])
    assert v.status == "valid" and dict(v.lines)["Serial number"]
    assert register.check(db, old.number, old.data_sha256).status == "valid"
    assert register.check(db, old.number, "0" * 16).status == "unknown"


def test_an_unsigned_issue_still_embeds_its_data(db, shop, people) -> None:
    """Without a signing folder (the demo's historical replay) nothing is signed, the
    page says so, and the data is still attached."""
    from tests.reports.samples import job_ready_for_certificate

    operator, quality = people
    cert = certificates.issue(db, job_ready_for_certificate(db, shop, operator), by=quality)
    proof = pdfsign.inspect(cert.pdf, None)
    assert proof.era == "unsigned" and proof.data_ok and not proof.proven
    text = "".join(p.extract_text() for p in pypdf.PdfReader(io.BytesIO(cert.pdf)).pages)
    assert "not digitally signed" in text

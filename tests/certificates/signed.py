"""Helpers of the signed-certificate tests: issue with the instance's key, an independent
signature check, and a certificate as issued before signing (issue 15)."""

from __future__ import annotations

import dataclasses
import hashlib
import io
from pathlib import Path
from typing import Any

import pikepdf
from asn1crypto import cms, parser
from cryptography import x509
from cryptography.exceptions import InvalidSignature
from cryptography.hazmat.primitives import hashes
from cryptography.hazmat.primitives.asymmetric import ec, padding, rsa

from shopapp.certificates import issue as certificates
from shopapp.certificates import signing
from shopapp.jobs import states as job_states
from shopapp.models import Certificate
from shopapp.models.certificates import new_verification_code
from shopapp.reports import certificate as report
from tests.reports.samples import job_ready_for_certificate

BASE = "https://balancing.example.test"


def signing_dir(app: Any) -> Path:
    return signing.signing_folder(app.instance_path)


def issue_signed(app: Any, db: Any, shop: Any, operator: Any, quality: Any,
                 **kw: Any) -> Certificate:
    """A certificate issued as the web page issues it: signed with the instance's key."""
    job = job_ready_for_certificate(db, shop, operator)
    cert = certificates.issue(db, job, by=quality, signing_dir=signing_dir(app),
                              base_url=kw.pop("base_url", BASE), **kw)
    db.commit()
    return cert


def issue_before_signing(db: Any, shop: Any, operator: Any, quality: Any) -> Certificate:
    """A certificate exactly as the code before issue 15 stored it: schema 1 data, the
    plain reportlab rendering (no signature, no embedded data, no code printed), and the
    random code migration 0020 gives every existing revision."""
    job = job_ready_for_certificate(db, shop, operator)
    ev = certificates.evidence(db, job)
    now = certificates._now()
    data = certificates.build_data(db, ev, number=certificates.next_number(db, now.year),
                                   revision=1, reason="", issued_at=now, issued_by=quality)
    data = report.normalized(dataclasses.replace(data, schema=1))
    text = report.canonical_json(data)
    pdf = report.render(data)
    cert = Certificate(number=data.number, revision=1, job_id=job.id, state="issued",
                       issued_by_id=quality.id, issued_at=now, reason="", pdf=pdf,
                       pdf_sha256=hashlib.sha256(pdf).hexdigest(), data_json=text,
                       data_sha256=hashlib.sha256(text.encode("utf-8")).hexdigest(),
                       verification_code=new_verification_code())
    db.add(cert)
    db.flush()
    job_states.mark_certified(db, job, by=quality)
    db.commit()
    return cert


@dataclasses.dataclass(frozen=True)
class IndependentCheck:
    """What a check without pyHanko finds (pikepdf reads the signature dictionary;
    asn1crypto parses the CMS; ``cryptography`` verifies the signature)."""

    covers_whole_file: bool
    digest_matches: bool
    signature_verifies: bool
    signer_subject: str


def der_length(contents: bytes) -> int:
    """Bytes of the DER value at the start of a zero-padded ``/Contents``, from its own
    header (X.690 §8.1.3). Stripping the trailing zeros instead cuts a signature whose
    last byte happens to be 0x00 (one signature in 256)."""
    _cls, _method, _tag, header, content, _trailer = parser.parse(contents)
    return len(header) + len(content)


def independent_check(pdf: bytes) -> IndependentCheck:
    """Hash the ``/ByteRange`` of the signature dictionary and compare it with the CMS's
    signed ``messageDigest``; verify the CMS signature over its signed attributes with the
    public key of the certificate inside it (RFC 5652 §5.4: the DER SET OF the attributes)."""
    with pikepdf.open(io.BytesIO(pdf)) as doc:
        sig_fields = [f for f in doc.Root.AcroForm.Fields if f.get("/FT") == "/Sig"]
        value = sig_fields[0].V
        byte_range = [int(x) for x in value.ByteRange]
        contents = bytes(value.Contents)
    a, la, b, lb = byte_range
    covers = a == 0 and b + lb == len(pdf) and pdf[a + la:b].strip(b"<>").lower() \
        == contents.hex().encode("ascii")
    signed = pdf[a:a + la] + pdf[b:b + lb]
    info = cms.ContentInfo.load(contents[:der_length(contents)])
    signer_info = info["content"]["signer_infos"][0]
    attrs = signer_info["signed_attrs"]
    digest = next(x["values"][0].native for x in attrs if x["type"].native == "message_digest")
    # The signer's certificate is the one the SignerInfo names (issuer and serial number,
    # RFC 5652 §5.3); a chain may come first in the set.
    sid = signer_info["sid"].chosen
    cert = next(
        x509.load_der_x509_certificate(c.chosen.dump())
        for c in info["content"]["certificates"]
        if c.chosen.serial_number == sid["serial_number"].native
        and c.chosen.issuer == sid["issuer"])
    to_verify = b"\x31" + attrs.dump()[1:]  # [0] IMPLICIT → SET OF
    key = cert.public_key()
    try:
        if isinstance(key, ec.EllipticCurvePublicKey):
            key.verify(signer_info["signature"].native, to_verify, ec.ECDSA(hashes.SHA256()))
        else:
            assert isinstance(key, rsa.RSAPublicKey)
            key.verify(signer_info["signature"].native, to_verify, padding.PKCS1v15(),
                       hashes.SHA256())
        verifies = True
    except InvalidSignature:
        verifies = False
    return IndependentCheck(covers, digest == hashlib.sha256(signed).digest(), verifies,
                            cert.subject.rfc4514_string())


def flip_byte_in_title(pdf: bytes) -> bytes:
    """One byte changed inside the signed range (the document title), offsets unchanged."""
    at = pdf.index(b"Balance certificate BC-")
    out = bytearray(pdf)
    out[at] ^= 0x01  # "B" → "C"
    return bytes(out)

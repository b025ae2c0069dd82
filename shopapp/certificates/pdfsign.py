"""Sealing a certificate PDF (embedded data + PAdES signature) and checking a sealed file.

:func:`seal` takes the reproducible rendering of :func:`shopapp.reports.certificate.render`
and appends ONE incremental update (pyHanko's incremental writer) that

1. embeds the canonical JSON of the certified data as ``certificate-data.json``
   (the JSON whose SHA-256 the page prints as the content hash), and
2. signs the whole file: a PAdES baseline B-B signature (``ETSI.CAdES.detached``,
   SHA-256) with the shop's key of :mod:`shopapp.certificates.signing`; the
   signer certificate (and any chain) is inside the signature.

So the stored file starts with the unsigned rendering byte for byte, and the
signature's ``/ByteRange`` covers everything but its own ``/Contents``.

Signing many files (the demo shop issues some 670 at its first start) costs a
key's pyHanko signer and the size of its signature once, not per file: pyHanko
otherwise builds a dummy signature before every real one to size the space it
reserves. :func:`sealer_for` keeps both per signer certificate for the process,
and the signer's signing-certificate-v2 attribute (the hash, issuer and serial number
of its certificate: the same in every signature) as DER: asn1crypto serialises a freshly
built copy of it (the issuer name, nested sets within sequences) in tens of
milliseconds, most of a signature's cost, where a copy loaded from DER costs nothing.

:func:`inspect` checks a file without any database: the signature with pyHanko's
validator (trusting the certificate the signature carries, so the answer is
"intact or not"; whether that certificate is one of this shop's is a separate
comparison with the shop's current and retired signer certificates when they are
at hand), that the signature covers the whole file, and that the embedded JSON's
SHA-256 equals the content hash derived from that data (the hash :func:`render`
prints) and the one in the document's keywords. B-B carries no trusted
timestamp: the signer certificate is judged at the signing time the signature
states.
"""

from __future__ import annotations

import asyncio
import dataclasses
import datetime as dt
import hashlib
import io
import re
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

from asn1crypto import keys as asn1_keys
from asn1crypto import tsp
from asn1crypto import x509 as asn1_x509
from cryptography import x509
from cryptography.hazmat.primitives import serialization
from pyhanko.pdf_utils import embed, generic
from pyhanko.pdf_utils.incremental_writer import IncrementalPdfFileWriter
from pyhanko.pdf_utils.reader import PdfFileReader
from pyhanko.sign import fields, signers
from pyhanko.sign.attributes import (
    CMSAttributeProvider,
    SignedAttributeProviderSpec,
    SigningCertificateV2Provider,
)
from pyhanko.sign.general import as_signing_certificate_v2
from pyhanko.sign.validation import EmbeddedPdfSignature, validate_pdf_signature
from pyhanko.sign.validation.status import SignatureCoverageLevel
from pyhanko_certvalidator import ValidationContext
from pyhanko_certvalidator.registry import SimpleCertificateStore

from shopapp.certificates.signing import ShopKey, SignerCertificate
from shopapp.reports.certificate import CertificateData, data_sha256

EMBEDDED_NAME = "certificate-data.json"
FIELD_NAME = "ShopSignature"
MAX_EMBEDDED_BYTES = 2_000_000
_KEYWORDS_RE = re.compile(r"shopapp-certificate (\S+) rev (\d+) data-sha256 ([0-9a-f]{64})")


# --------------------------------------------------------------------------- sealing


def _asn1_cert(der: bytes) -> asn1_x509.Certificate:
    return asn1_x509.Certificate.load(der)


class _SigningCertificateV2(CMSAttributeProvider):
    """pyHanko's signing-certificate-v2 attribute value, built once and given out as a fresh
    copy loaded from its DER for each signature (see the module docstring)."""

    attribute_type = SigningCertificateV2Provider.attribute_type

    def __init__(self, signing_cert: asn1_x509.Certificate) -> None:
        self._der = as_signing_certificate_v2(signing_cert).dump()

    async def build_attr_value(self, dry_run: bool = False) -> tsp.SigningCertificateV2:
        return tsp.SigningCertificateV2.load(self._der)


class _PadesSignedAttributes(SignedAttributeProviderSpec):
    """The signed attributes pyHanko gives a PAdES signature without CAdES extras (its
    ``CAdESSignedAttributeProviderSpec`` with ``is_pades``: only signing-certificate-v2;
    content type and message digest are added by pyHanko itself), from one provider."""

    def __init__(self, signing_cert: asn1_x509.Certificate) -> None:
        self._provider = _SigningCertificateV2(signing_cert)

    def signed_attr_providers(self, data_digest: bytes, digest_algorithm: str
                              ) -> list[CMSAttributeProvider]:
        return [self._provider]


def pdf_signer(key: ShopKey) -> signers.SimpleSigner:
    """pyHanko's signer for the shop key (the chain goes into the signature too)."""
    def der(c: x509.Certificate) -> bytes:
        return c.public_bytes(serialization.Encoding.DER)

    cert = _asn1_cert(der(key.certificate))
    chain = [_asn1_cert(der(c)) for c in key.chain]
    signer = signers.SimpleSigner(
        signing_cert=cert,
        signing_key=asn1_keys.PrivateKeyInfo.load(key.key_der()),
        cert_registry=SimpleCertificateStore.from_certs([cert, *chain]),
    )
    signer.signed_attr_prov_spec = _PadesSignedAttributes(cert)
    return signer


@dataclass(frozen=True)
class Sealer:
    """A shop key made ready to sign: pyHanko's signer and the signature space it needs.

    ``bytes_reserved``: hex digits kept for the signature in ``/Contents``; pyHanko's
    own estimate (a dummy signature's DER length, doubled for hex, plus its 50 %
    margin), made once per key instead of before every file.
    """

    key: ShopKey
    signer: signers.SimpleSigner
    bytes_reserved: int


_SEALERS: dict[str, Sealer] = {}  # by signer-certificate fingerprint (a key or two per process)


def _reserve(signer: signers.SimpleSigner) -> int:
    """The ``bytes_reserved`` pyHanko estimates for ``signer`` (same formula, see Sealer)."""
    dummy = asyncio.run(signer.async_sign(hashlib.sha256(b"").digest(), "sha256",
                                          dry_run=True, use_pades=True))
    test_len = len(dummy.dump()) * 2
    return test_len + 2 * (test_len // 4)


def sealer_for(key: ShopKey) -> Sealer:
    """The :class:`Sealer` of ``key``, built on first use in this process.

    Keyed by the signer certificate's fingerprint: a rotated or imported key has a new
    certificate and gets its own; the private key must belong to that certificate
    (:mod:`shopapp.certificates.signing` refuses a key file where it does not).
    """
    fingerprint = key.info.fingerprint
    made = _SEALERS.get(fingerprint)
    if made is None:
        signer = pdf_signer(key)
        made = Sealer(key, signer, _reserve(signer))
        _SEALERS[fingerprint] = made
    return made


def seal(unsigned: bytes, data_json: str, key: ShopKey | None, *, reason: str) -> bytes:
    """``unsigned`` + one incremental update: the embedded data and, with a key, the signature.

    Without a key (a caller that signs nothing) the data is still embedded; the file is
    then not signed and :func:`inspect` says so.
    """
    writer = IncrementalPdfFileWriter(io.BytesIO(unsigned))
    stream = embed.EmbeddedFileObject.from_file_data(
        writer, data=data_json.encode("utf-8"), mime_type="application/json",
        params=embed.EmbeddedFileParams(embed_size=True, embed_checksum=False),
    )
    embed.embed_file(writer, embed.FileSpec(
        file_spec_string=EMBEDDED_NAME, file_name=EMBEDDED_NAME, embedded_data=stream,
        description="The certified data; its SHA-256 is the content hash printed on the page",
    ))
    out = io.BytesIO()
    if key is None:
        writer.write(out)
        return out.getvalue()
    sealer = sealer_for(key)
    meta = signers.PdfSignatureMetadata(
        field_name=FIELD_NAME, subfilter=fields.SigSeedSubFilter.PADES, md_algorithm="sha256",
        reason=reason, name=key.info.subject,
    )
    signers.sign_pdf(writer, meta, signer=sealer.signer, output=out,
                     bytes_reserved=sealer.bytes_reserved)
    return out.getvalue()


# --------------------------------------------------------------------------- checking


@dataclass(frozen=True)
class FileProof:
    """What a certificate PDF proves by itself (no database).

    ``era``: ``"signed"``; ``"unsigned"`` (our data embedded, no signature);
    ``"before_signing"`` (an older certificate: no signature, no embedded data,
    our keywords); ``"not_ours"``; ``"unreadable"``.
    """

    era: str
    problem: str = ""
    intact: bool = False
    whole_file: bool = False
    signer: SignerCertificate | None = None
    signer_known: str = ""  # "current" | "retired" | "unknown" | "" (no shop keys at hand)
    signed_at: dt.datetime | None = None
    data_json: bytes | None = None
    data: CertificateData | None = None
    printed_hash: str = ""  # the content hash derived from the embedded data
    keywords_hash: str = ""  # the content hash in the document's keywords
    number: str = ""
    revision: int | None = None

    @property
    def embedded_hash(self) -> str:
        return hashlib.sha256(self.data_json).hexdigest() if self.data_json is not None else ""

    @property
    def data_ok(self) -> bool:
        """The embedded JSON's SHA-256 equals the printed content hash (and the keywords')."""
        return (self.data_json is not None and bool(self.printed_hash)
                and self.embedded_hash == self.printed_hash
                and self.keywords_hash in ("", self.printed_hash))

    @property
    def proven(self) -> bool:
        """Signed, intact over the whole file, and the embedded data is the printed data."""
        return self.era == "signed" and self.intact and self.whole_file and self.data_ok

    def signature_line(self) -> str:
        if self.era == "unreadable":
            return f"not a readable PDF file: {self.problem}"
        if self.era == "before_signing":
            return ("not signed: issued before signing was introduced (no signature and no "
                    "embedded data; the register decides)")
        if self.era == "not_ours":
            return "not a certificate of this program: no signature and no certificate data"
        if self.era == "unsigned":
            return "not signed: issued without a signing key (the certified data is embedded)"
        who = self.signer.subject if self.signer else "an unreadable signer"
        if not self.intact:
            return f"signed by {who}, but NOT intact: {self.problem or 'the file was changed'}"
        if not self.whole_file:
            return (f"signed by {who}; the signed part is intact, but the file was changed "
                    "after signing (an update was appended)")
        when = f" (signed {self.signed_at:%Y-%m-%d %H:%M} UTC)" if self.signed_at else ""
        return f"signed by {who}, intact{when}"

    def signer_line(self) -> str:
        if self.signer is None:
            return ""
        words = {
            "current": "the shop's current signing key",
            "retired": "a retired signing key of this shop (still accepted)",
            "unknown": "NOT one of this shop's signing keys",
            "": "this shop's signing keys are not at hand here; compare the fingerprint",
        }[self.signer_known]
        return f"{words}; certificate SHA-256 {self.signer.fingerprint}"

    def data_line(self) -> str:
        if self.data_json is None:
            if self.keywords_hash:
                return f"printed content hash {self.keywords_hash} (no embedded data to compare)"
            return ""
        if self.data is None:
            return f"{EMBEDDED_NAME} is not certificate data: {self.problem}"
        if self.data_ok:
            return f"{EMBEDDED_NAME} matches the printed content hash {self.printed_hash}"
        return (f"{EMBEDDED_NAME} does NOT match: its SHA-256 is {self.embedded_hash}, the "
                f"printed content hash is {self.keywords_hash or self.printed_hash}")

    def lines(self) -> list[tuple[str, str]]:
        out = [("signature", self.signature_line())]
        if self.signer_line():
            out.append(("signer", self.signer_line()))
        if self.data_line():
            out.append(("content", self.data_line()))
        return out


def _keywords(reader: PdfFileReader) -> tuple[str, int | None, str]:
    try:
        text = str(reader.trailer["/Info"].get("/Keywords", ""))
    except (KeyError, TypeError, AttributeError):
        return "", None, ""
    m = _KEYWORDS_RE.search(text)
    return (m.group(1), int(m.group(2)), m.group(3)) if m else ("", None, "")


def _embedded(reader: PdfFileReader) -> bytes | None:
    """The bytes of ``certificate-data.json`` in the document's embedded files, if any."""
    try:
        names = reader.root["/Names"]["/EmbeddedFiles"]["/Names"]
    except (KeyError, TypeError):
        return None
    for i in range(0, len(names) - 1, 2):
        if str(names[i]) != EMBEDDED_NAME:
            continue
        stream = names[i + 1].get_object()["/EF"]["/F"].get_object()
        declared = stream.get("/Params", generic.DictionaryObject()).get("/Size", 0)
        if int(declared) > MAX_EMBEDDED_BYTES or len(stream.encoded_data) > MAX_EMBEDDED_BYTES:
            raise ValueError(f"{EMBEDDED_NAME} is larger than {MAX_EMBEDDED_BYTES} bytes")
        data = stream.data
        if len(data) > MAX_EMBEDDED_BYTES:
            raise ValueError(f"{EMBEDDED_NAME} is larger than {MAX_EMBEDDED_BYTES} bytes")
        return bytes(data)
    return None


def _with_data(proof: FileProof, data_json: bytes | None) -> FileProof:
    if data_json is None:
        return proof
    try:
        data = CertificateData.from_json(data_json.decode("utf-8"))
        printed = data_sha256(data)
    except (ValueError, KeyError, TypeError, UnicodeDecodeError) as exc:
        return _replace(proof, data_json=data_json, problem=proof.problem or str(exc))
    return _replace(proof, data_json=data_json, data=data, printed_hash=printed,
                    number=data.number, revision=data.revision)


def _replace(proof: FileProof, **changes: Any) -> FileProof:
    return dataclasses.replace(proof, **changes)


def _signature(sig: EmbeddedPdfSignature, known: Sequence[SignerCertificate] | None,
               current_fingerprint: str) -> FileProof:
    cert = sig.signer_cert
    signer = _signer_facts(cert.dump())
    signed_at = sig.self_reported_timestamp
    roots = [cert, *sig.other_embedded_certs]
    context = ValidationContext(trust_roots=roots, moment=signed_at or None)
    status = validate_pdf_signature(sig, context)
    intact = bool(status.intact and status.valid)
    whole = status.coverage == SignatureCoverageLevel.ENTIRE_FILE
    problem = "" if intact else "the signed bytes do not match the signature"
    if not known:
        where = ""
    elif signer.fingerprint == current_fingerprint:
        where = "current"
    elif signer.fingerprint in {k.fingerprint for k in known}:
        where = "retired"
    else:
        where = "unknown"
    return FileProof(era="signed", problem=problem, intact=intact, whole_file=whole,
                     signer=signer, signer_known=where, signed_at=signed_at)


def _signer_facts(der: bytes) -> SignerCertificate:
    return SignerCertificate.of(x509.load_der_x509_certificate(der))


def inspect(pdf: bytes, known: Sequence[SignerCertificate] | None = None) -> FileProof:
    """Check ``pdf`` by itself. ``known``: the shop's signer certificates, the current one
    first (:func:`shopapp.certificates.signing.known_certificates`); None when not at hand.
    """
    try:
        reader = PdfFileReader(io.BytesIO(pdf), strict=False)
        number, revision, keywords_hash = _keywords(reader)
        sigs = list(reader.embedded_signatures)
        data_json = _embedded(reader)
    except Exception as exc:  # a damaged or hostile file: pyHanko raises many kinds
        return FileProof(era="unreadable", problem=_first_line(exc))
    if sigs:
        try:
            proof = _signature(sigs[0], known, known[0].fingerprint if known else "")
        except Exception as exc:  # an unparseable signature is a failed signature
            proof = FileProof(era="signed", problem=f"the signature cannot be checked: "
                                                    f"{_first_line(exc)}")
    elif data_json is not None:
        proof = FileProof(era="unsigned")
    elif keywords_hash:
        proof = FileProof(era="before_signing")
    else:
        proof = FileProof(era="not_ours")
    proof = _replace(proof, keywords_hash=keywords_hash, number=number, revision=revision)
    return _with_data(proof, data_json)


def _first_line(exc: BaseException) -> str:
    text = str(exc).strip().splitlines()
    return text[0] if text else exc.__class__.__name__

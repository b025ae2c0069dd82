"""The shop's signing key: the key and X.509 certificate every certificate PDF is signed with.

Where it lives: ``<instance>/signing/`` (the caller passes the instance folder:
Flask's ``current_app.instance_path`` at the route or CLI edge). The folder is
mode 700, each file mode 600, and the instance folder is never committed.

- ``shop-signer.pem``: the current private key (PKCS#8 PEM, not encrypted: like
  the app's secret key it is protected by the file mode) followed by its
  certificate and any chain certificates. Written to a temporary file first and
  moved into place, so a reader never sees half a key.
- ``retired/<date>-<fingerprint>.pem``: the certificates (only the certificates,
  not the keys) of signers that were replaced. Old certificates embed their
  signer certificate; verification accepts the current and every retired one.

How a key comes to be:

- first use (:func:`load_or_create`, at the first certificate issue): an EC P-256
  key and a self-signed certificate naming the shop (its name from the shop
  settings) valid for :data:`GENERATED_YEARS` years;
- :func:`import_pkcs12`: the shop's own key and certificate (for example one
  issued by a CA the customers trust) from a password-protected PKCS#12 file;
- :func:`rotate`: a new generated key; the old certificate is retired.

Only ``cryptography`` is used here; signing the PDF itself is
:mod:`shopapp.certificates.pdfsign`.
"""

from __future__ import annotations

import datetime as dt
import hashlib
import logging
import os
import re
import tempfile
from dataclasses import dataclass
from pathlib import Path

from cryptography import x509
from cryptography.hazmat.primitives import hashes, serialization
from cryptography.hazmat.primitives.asymmetric import ec, rsa
from cryptography.hazmat.primitives.serialization import pkcs12
from cryptography.x509.oid import NameOID

from shopapp.core.errors import ServiceError, ValidationFailed

log = logging.getLogger(__name__)

FOLDER_NAME = "signing"
SIGNER_FILE = "shop-signer.pem"
RETIRED_FOLDER = "retired"
GENERATED_YEARS = 10
MAX_PKCS12_BYTES = 1_000_000
MIN_RSA_BITS = 2048
EXPIRY_WARNING_DAYS = 90

_PEM_RE = re.compile(
    rb"-----BEGIN ([A-Z0-9 ]+)-----\r?\n.*?-----END \1-----\r?\n?", re.DOTALL
)

PrivateKey = rsa.RSAPrivateKey | ec.EllipticCurvePrivateKey


class SigningKeyBroken(ServiceError):
    """The stored signing key cannot be read; the message names the file and why."""

    status = 500


# --------------------------------------------------------------------------- what is shown


def name_text(name: x509.Name) -> str:
    """A distinguished name in the certificate's own order: ``CN=…, O=…``."""
    return ", ".join(attr.rfc4514_string() for attr in name.rdns)


@dataclass(frozen=True)
class SignerCertificate:
    """The public facts of a signer certificate (what the signing page and CLI show)."""

    subject: str
    issuer: str
    fingerprint: str  # SHA-256 of the DER certificate, hex
    serial: str
    not_before: dt.datetime
    not_after: dt.datetime
    der: bytes
    self_signed: bool

    @classmethod
    def of(cls, cert: x509.Certificate) -> SignerCertificate:
        der = cert.public_bytes(serialization.Encoding.DER)
        return cls(
            subject=name_text(cert.subject),
            issuer=name_text(cert.issuer),
            fingerprint=hashlib.sha256(der).hexdigest(),
            serial=format(cert.serial_number, "x"),
            not_before=cert.not_valid_before_utc,
            not_after=cert.not_valid_after_utc,
            der=der,
            self_signed=cert.issuer == cert.subject,
        )

    @property
    def fingerprint_groups(self) -> str:
        """The fingerprint in colon-separated byte pairs, as certificate viewers show it."""
        f = self.fingerprint.upper()
        return ":".join(f[i:i + 2] for i in range(0, len(f), 2))

    def expires_within(self, days: int, now: dt.datetime | None = None) -> bool:
        return self.not_after - (now or _now()) < dt.timedelta(days=days)


@dataclass(frozen=True)
class ShopKey:
    """The current signer: private key, certificate and any chain (issuer certificates)."""

    key: PrivateKey
    certificate: x509.Certificate
    chain: tuple[x509.Certificate, ...]
    origin: str  # "generated" | "imported"

    @property
    def info(self) -> SignerCertificate:
        return SignerCertificate.of(self.certificate)

    def key_der(self) -> bytes:
        """The private key as unencrypted PKCS#8 DER (for the PDF signer)."""
        return self.key.private_bytes(serialization.Encoding.DER,
                                      serialization.PrivateFormat.PKCS8,
                                      serialization.NoEncryption())


@dataclass(frozen=True)
class SigningOverview:
    """What the signing page shows: the current signer (None before the first issue) and
    the retired signer certificates, newest first."""

    folder: Path
    current: SignerCertificate | None
    origin: str
    retired: tuple[SignerCertificate, ...]


# --------------------------------------------------------------------------- files


def signing_folder(instance_path: str | os.PathLike[str]) -> Path:
    """``<instance>/signing``: where the shop's signing key lives."""
    return Path(instance_path) / FOLDER_NAME


def _now() -> dt.datetime:
    return dt.datetime.now(dt.UTC)


def _ensure_folder(folder: Path) -> None:
    for path in (folder, folder / RETIRED_FOLDER):
        path.mkdir(mode=0o700, parents=True, exist_ok=True)
        os.chmod(path, 0o700)


def _temp_file(folder: Path, data: bytes) -> Path:
    """``data`` in a new mode-600 file in ``folder`` (synced), to be moved into place."""
    fd, name = tempfile.mkstemp(prefix=".new-", dir=folder)
    try:
        os.fchmod(fd, 0o600)
        with os.fdopen(fd, "wb") as fh:
            fh.write(data)
            fh.flush()
            os.fsync(fh.fileno())
    except BaseException:
        Path(name).unlink(missing_ok=True)
        raise
    return Path(name)


def _tighten(path: Path) -> None:
    """Key files are mode 600; a copy made with looser rights is tightened (and logged)."""
    mode = path.stat().st_mode & 0o777
    if mode & 0o077:
        log.warning("%s was mode %o; set to 600", path, mode)
        os.chmod(path, 0o600)


def _pem(key: ShopKey) -> bytes:
    head = (f"# shopapp signing key ({key.origin}); keep this file secret, mode 600\n"
            .encode("ascii"))
    body = key.key.private_bytes(serialization.Encoding.PEM, serialization.PrivateFormat.PKCS8,
                                 serialization.NoEncryption())
    certs = b"".join(c.public_bytes(serialization.Encoding.PEM)
                     for c in (key.certificate, *key.chain))
    return head + body + certs


def _parse(path: Path, data: bytes) -> ShopKey:
    key: PrivateKey | None = None
    certs: list[x509.Certificate] = []
    try:
        for m in _PEM_RE.finditer(data):
            kind = m.group(1)
            if kind.endswith(b"PRIVATE KEY"):
                loaded = serialization.load_pem_private_key(m.group(0), password=None)
                if not isinstance(loaded, rsa.RSAPrivateKey | ec.EllipticCurvePrivateKey):
                    raise ValueError("the key is neither RSA nor EC")
                key = loaded
            elif kind == b"CERTIFICATE":
                certs.append(x509.load_pem_x509_certificate(m.group(0)))
    except (ValueError, TypeError) as exc:
        raise SigningKeyBroken(f"{path}: the signing key cannot be read ({exc})") from None
    if key is None or not certs:
        raise SigningKeyBroken(f"{path}: holds no private key and certificate; restore it from "
                               "a backup or run 'shopapp signing rotate'")
    if not _same_key(key, certs[0]):
        raise SigningKeyBroken(f"{path}: the private key does not belong to its certificate")
    origin = "imported" if b"(imported)" in data.split(b"\n", 1)[0] else "generated"
    return ShopKey(key, certs[0], tuple(certs[1:]), origin)


def _same_key(key: PrivateKey, cert: x509.Certificate) -> bool:
    fmt = (serialization.Encoding.DER, serialization.PublicFormat.SubjectPublicKeyInfo)
    return key.public_key().public_bytes(*fmt) == cert.public_key().public_bytes(*fmt)


def current_key(folder: Path) -> ShopKey | None:
    """The current signer, or None when none was made or imported yet (nothing is created)."""
    path = folder / SIGNER_FILE
    if not path.is_file():
        return None
    _tighten(path)
    return _parse(path, path.read_bytes())


def _retire(folder: Path, key: ShopKey, now: dt.datetime) -> SignerCertificate:
    """Keep the certificate of ``key`` in ``retired/`` (the key itself is not kept)."""
    info = key.info
    name = f"{now:%Y%m%d}-{info.fingerprint[:16]}.pem"
    target = folder / RETIRED_FOLDER / name
    if not target.exists():
        tmp = _temp_file(folder / RETIRED_FOLDER,
                         b"".join(c.public_bytes(serialization.Encoding.PEM)
                                  for c in (key.certificate, *key.chain)))
        os.replace(tmp, target)
    return info


def _install(folder: Path, key: ShopKey, *, replace: bool) -> bool:
    """Write ``key`` as the current signer. Without ``replace`` only when there is none
    yet (two processes creating at once: the first wins); True when written."""
    tmp = _temp_file(folder, _pem(key))
    target = folder / SIGNER_FILE
    try:
        if replace:
            os.replace(tmp, target)
            return True
        try:
            os.link(tmp, target)  # atomic "create if absent"
        except FileExistsError:
            return False
        return True
    finally:
        tmp.unlink(missing_ok=True)


# --------------------------------------------------------------------------- making keys


def _subject(shop_name: str) -> x509.Name:
    shop = " ".join((shop_name or "").split()) or "Balancing shop"
    common = f"{shop} balance certificates"
    return x509.Name([
        x509.NameAttribute(NameOID.COMMON_NAME, common[:64]),
        x509.NameAttribute(NameOID.ORGANIZATION_NAME, shop[:64]),
    ])


def generate(shop_name: str, *, now: dt.datetime | None = None) -> ShopKey:
    """A new EC P-256 key and a self-signed certificate naming the shop.

    Key usage: digital signature and non-repudiation (content commitment), what a
    PDF signature validator looks for; not a CA.
    """
    now = now or _now()
    key = ec.generate_private_key(ec.SECP256R1())
    name = _subject(shop_name)
    cert = (
        x509.CertificateBuilder()
        .subject_name(name).issuer_name(name)
        .public_key(key.public_key())
        .serial_number(x509.random_serial_number())
        .not_valid_before(now - dt.timedelta(hours=1))
        .not_valid_after(now + dt.timedelta(days=365 * GENERATED_YEARS))
        .add_extension(x509.BasicConstraints(ca=False, path_length=None), critical=True)
        .add_extension(x509.KeyUsage(
            digital_signature=True, content_commitment=True, key_encipherment=False,
            data_encipherment=False, key_agreement=False, key_cert_sign=False, crl_sign=False,
            encipher_only=False, decipher_only=False), critical=True)
        .add_extension(x509.SubjectKeyIdentifier.from_public_key(key.public_key()),
                       critical=False)
        .sign(key, hashes.SHA256())
    )
    return ShopKey(key, cert, (), "generated")


def load_or_create(folder: Path, shop_name: str, *, now: dt.datetime | None = None
                   ) -> tuple[ShopKey, bool]:
    """The current signer, made on first use. Returns the key and whether it was made now."""
    key = current_key(folder)
    if key is not None:
        return key, False
    _ensure_folder(folder)
    made = generate(shop_name, now=now)
    if _install(folder, made, replace=False):
        log.info("signing key created in %s: %s", folder, made.info.subject)
        return made, True
    key = current_key(folder)  # another process made one first: use that one
    assert key is not None
    return key, False


def rotate(folder: Path, shop_name: str, *, now: dt.datetime | None = None
           ) -> tuple[ShopKey, SignerCertificate | None]:
    """A new generated signer; the old certificate goes to ``retired/`` (still accepted)."""
    now = now or _now()
    _ensure_folder(folder)
    old = current_key(folder)
    retired = _retire(folder, old, now) if old is not None else None
    made = generate(shop_name, now=now)
    _install(folder, made, replace=True)
    return made, retired


def _check_imported(key: object, cert: x509.Certificate | None, now: dt.datetime) -> None:
    field = "pkcs12"
    if key is None or cert is None:
        raise ValidationFailed(field, "the file must hold a private key and its certificate")
    if isinstance(key, rsa.RSAPrivateKey):
        if key.key_size < MIN_RSA_BITS:
            raise ValidationFailed(field, f"the RSA key has {key.key_size} bits; at least "
                                          f"{MIN_RSA_BITS} are needed")
    elif not isinstance(key, ec.EllipticCurvePrivateKey):
        raise ValidationFailed(field, "the key must be an RSA or EC key")
    if not _same_key(key, cert):
        raise ValidationFailed(field, "the private key does not belong to the certificate")
    if cert.not_valid_after_utc <= now:
        raise ValidationFailed(field, "the certificate expired on "
                                      f"{cert.not_valid_after_utc.date().isoformat()}")
    if cert.not_valid_before_utc > now:
        raise ValidationFailed(field, "the certificate is valid only from "
                                      f"{cert.not_valid_before_utc.date().isoformat()}")
    try:
        usage = cert.extensions.get_extension_for_class(x509.KeyUsage).value
    except x509.ExtensionNotFound:
        return
    if not (usage.digital_signature or usage.content_commitment):
        raise ValidationFailed(field, "the certificate's key usage does not allow signing "
                                      "(digital signature or non-repudiation)")


def import_pkcs12(folder: Path, data: bytes, password: str, *, now: dt.datetime | None = None
                  ) -> tuple[ShopKey, SignerCertificate | None]:
    """Make the shop's own key and certificate (PKCS#12, with its password) the signer.

    The current signer is retired first. Refused, naming the reason: a wrong
    password or a file that is not PKCS#12, no key or no certificate, a key that
    does not match the certificate, an RSA key under 2048 bits, an expired or
    not yet valid certificate, a key usage that does not allow signing.
    """
    now = now or _now()
    if len(data) > MAX_PKCS12_BYTES:
        raise ValidationFailed("pkcs12", f"the file has {len(data)} bytes; a PKCS#12 key file "
                                         f"has at most {MAX_PKCS12_BYTES}")
    try:
        key, cert, extra = pkcs12.load_key_and_certificates(
            data, password.encode("utf-8") if password else None
        )
    except ValueError:
        raise ValidationFailed(
            "password", "the password is wrong, or the file is not a PKCS#12 (.p12/.pfx) file"
        ) from None
    _check_imported(key, cert, now)
    assert isinstance(key, rsa.RSAPrivateKey | ec.EllipticCurvePrivateKey) and cert is not None
    imported = ShopKey(key, cert, tuple(extra or ()), "imported")
    _ensure_folder(folder)
    old = current_key(folder)
    retired = None
    if old is not None and old.info.fingerprint != imported.info.fingerprint:
        retired = _retire(folder, old, now)
    _install(folder, imported, replace=True)
    return imported, retired


# --------------------------------------------------------------------------- reading


def retired_certificates(folder: Path) -> list[SignerCertificate]:
    """The retired signer certificates, newest file first (unreadable files are skipped
    with a log line: one damaged file must not stop verification)."""
    out = []
    for path in sorted((folder / RETIRED_FOLDER).glob("*.pem"), reverse=True):
        try:
            first = x509.load_pem_x509_certificates(path.read_bytes())[0]
        except (ValueError, IndexError, OSError) as exc:
            log.warning("retired signer certificate %s skipped: %s", path, exc)
            continue
        out.append(SignerCertificate.of(first))
    return out


def known_certificates(folder: Path) -> list[SignerCertificate]:
    """Every signer certificate of this shop: the current one first, then the retired."""
    out = []
    current = current_key(folder)
    if current is not None:
        out.append(current.info)
    seen = {c.fingerprint for c in out}
    out += [c for c in retired_certificates(folder) if c.fingerprint not in seen]
    return out


def overview(folder: Path) -> SigningOverview:
    """The current signer and the retired ones (nothing is created)."""
    current = current_key(folder)
    return SigningOverview(folder, current.info if current else None,
                           current.origin if current else "",
                           tuple(retired_certificates(folder)))

"""The certificate register: search, the public verification, the audit ZIP.

The public verification never opens the register to someone who only guesses
(issue 15). It answers

- a number alone: only whether a certificate with that number exists;
- a number with its verification code (printed on the certificate and in its
  QR code), or with the content or PDF hash or their first 16+ hex digits (the
  footer of certificates issued before the codes prints the first 16): the
  revision's state and its identification lines (customer, rotor, serial);
- a full SHA-256 (content or PDF hash) alone, or a PDF file whose bytes are a
  stored certificate: the same.

A number with a wrong code gets the same answer as a number that does not
exist. The audit export is every certificate issued in a date range, as one ZIP
with an ``index.csv``.
"""

from __future__ import annotations

import csv
import dataclasses
import datetime as dt
import hashlib
import io
import re
import zipfile
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

from sqlalchemy import ColumnElement, Select, and_, func, select
from sqlalchemy.orm import Session, defer, joinedload

from shopapp.certificates.issue import certificate_data
from shopapp.certificates.queries import (
    by_number_and_code,
    by_number_and_hash_prefix,
    latest_revision,
    number_exists,
)
from shopapp.core.clock import shop_date
from shopapp.core.errors import ValidationFailed
from shopapp.core.pagination import Page, paginate
from shopapp.jobs.certificate_link import superseded_reason
from shopapp.models import Certificate, Customer, Job, Rotor, RotorType
from shopapp.reports import certificate as report

HASH_RE = re.compile(r"^[0-9a-f]{64}$")
CODE_RE = re.compile(r"^[A-Z2-7]{10}$")  # shopapp.models.certificates.new_verification_code
HASH_PREFIX_RE = re.compile(r"^[0-9a-f]{16,64}$")
NUMBER_MAX_LENGTH = 40
MAX_ZIP_CERTIFICATES = 2000  # one audit ZIP is built in memory: ~20 kB a certificate


# --------------------------------------------------------------------------- verification


@dataclass(frozen=True)
class Verification:
    """The answer of the public verification page.

    ``status``: ``"valid"``, ``"void"``, ``"superseded"``, ``"unknown"``, or
    ``"exists"`` (a number alone: nothing more is told).
    ``lines`` are the certificate's first printed lines (nothing more is shown).
    """

    query: str
    status: str
    matched_by: str = ""
    number: str = ""
    revision: int | None = None
    latest_revision: int | None = None
    voided_on: str | None = None
    void_reason: str = ""
    lines: tuple[tuple[str, str], ...] = ()
    with_code: bool = False  # the question held a code or hash beside the number

    @property
    def message(self) -> str:
        if self.status == "exists":
            return (f"A certificate numbered {self.number} is in this shop's register. Enter "
                    "the verification code printed on it (beside the QR code) to see whether "
                    "this revision is valid and what it certifies.")
        if self.status == "unknown":
            if self.with_code:
                return ("No certificate matches this number and code. Check both against the "
                        "certificate; a document that does not match was not issued by this "
                        "shop, or it has been altered.")
            return ("No certificate matches this number or hash. The document was not issued "
                    "by this shop, or it has been altered.")
        head = f"{self.number} revision {self.revision}"
        if self.status == "valid":
            return f"{head} is valid."
        if self.status == "superseded":
            return (f"{head} is void: superseded by revision {self.latest_revision} "
                    f"(voided {self.voided_on}). Ask for the current revision.")
        later = (f" A later revision ({self.latest_revision}) exists; ask for it."
                 if self.latest_revision and self.revision and self.latest_revision > self.revision
                 else "")
        return f"{head} is void since {self.voided_on}: {self.void_reason.rstrip('.')}.{later}"


def _answer(session: Session, query: str, cert: Certificate, matched_by: str) -> Verification:
    latest = latest_revision(session, cert.number) or cert.revision
    if cert.state == "issued":
        status = "valid"
    elif latest > cert.revision and cert.void_reason == superseded_reason(cert.revision + 1):
        status = "superseded"  # replaced by a reissue; voided on its own, it says why below
    else:
        status = "void"
    data = certificate_data(cert)
    return Verification(
        query=query,
        status=status,
        matched_by=matched_by,
        number=cert.number,
        revision=cert.revision,
        latest_revision=latest,
        voided_on=shop_date(cert.voided_at).isoformat() if cert.voided_at else None,
        void_reason=cert.void_reason,
        lines=tuple(report.first_lines(data)),
    )


def _by_hash(session: Session, query: str, h: str) -> Verification:
    cert = session.scalars(
        select(Certificate)
        .where((Certificate.pdf_sha256 == h) | (Certificate.data_sha256 == h))
        .options(defer(Certificate.pdf)).order_by(Certificate.revision.desc()).limit(1)
    ).first()
    if cert is None:
        return Verification(query=query, status="unknown")
    return _answer(session, query, cert, "PDF hash" if cert.pdf_sha256 == h else "content hash")


def _number(number: str, field: str) -> str:
    n = (number or "").strip().upper()
    if not n:
        raise ValidationFailed(field, "enter the certificate number (e.g. BC-2026-00017)")
    if len(n) > NUMBER_MAX_LENGTH:
        raise ValidationFailed(field, f"is too long for a certificate number (at most "
                                      f"{NUMBER_MAX_LENGTH} characters)")
    return n


def _exists(session: Session, query: str, number: str) -> Verification:
    if number_exists(session, number):
        return Verification(query=query, status="exists", number=number)
    return Verification(query=query, status="unknown")


def verify(session: Session, query: str) -> Verification:
    """One search box: a 64-hex-digit SHA-256 (the content or the PDF hash) shows the
    revision it belongs to; anything else is taken as a number and answers only whether
    it exists (:func:`check` with a code shows more).
    """
    q = (query or "").strip()
    if not q:
        raise ValidationFailed("q", "enter a certificate number or a SHA-256 hash")
    if len(q) > 100:
        raise ValidationFailed("q", "is too long for a number or a hash")
    if HASH_RE.match(q.lower()):
        return _by_hash(session, q, q.lower())
    return _exists(session, q, _number(q, "q"))


def normalized_code(code: str) -> str:
    """A typed code without spaces or dashes: upper case, or lower case when it is hex."""
    text = re.sub(r"[\s-]+", "", code or "")
    return text.lower() if HASH_PREFIX_RE.match(text.lower()) else text.upper()


def check(session: Session, number: str, code: str = "") -> Verification:
    """The public question: ``number`` alone, or ``number`` with its code.

    ``code``: the verification code, or the content or PDF hash (at least its first 16
    hex digits). A wrong code answers exactly like a number that does not exist.
    """
    n = _number(number, "n")
    c = normalized_code(code)
    query = f"{n} {c}".strip()
    if not c:
        return _exists(session, query, n)
    if CODE_RE.match(c):
        cert = by_number_and_code(session, n, c)
        how = "number and verification code"
    elif HASH_PREFIX_RE.match(c):
        cert = by_number_and_hash_prefix(session, n, c)
        how = "number and hash"
    else:
        raise ValidationFailed("c", "must be the 10 characters printed on the certificate "
                                    "(letters A-Z and digits 2-7), or at least the first 16 "
                                    "hex digits of its content hash")
    if cert is None:
        return Verification(query=query, status="unknown", with_code=True)
    return _answer(session, query, cert, how)


_CLAIM_RE = re.compile(rb"shopapp-certificate (BC-\d{4}-\d+) rev (\d+) data-sha256 ([0-9a-f]{64})")


def verify_file(session: Session, pdf: bytes) -> tuple[Verification, str]:
    """Verify a PDF file by the SHA-256 of its bytes.

    Returns the verification and a remark: when the bytes are unknown but the
    file claims to be one of our certificates (its PDF keywords), the remark
    says so — such a file is a copy that was changed, not a valid certificate.
    """
    digest = hashlib.sha256(pdf).hexdigest()
    cert = session.scalars(
        select(Certificate).where(Certificate.pdf_sha256 == digest)
        .options(defer(Certificate.pdf)).limit(1)
    ).first()
    if cert is not None:
        return _answer(session, digest, cert, "PDF hash"), ""
    remark = ""
    m = _CLAIM_RE.search(pdf)
    if m:
        remark = (f"The file calls itself {m.group(1).decode()} revision {m.group(2).decode()}, "
                  "but its bytes differ from the stored certificate: it has been altered or "
                  "re-saved. Ask the shop for the original or check the number on /verify.")
    return Verification(query=digest, status="unknown"), remark


# --------------------------------------------------------------------------- register


@dataclass(frozen=True)
class RegisterFilter:
    """Search of the certificate register (every field optional)."""

    number: str = ""
    customer: str = ""
    serial: str = ""
    rotor_type: str = ""
    date_from: dt.date | None = None
    date_to: dt.date | None = None
    state: str = ""

    def args(self) -> dict[str, str]:
        out = {f.name: getattr(self, f.name) for f in dataclasses.fields(self)}
        return {k: (v.isoformat() if isinstance(v, dt.date) else v) for k, v in out.items()
                if v not in (None, "")}


def _like(text: str) -> str:
    escaped = text.strip().replace("\\", "\\\\").replace("%", "\\%").replace("_", "\\_")
    return f"%{escaped}%"


def _day_start(d: dt.date) -> dt.datetime:
    return dt.datetime(d.year, d.month, d.day, tzinfo=dt.UTC)


def register_select(f: RegisterFilter) -> Select[Any]:
    """The register query: certificates matching ``f``, newest first, without PDF bytes."""
    if f.state and f.state not in ("issued", "void"):
        raise ValidationFailed("state", "choose issued or void")
    if f.date_from and f.date_to and f.date_from > f.date_to:
        raise ValidationFailed("date_to", "must not be before the from date")
    stmt = (
        select(Certificate)
        .join(Job, Certificate.job_id == Job.id)
        .join(Customer, Job.customer_id == Customer.id)
        .join(Rotor, Job.rotor_id == Rotor.id)
        .join(RotorType, Rotor.rotor_type_id == RotorType.id)
        .options(
            defer(Certificate.pdf), defer(Certificate.data_json),
            joinedload(Certificate.job).joinedload(Job.customer),
            joinedload(Certificate.job).joinedload(Job.rotor).joinedload(Rotor.rotor_type),
        )
    )
    conds: list[ColumnElement[bool]] = []
    if f.number.strip():
        conds.append(Certificate.number.ilike(_like(f.number), escape="\\"))
    if f.customer.strip():
        conds.append(Customer.name.ilike(_like(f.customer), escape="\\"))
    if f.serial.strip():
        conds.append(Rotor.serial_number.ilike(_like(f.serial), escape="\\"))
    if f.rotor_type.strip():
        conds.append(RotorType.part_number.ilike(_like(f.rotor_type), escape="\\"))
    if f.date_from:
        conds.append(Certificate.issued_at >= _day_start(f.date_from))
    if f.date_to:
        conds.append(Certificate.issued_at < _day_start(f.date_to + dt.timedelta(days=1)))
    if f.state:
        conds.append(Certificate.state == f.state)
    if conds:
        stmt = stmt.where(and_(*conds))
    return stmt.order_by(Certificate.issued_at.desc(), Certificate.id.desc())


def search(session: Session, f: RegisterFilter, *, page: int = 1, per_page: int = 25) -> Page[Any]:
    """One page of the register (two queries: count and page)."""
    return paginate(session, register_select(f), page=page, per_page=per_page, args=f.args())


# --------------------------------------------------------------------------- audit export


INDEX_COLUMNS = ("number", "revision", "state", "job", "customer", "serial", "issued_at",
                 "pdf_sha256", "file_name")


def file_name(cert: Certificate) -> str:
    return f"{cert.number}-rev{cert.revision}.pdf"


def audit_zip(session: Session, date_from: dt.date, date_to: dt.date) -> bytes:
    """Every certificate issued in ``[date_from, date_to]`` as one ZIP with ``index.csv``.

    Built in memory, at most :data:`MAX_ZIP_CERTIFICATES` certificates. File
    dates inside the ZIP are the issue times, so the same range gives the same
    ZIP bytes.
    """
    if date_from is None:
        raise ValidationFailed("date_from", "is required for an audit export")
    if date_to is None:
        raise ValidationFailed("date_to", "is required for an audit export")
    f = RegisterFilter(date_from=date_from, date_to=date_to)
    base = register_select(f)
    count = session.scalar(select(func.count()).select_from(base.order_by(None).subquery())) or 0
    if count > MAX_ZIP_CERTIFICATES:
        raise ValidationFailed(
            "date_to", f"the range holds {count} certificates; one ZIP holds at most "
                       f"{MAX_ZIP_CERTIFICATES}: choose a shorter range"
        )
    ids = list(session.scalars(
        select(Certificate.id).where(Certificate.id.in_(base.with_only_columns(Certificate.id)))
        .order_by(Certificate.issued_at, Certificate.number, Certificate.revision)
    ))
    buf = io.BytesIO()
    index = io.StringIO()
    writer = csv.writer(index, lineterminator="\n")
    writer.writerow(INDEX_COLUMNS)
    with zipfile.ZipFile(buf, "w") as zf:
        for chunk in _chunks(ids, 50):
            # Plain rows, not ORM objects: nothing piles up in the session's identity map.
            rows = session.execute(
                select(Certificate.number, Certificate.revision, Certificate.state,
                       Certificate.issued_at, Certificate.pdf_sha256, Certificate.pdf,
                       Job.number, Customer.name, Rotor.serial_number)
                .join(Job, Certificate.job_id == Job.id)
                .join(Customer, Job.customer_id == Customer.id)
                .join(Rotor, Job.rotor_id == Rotor.id)
                .where(Certificate.id.in_(chunk))
                .order_by(Certificate.issued_at, Certificate.number, Certificate.revision)
            ).all()
            for number, rev, state, issued_at, pdf_sha, pdf, job_no, customer, serial in rows:
                name = f"{number}-rev{rev}.pdf"
                info = zipfile.ZipInfo(name, date_time=_zip_time(issued_at))
                info.compress_type = zipfile.ZIP_STORED  # PDFs are compressed already
                zf.writestr(info, pdf)
                writer.writerow([number, rev, state, job_no, customer, serial,
                                 issued_at.isoformat(timespec="seconds"), pdf_sha, name])
        info = zipfile.ZipInfo("index.csv", date_time=_zip_time(_day_start(date_to)))
        info.compress_type = zipfile.ZIP_DEFLATED
        zf.writestr(info, index.getvalue().encode("utf-8"))
    return buf.getvalue()


def _chunks(items: Sequence[int], size: int) -> list[Sequence[int]]:
    return [items[i:i + size] for i in range(0, len(items), size)]


def _zip_time(moment: dt.datetime) -> tuple[int, int, int, int, int, int]:
    u = moment.astimezone(dt.UTC)
    return (max(u.year, 1980), u.month, u.day, u.hour, u.minute, u.second)

"""Certificates: the register's search, one certificate's metadata, its stored PDF byte
for byte, and the public verification — the certificate pages' queries."""

from __future__ import annotations

from flask import Blueprint, Response

from shopapp.api.operations import Call, operation
from shopapp.api.paging import page_of
from shopapp.api.schemas import (
    CertificateListQuery,
    CertificateOut,
    Page,
    VerificationOut,
    VerifyQuery,
)
from shopapp.certificates import register
from shopapp.core.web import get_or_404
from shopapp.models import Certificate

bp = Blueprint("api_certificates", __name__)


@operation(bp, "GET", "/certificates", summary="Search the certificate register",
           tag="certificates", action="read", query=CertificateListQuery,
           response=Page[CertificateOut])
def list_certificates(call: Call) -> Page[CertificateOut]:
    """Newest first; every filter optional (number, customer, serial and rotor type are
    contained-in searches)."""
    q: CertificateListQuery = call.query
    f = register.RegisterFilter(number=q.number, customer=q.customer, serial=q.serial,
                                rotor_type=q.rotor_type, date_from=q.date_from,
                                date_to=q.date_to, state=q.state)
    return page_of(call.session, register.register_select(f), q, CertificateOut)


@operation(bp, "GET", "/certificates/<int:cert_id>", summary="Read a certificate's metadata",
           tag="certificates", action="read", response=CertificateOut, errors=(404,))
def get_certificate(call: Call, cert_id: int) -> CertificateOut:
    return CertificateOut.model_validate(get_or_404(call.session, Certificate, cert_id))


@operation(bp, "GET", "/certificates/<int:cert_id>/pdf", summary="Download a certificate's PDF",
           tag="certificates", action="read", media_type="application/pdf", errors=(404,))
def certificate_pdf(call: Call, cert_id: int) -> Response:
    """The stored PDF, byte for byte (its SHA-256 is ``pdf_sha256``)."""
    cert = get_or_404(call.session, Certificate, cert_id)
    response = Response(cert.pdf, mimetype="application/pdf")
    response.headers["Content-Disposition"] = f'attachment; filename="{register.file_name(cert)}"'
    return response


@operation(bp, "GET", "/certificates/verify", summary="Verify a certificate (no token needed)",
           tag="certificates", action=None, query=VerifyQuery, response=VerificationOut)
def verify(call: Call) -> VerificationOut:
    """Is this certificate genuine, void or superseded? By number or by SHA-256, as the
    public /verify page."""
    v = register.verify(call.session, call.query.q)
    return VerificationOut.model_validate({**v.__dict__, "message": v.message,
                                           "lines": [{"label": a, "value": b} for a, b in v.lines]})

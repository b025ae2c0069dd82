"""Certificate pages: register and search, one certificate, downloads, issue, reissue,
void, rotor history PDFs, the job traveller and rotor tag, the signing key page, and the
public verification page ``/verify`` (no login, rate-limited, a PDF may be uploaded)."""

from __future__ import annotations

import datetime as dt
from collections.abc import Callable
from pathlib import Path
from typing import Any

from flask import (
    Blueprint,
    Response,
    abort,
    current_app,
    flash,
    redirect,
    render_template,
    request,
    url_for,
)
from flask_login import current_user
from werkzeug.routing import BuildError

from shopapp.certificates import issue as issuing
from shopapp.certificates import papers, pdfsign, queries, register, signing
from shopapp.certificates.forms import (
    HashForm,
    IssueForm,
    ReasonForm,
    RegisterSearchForm,
    UploadForm,
    VerifyForm,
    ZipForm,
)
from shopapp.certificates.ratelimit import SlidingWindowLimit
from shopapp.charts.svg import to_svg
from shopapp.core.errors import NotFound, ServiceError, ValidationFailed
from shopapp.core.extensions import db_session
from shopapp.core.forms import apply_errors, field_message
from shopapp.core.pagination import page_number
from shopapp.core.permissions import can
from shopapp.core.web import acting_user, get_or_404, page_size, requires
from shopapp.jobs import rotor_history
from shopapp.models import Certificate, Job, Rotor, RotorType, User
from shopapp.reports import certificate as certificate_report
from shopapp.reports import job_papers
from shopapp.reports import rotor_history as history_report

bp = Blueprint("certificates", __name__, template_folder="templates")

MAX_UPLOAD_BYTES = 20 * 1024 * 1024  # a certificate PDF is ~20 kB; 20 MB is generous
_FORM_OVERHEAD = 64 * 1024  # multipart boundaries, the CSRF token
VERIFY_REQUESTS_PER_MINUTE = 30  # per client address and server process (config overrides)
DEFAULT_TAG_SIZE = "62x29"  # mm, config ROTOR_TAG_SIZE_MM overrides
_LIMIT_KEY = "shopapp.verify_limit"


def _signing_dir() -> Path:
    return signing.signing_folder(current_app.instance_path)


def _base_url() -> str:
    return str(current_app.config.get("BASE_URL") or "")


@bp.record_once
def _install_verify_guard(state: Any) -> None:
    """Before anything reads the body of a /verify request (the CSRF check and the
    control-character guard read the form): the rate limit, then the upload size cap.

    Inserted first in the app's before-request list for that reason. The limit counts
    per client address in this process only (see :mod:`shopapp.certificates.ratelimit`);
    behind a reverse proxy every client has the proxy's address unless the proxy's
    forwarded address is trusted (not configured here).
    """
    app = state.app
    per_minute = int(app.config.get("VERIFY_REQUESTS_PER_MINUTE") or VERIFY_REQUESTS_PER_MINUTE)
    app.extensions[_LIMIT_KEY] = SlidingWindowLimit(per_minute, 60.0)

    def guard():  # type: ignore[no-untyped-def]
        if request.endpoint != "certificates.verify":
            return None
        wait = current_app.extensions[_LIMIT_KEY].hit(request.remote_addr or "unknown")
        if wait:
            page = render_template(
                "error.html", status=429, title="Too many checks",
                message=f"This address asked more than {per_minute} times in a minute. "
                        f"Try again in {wait} seconds.")
            return page, 429, {"Retry-After": str(wait)}
        if request.method == "POST":
            cap = MAX_UPLOAD_BYTES + _FORM_OVERHEAD
            if (request.content_length or 0) > cap:
                return _too_large(None)  # refused before a byte of the body is read
            request.max_content_length = cap  # a body without a declared length
        return None

    app.before_request_funcs.setdefault(None, []).insert(0, guard)


@bp.errorhandler(413)
def _too_large(_exc: Any):  # type: ignore[no-untyped-def]
    return render_template(
        "error.html", status=413, title="File too large",
        message=f"The file is larger than {MAX_UPLOAD_BYTES // (1024 * 1024)} MB; a "
                "certificate PDF is far smaller. Choose the certificate file itself.",
    ), 413


def _pdf(data: bytes, filename: str, *, inline: bool = False) -> Response:
    disposition = "inline" if inline else "attachment"
    return Response(data, mimetype="application/pdf", headers={
        "Content-Disposition": f'{disposition}; filename="{filename}"',
        "Cache-Control": "private, no-store",
    })


def job_link(job: Job) -> str | None:
    """The job's page, once the jobs area is there."""
    if "jobs.detail" not in current_app.view_functions:
        return None
    try:
        return url_for("jobs.detail", job_id=job.id)
    except BuildError:
        return None


# --------------------------------------------------------------------------- register


@bp.get("/certificates/")
@requires("read")
def index():  # type: ignore[no-untyped-def]
    form = RegisterSearchForm(request.args)
    sess = db_session()
    status = 200
    page = None
    if request.args and not form.validate():
        status = 422
    else:
        try:
            page = register.search(sess, form.filter(),
                                       page=page_number(request.args.get("page")),
                                       per_page=page_size())
        except ValidationFailed as exc:
            apply_errors(form, exc)
            status = 422
    zip_form = ZipForm(request.args if "date_from" in request.args else None)
    return render_template("certificates/index.html", form=form, page=page,
                           zip_form=zip_form, job_link=job_link), status


@bp.get("/certificates/<int:cert_id>")
@requires("read")
def detail(cert_id: int):  # type: ignore[no-untyped-def]
    sess = db_session()
    cert = get_or_404(sess, Certificate, cert_id)
    data = issuing.certificate_data(cert)
    plots = [to_svg(f) for f in certificate_report.polar_figures(data)]
    return render_template(
        "certificates/detail.html", cert=cert, data=data, plots=plots,
        lines=certificate_report.first_lines(data),
        revisions=queries.revisions(sess, cert.number),
        verification=register.verify(sess, cert.pdf_sha256),
        issue_form=IssueForm(), job_link=job_link(cert.job),
    )


@bp.get("/certificates/<int:cert_id>/pdf")
@requires("read")
def download(cert_id: int):  # type: ignore[no-untyped-def]
    cert = get_or_404(db_session(), Certificate, cert_id)
    return _pdf(cert.pdf, register.file_name(cert), inline=request.args.get("inline") == "1")


@bp.get("/certificates/audit.zip", endpoint="zip")
@requires("read")
def audit_zip():  # type: ignore[no-untyped-def]
    form = ZipForm(request.args)
    sess = db_session()
    if form.validate():
        start, end = form.range()
        try:
            data = register.audit_zip(sess, start, end)
        except ValidationFailed as exc:
            apply_errors(form, exc)
        else:
            name = f"certificates-{start.isoformat()}-to-{end.isoformat()}.zip"
            return Response(data, mimetype="application/zip", headers={
                "Content-Disposition": f'attachment; filename="{name}"',
                "Cache-Control": "private, no-store",
            })
    return render_template("certificates/index.html", form=RegisterSearchForm(None), page=None,
                           zip_form=form, job_link=job_link), 422


# --------------------------------------------------------------------------- issue, reissue, void


@bp.post("/certificates/issue/<int:job_id>")
@requires("issue_certificates")
def issue(job_id: int):  # type: ignore[no-untyped-def]
    sess = db_session()
    job = get_or_404(sess, Job, job_id)
    form = IssueForm()
    if not form.validate_on_submit():
        abort(400, description="The form expired; reload the page and try again.")
    try:
        cert = issuing.issue(sess, job, by=acting_user(), signing_dir=_signing_dir(),
                             base_url=_base_url())
        sess.commit()
    except ServiceError as exc:
        sess.rollback()
        return render_template("certificates/refused.html", job=job, message=exc.message,
                               job_link=job_link(job)), exc.status
    flash(f"Certificate {cert.number} revision {cert.revision} issued; job {job.number} is "
          "certified.", "success")
    return redirect(url_for("certificates.detail", cert_id=cert.id))


def _reason_page(cert: Certificate, form: ReasonForm, action: str, status: int = 200):  # type: ignore[no-untyped-def]
    return render_template("certificates/reason.html", cert=cert, form=form, action=action), status


def _with_reason(cert_id: int, action: str,
                 change: Callable[[Certificate, User, str], Certificate],
                 done: Callable[[Certificate, Certificate], str]):  # type: ignore[no-untyped-def]
    """The reason form of a reissue or a void: show it, or ``change`` and show the result.

    ``change(cert, by, reason)`` is the one use-case; ``done(old, result)`` the flash text.
    """
    sess = db_session()
    cert = get_or_404(sess, Certificate, cert_id)
    form = ReasonForm()
    if request.method == "GET":
        return _reason_page(cert, form, action)
    if not form.validate_on_submit():
        return _reason_page(cert, form, action, 422)
    try:
        result = change(cert, acting_user(), form.reason.data or "")
        sess.commit()
    except ValidationFailed as exc:
        sess.rollback()
        form.reason.errors = [field_message(form.reason, exc.errors.get("reason", exc.message))]
        return _reason_page(cert, form, action, 422)
    except ServiceError as exc:
        sess.rollback()
        form.reason.errors = [exc.message]
        return _reason_page(cert, form, action, exc.status)
    flash(done(cert, result), "success")
    return redirect(url_for("certificates.detail", cert_id=result.id))


@bp.route("/certificates/<int:cert_id>/reissue", methods=["GET", "POST"])
@requires("issue_certificates")
def reissue(cert_id: int):  # type: ignore[no-untyped-def]
    return _with_reason(
        cert_id, "reissue",
        lambda cert, by, reason: issuing.reissue(db_session(), cert, by=by, reason=reason,
                                                 signing_dir=_signing_dir(),
                                                 base_url=_base_url()),
        lambda old, new: (f"Revision {new.revision} of {new.number} issued; revision "
                          f"{old.revision} is void."),
    )


@bp.route("/certificates/<int:cert_id>/void", methods=["GET", "POST"])
@requires("issue_certificates")
def void(cert_id: int):  # type: ignore[no-untyped-def]
    return _with_reason(
        cert_id, "void",
        lambda cert, by, reason: issuing.void(db_session(), cert, by=by, reason=reason),
        lambda old, _void: f"{old.number} revision {old.revision} is void.",
    )


# --------------------------------------------------------------------------- rotor history


@bp.get("/rotors/<int:rotor_id>/history.pdf")
@requires("read")
def rotor_history_pdf(rotor_id: int):  # type: ignore[no-untyped-def]
    sess = db_session()
    rotor = get_or_404(sess, Rotor, rotor_id)
    try:
        data = rotor_history.build(sess, rotor)
    except NotFound as exc:
        abort(404, description=exc.message)
    return _pdf(history_report.render(data), f"rotor-history-{rotor.serial_number}.pdf")


@bp.get("/rotor-types/<int:rotor_type_id>/history.pdf")
@requires("read")
def rotor_type_history_pdf(rotor_type_id: int):  # type: ignore[no-untyped-def]
    sess = db_session()
    rt = get_or_404(sess, RotorType, rotor_type_id)
    data = rotor_history.build_for_type(sess, rt)
    return _pdf(history_report.render_type(data), f"rotor-type-history-{rt.part_number}.pdf")


# --------------------------------------------------------------------------- public verification


def _known_signers() -> list[signing.SignerCertificate] | None:
    """The shop's signer certificates; None when there are none, or the key file is damaged
    (the public page then names the signer without comparing; the signing page says why)."""
    try:
        return signing.known_certificates(_signing_dir()) or None
    except signing.SigningKeyBroken:
        current_app.logger.exception("signing key unreadable")
        return None


@bp.route("/verify", methods=["GET", "POST"])
def verify():  # type: ignore[no-untyped-def]
    """Public: anyone holding a certificate may check it (no login).

    GET ``n`` (+ ``c``): the number alone says only whether it exists; with its code
    the state and the identification lines. GET ``q``: the older search box (a hash,
    or a number). POST: an uploaded PDF (CSRF token required), checked by its bytes
    against the register and by its own signature and embedded data.
    """
    sess = db_session()
    has_query = "n" in request.args or "c" in request.args
    form = VerifyForm(request.args if has_query else None)
    hash_form = HashForm(request.args if "q" in request.args else None)
    upload = UploadForm()
    result: register.Verification | None = None
    proof: pdfsign.FileProof | None = None
    remark = ""
    status = 200
    try:
        if request.method == "POST":
            if upload.validate_on_submit():
                pdf = upload.file.data.read(MAX_UPLOAD_BYTES + 1)
                if len(pdf) > MAX_UPLOAD_BYTES:
                    return _too_large(None)
                result, remark = register.verify_file(sess, pdf)
                proof = pdfsign.inspect(pdf, _known_signers())
            else:
                status = 422
        elif "q" in request.args:
            if hash_form.validate():
                result = register.verify(sess, hash_form.q.data or "")
            else:
                status = 422
        elif has_query:
            if form.validate():
                result = register.check(sess, form.n.data or "", form.c.data or "")
            else:
                status = 422
    except ValidationFailed as exc:
        target = {"n": form.n, "c": form.c, "q": hash_form.q}.get(exc.field, form.n)
        target.errors = [field_message(target, exc.errors.get(exc.field, exc.message))]
        status = 422
    return render_template("certificates/verify.html", form=form, hash_form=hash_form,
                           upload=upload, result=result, proof=proof, remark=remark,
                           max_mb=MAX_UPLOAD_BYTES // (1024 * 1024)), status


# --------------------------------------------------------------------------- signing key


@bp.get("/certificates/signing")
@requires("view_signing_key")
def signing_page():  # type: ignore[no-untyped-def]
    """Read-only: which key signs the certificates now, and the retired ones."""
    problem = ""
    try:
        overview = signing.overview(_signing_dir())
    except signing.SigningKeyBroken as exc:
        overview, problem = None, exc.message
    base_problem = ""
    try:
        base = issuing.public_base(_base_url())
    except ValidationFailed as exc:
        base, base_problem = "", exc.message
    return render_template("certificates/signing.html", overview=overview, problem=problem,
                           base=base, base_problem=base_problem,
                           now=dt.datetime.now(dt.UTC),
                           warn_days=signing.EXPIRY_WARNING_DAYS)


# --------------------------------------------------------------------------- job papers


def _job_url(job: Job) -> str:
    """The job page's address for a QR code: ``BASE_URL`` + its path (the path alone when
    BASE_URL is not set; then no QR code is printed)."""
    path = job_link(job) or f"/jobs/{job.id}"
    try:
        return issuing.public_base(_base_url()) + path
    except ValidationFailed:
        return path


@bp.get("/jobs/<int:job_id>/traveller.pdf")
@requires("read")
def job_traveller(job_id: int):  # type: ignore[no-untyped-def]
    sess = db_session()
    job = get_or_404(sess, Job, job_id)
    data = papers.traveller(sess, job, by=acting_user(), job_url=_job_url(job))
    return _pdf(job_papers.render_traveller(data), f"traveller-{job.number}.pdf", inline=True)


@bp.get("/jobs/<int:job_id>/rotor-tag.pdf")
@requires("read")
def rotor_tag(job_id: int):  # type: ignore[no-untyped-def]
    sess = db_session()
    job = get_or_404(sess, Job, job_id)
    setting = str(current_app.config.get("ROTOR_TAG_SIZE_MM") or DEFAULT_TAG_SIZE)
    try:
        size = job_papers.parse_tag_size(setting)
    except ValueError as exc:
        raise ValidationFailed("ROTOR_TAG_SIZE_MM", str(exc)) from None
    data = papers.rotor_tag(sess, job, by=acting_user(), job_url=_job_url(job), size_mm=size)
    return _pdf(job_papers.render_tag(data), f"rotor-tag-{job.number}.pdf", inline=True)


# --------------------------------------------------------------------------- panels


@bp.app_context_processor
def _panels() -> dict[str, Any]:
    """Helpers for the panels other areas include (start page, job page)."""

    def certificate_queue(limit: int = 8) -> tuple[list[Job], int]:
        return queries.certification_queue(db_session(), limit=limit)

    def job_certificates(job: Job) -> list[Certificate]:
        return queries.job_certificates(db_session(), job)

    def may_issue() -> bool:
        return can(current_user, "issue_certificates") if current_user else False

    return {"certificate_queue": certificate_queue, "job_certificates": job_certificates,
            "may_issue_certificates": may_issue, "certificate_issue_form": IssueForm}

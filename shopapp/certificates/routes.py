"""Certificate pages: register and search, one certificate, downloads, issue, reissue,
void, rotor history PDFs, and the public verification page ``/verify`` (no login)."""

from __future__ import annotations

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
from sqlalchemy import select
from sqlalchemy.orm import joinedload
from werkzeug.routing import BuildError

from shopapp.certificates import services as certificates
from shopapp.certificates.forms import (
    IssueForm,
    ReasonForm,
    RegisterSearchForm,
    VerifyForm,
    ZipForm,
)
from shopapp.charts.svg import to_svg
from shopapp.core.errors import NotFound, ServiceError, ValidationFailed
from shopapp.core.extensions import db_session
from shopapp.core.pagination import page_number
from shopapp.core.permissions import can
from shopapp.core.web import acting_user, requires
from shopapp.jobs import rotor_history
from shopapp.models import Certificate, Job, Rotor, RotorType
from shopapp.reports import certificate as certificate_report
from shopapp.reports import rotor_history as history_report

bp = Blueprint("certificates", __name__, template_folder="templates")

PER_PAGE = 25


def _pdf(data: bytes, filename: str, *, inline: bool = False) -> Response:
    disposition = "inline" if inline else "attachment"
    return Response(data, mimetype="application/pdf", headers={
        "Content-Disposition": f'{disposition}; filename="{filename}"',
        "Cache-Control": "private, no-store",
    })


def _cert_or_404(cert_id: int) -> Certificate:
    sess = db_session()
    cert = sess.scalars(
        select(Certificate).where(Certificate.id == cert_id)
        .options(joinedload(Certificate.job).joinedload(Job.customer),
                 joinedload(Certificate.job).joinedload(Job.rotor).joinedload(Rotor.rotor_type))
    ).first()
    if cert is None:
        abort(404, description=f"No certificate with id {cert_id}.")
    return cert


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
            page = certificates.search(sess, form.filter(),
                                       page=page_number(request.args.get("page")),
                                       per_page=PER_PAGE)
        except ValidationFailed as exc:
            for name, message in exc.errors.items():
                if name in form:
                    form[name].errors = [message]
            status = 422
    zip_form = ZipForm(request.args if "date_from" in request.args else None)
    return render_template("certificates/index.html", form=form, page=page,
                           zip_form=zip_form, job_link=job_link), status


@bp.get("/certificates/<int:cert_id>")
@requires("read")
def detail(cert_id: int):  # type: ignore[no-untyped-def]
    cert = _cert_or_404(cert_id)
    sess = db_session()
    data = certificates.certificate_data(cert)
    plots = [to_svg(f) for f in certificate_report.polar_figures(data)]
    return render_template(
        "certificates/detail.html", cert=cert, data=data, plots=plots,
        lines=certificate_report.first_lines(data),
        revisions=certificates.revisions(sess, cert.number),
        verification=certificates.verify(sess, cert.pdf_sha256),
        issue_form=IssueForm(), job_link=job_link(cert.job),
    )


@bp.get("/certificates/<int:cert_id>/pdf")
@requires("read")
def download(cert_id: int):  # type: ignore[no-untyped-def]
    cert = _cert_or_404(cert_id)
    return _pdf(cert.pdf, certificates.file_name(cert), inline=request.args.get("inline") == "1")


@bp.get("/certificates/audit.zip", endpoint="zip")
@requires("read")
def audit_zip():  # type: ignore[no-untyped-def]
    form = ZipForm(request.args)
    sess = db_session()
    if form.validate():
        start, end = form.range()
        try:
            data = certificates.audit_zip(sess, start, end)
        except ValidationFailed as exc:
            for name, message in exc.errors.items():
                if name in form:
                    form[name].errors = [message]
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
    job = sess.scalars(
        select(Job).where(Job.id == job_id)
        .options(joinedload(Job.customer), joinedload(Job.machine),
                 joinedload(Job.rotor).joinedload(Rotor.rotor_type))
    ).first()
    if job is None:
        abort(404, description=f"No job with id {job_id}.")
    form = IssueForm()
    if not form.validate_on_submit():
        abort(400, description="The form expired; reload the page and try again.")
    try:
        cert = certificates.issue(sess, job, by=acting_user())
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


@bp.route("/certificates/<int:cert_id>/reissue", methods=["GET", "POST"])
@requires("issue_certificates")
def reissue(cert_id: int):  # type: ignore[no-untyped-def]
    cert = _cert_or_404(cert_id)
    form = ReasonForm()
    if request.method == "GET":
        return _reason_page(cert, form, "reissue")
    if not form.validate_on_submit():
        return _reason_page(cert, form, "reissue", 422)
    sess = db_session()
    try:
        new = certificates.reissue(sess, cert, by=acting_user(), reason=form.reason.data or "")
        sess.commit()
    except ValidationFailed as exc:
        sess.rollback()
        form.reason.errors = [exc.errors.get("reason", exc.message)]
        return _reason_page(cert, form, "reissue", 422)
    except ServiceError as exc:
        sess.rollback()
        form.reason.errors = [exc.message]
        return _reason_page(cert, form, "reissue", exc.status)
    flash(f"Revision {new.revision} of {new.number} issued; revision {cert.revision} is void.",
          "success")
    return redirect(url_for("certificates.detail", cert_id=new.id))


@bp.route("/certificates/<int:cert_id>/void", methods=["GET", "POST"])
@requires("issue_certificates")
def void(cert_id: int):  # type: ignore[no-untyped-def]
    cert = _cert_or_404(cert_id)
    form = ReasonForm()
    if request.method == "GET":
        return _reason_page(cert, form, "void")
    if not form.validate_on_submit():
        return _reason_page(cert, form, "void", 422)
    sess = db_session()
    try:
        certificates.void(sess, cert, by=acting_user(), reason=form.reason.data or "")
        sess.commit()
    except ValidationFailed as exc:
        sess.rollback()
        form.reason.errors = [exc.errors.get("reason", exc.message)]
        return _reason_page(cert, form, "void", 422)
    except ServiceError as exc:
        sess.rollback()
        form.reason.errors = [exc.message]
        return _reason_page(cert, form, "void", exc.status)
    flash(f"{cert.number} revision {cert.revision} is void.", "success")
    return redirect(url_for("certificates.detail", cert_id=cert.id))


# --------------------------------------------------------------------------- rotor history


@bp.get("/rotors/<int:rotor_id>/history.pdf")
@requires("read")
def rotor_history_pdf(rotor_id: int):  # type: ignore[no-untyped-def]
    sess = db_session()
    rotor = sess.get(Rotor, rotor_id)
    if rotor is None:
        abort(404, description=f"No rotor with id {rotor_id}.")
    try:
        data = rotor_history.build(sess, rotor)
    except NotFound as exc:
        abort(404, description=exc.message)
    return _pdf(history_report.render(data), f"rotor-history-{rotor.serial_number}.pdf")


@bp.get("/rotor-types/<int:rotor_type_id>/history.pdf")
@requires("read")
def rotor_type_history_pdf(rotor_type_id: int):  # type: ignore[no-untyped-def]
    sess = db_session()
    rt = sess.get(RotorType, rotor_type_id)
    if rt is None:
        abort(404, description=f"No rotor type with id {rotor_type_id}.")
    data = rotor_history.build_for_type(sess, rt)
    return _pdf(history_report.render_type(data), f"rotor-type-history-{rt.part_number}.pdf")


# --------------------------------------------------------------------------- public verification


@bp.get("/verify")
def verify():  # type: ignore[no-untyped-def]
    """Public: anyone holding a certificate may check it (GET, read-only, no login)."""
    form = VerifyForm(request.args if "q" in request.args else None)
    result = None
    status = 200
    if "q" in request.args:
        if form.validate():
            try:
                result = certificates.verify(db_session(), form.q.data or "")
            except ValidationFailed as exc:
                form.q.errors = [exc.errors.get("q", exc.message)]
                status = 422
        else:
            status = 422
    return render_template("certificates/verify.html", form=form, result=result), status


# --------------------------------------------------------------------------- panels


@bp.app_context_processor
def _panels() -> dict[str, Any]:
    """Helpers for the panels other areas include (start page, job page)."""

    def certificate_queue(limit: int = 8) -> tuple[list[Job], int]:
        return certificates.certification_queue(db_session(), limit=limit)

    def job_certificates(job: Job) -> list[Certificate]:
        return certificates.job_certificates(db_session(), job)

    def may_issue() -> bool:
        return can(current_user, "issue_certificates") if current_user else False

    return {"certificate_queue": certificate_queue, "job_certificates": job_certificates,
            "may_issue_certificates": may_issue, "certificate_issue_form": IssueForm}

"""Intake pages: a machine's run-file mapping, and a run file's preview and import.

Thin (docs/architecture.md, "Inside a feature package"): parse the form, call one
use-case of :mod:`shopapp.intake.mappings` or :mod:`shopapp.intake.imports`, commit
once, render. The preview writes nothing; its bytes wait on the server under their hash
(:mod:`shopapp.intake.pending`) and the confirmation imports exactly those bytes, only
when this browser session previewed them.
"""

from __future__ import annotations

from typing import Any

from flask import (
    Blueprint,
    abort,
    current_app,
    flash,
    redirect,
    render_template,
    request,
    session,
    url_for,
)

from shopapp.core.display import counted
from shopapp.core.errors import ServiceError, ValidationFailed
from shopapp.core.extensions import db_session
from shopapp.core.forms import apply_errors
from shopapp.core.web import acting_user, get_or_404, once, requires
from shopapp.intake import files, imports, mappings, pending
from shopapp.intake.forms import FIELD_LABELS, ConfirmImportForm, MappingForm, UploadForm
from shopapp.models import Job, Machine

bp = Blueprint("intake", __name__, template_folder="templates")

_FORM_OVERHEAD = 64 * 1024
_PREVIEWED = "intake_previewed"
PREVIEW_ROWS = 10


@bp.before_request
def _size_cap():  # type: ignore[no-untyped-def]
    """Refuse an upload above the file limit before its body is read."""
    if request.method == "POST" and request.endpoint in ("intake.preview", "intake.mapping"):
        cap = files.MAX_FILE_BYTES + _FORM_OVERHEAD
        if (request.content_length or 0) > cap:
            return _too_large()
        request.max_content_length = cap  # a body without a declared length
    return None


def _too_large():  # type: ignore[no-untyped-def]
    return render_template(
        "error.html", status=413, title="File too large",
        message=f"The file is larger than {files.MAX_FILE_BYTES // (1024 * 1024)} MiB "
                f"({files.MAX_FILE_BYTES} bytes), the most a run file may have. Split it "
                "into smaller files."), 413


@bp.errorhandler(413)
def _413(_exc: Any):  # type: ignore[no-untyped-def]
    return _too_large()


def _upload_form(job: Job | None) -> UploadForm:
    form = UploadForm()
    form.machine_id.choices = mappings.machine_choices(db_session())
    if job is not None:
        form.job_id.data = str(job.id)
    return form


@bp.get("/import")
@requires("work_jobs")
def upload():  # type: ignore[no-untyped-def]
    sess = db_session()
    ident = _job_id(request.args.get("job"))
    job = get_or_404(sess, Job, ident) if ident is not None else None
    return render_template("intake/upload.html", form=_upload_form(job), job=job,
                           max_bytes=files.MAX_FILE_BYTES)


def _job_id(raw: Any) -> int | None:
    """A job id from a form or the query string; None when there is none (404 if junk)."""
    text = str(raw or "").strip()
    if not text:
        return None
    if not (text.isascii() and text.isdigit() and len(text) <= 9):
        abort(404)
    return int(text)


def _job_of(form: Any) -> Job | None:
    ident = _job_id(form.job_id.data)
    return get_or_404(db_session(), Job, ident) if ident is not None else None


@bp.post("/import/preview")
@requires("work_jobs")
def preview():  # type: ignore[no-untyped-def]
    sess = db_session()
    form = UploadForm()
    form.machine_id.choices = mappings.machine_choices(sess)
    job = _job_of(form)
    upload_file = form.file.data
    if not form.validate_on_submit() or upload_file is None or not upload_file.filename:
        form.file.errors = [*form.file.errors, "choose the run file"]  # type: ignore[list-item]
        return render_template("intake/upload.html", form=form, job=job,
                               max_bytes=files.MAX_FILE_BYTES), 422
    data = upload_file.stream.read(files.MAX_FILE_BYTES + 1)
    machine = job.machine if job is not None else mappings.machine_or_none(
        sess, form.machine_id.data)
    plan = imports.plan_file(sess, data, file_name=upload_file.filename, machine=machine,
                             by=acting_user())
    sess.rollback()
    confirm = None
    if plan.ok:
        pending.put(current_app.instance_path, plan.sha256, data)
        session[_PREVIEWED] = plan.sha256
        confirm = ConfirmImportForm(formdata=None, sha256=plan.sha256,
                                    file_name=plan.file_name,
                                    machine_id=str(machine.id) if machine else "",
                                    job_id=str(job.id) if job else "")
    return render_template("intake/preview.html", plan=plan, job=job, machine=machine,
                           confirm=confirm), (200 if plan.ok else 422)


@bp.post("/import/confirm")
@requires("work_jobs")
def confirm():  # type: ignore[no-untyped-def]
    sess = db_session()
    form = ConfirmImportForm()
    job = _job_of(form)
    back = (url_for("jobs.detail", job_id=job.id) + "#runs" if job is not None
            else url_for("jobs.index"))
    spend = once(sess, form, lambda _spent: back)
    sha = str(form.sha256.data or "")
    data = pending.get(current_app.instance_path, sha) if form.validate_on_submit() else None
    if data is None or session.get(_PREVIEWED) != sha:
        flash("That file is not waiting for an import any more: preview it again.", "error")
        return redirect(url_for("intake.upload", job=job.id) if job else url_for("intake.upload"))
    machine = mappings.machine_or_none(sess, form.machine_id.data)
    try:
        plan = imports.import_file(sess, data, file_name=str(form.file_name.data or ""),
                                   machine=machine, by=acting_user(), source="upload",
                                   expect_sha256=sha)
        spend(None)
        sess.commit()
    except imports.ImportRefused as exc:
        sess.rollback()
        # Something changed since the preview (a job's state, another import): say what.
        return render_template("intake/preview.html", plan=exc.plan, job=job, machine=machine,
                               confirm=None), 409
    except ServiceError as exc:
        sess.rollback()
        flash(exc.message, "error")
        return redirect(back)
    pending.drop(current_app.instance_path, sha)
    session.pop(_PREVIEWED, None)
    jobs = ", ".join(sorted({r.job_number for r in plan.runs}))
    flash(f"Imported {counted(len(plan.runs), 'run')} from {plan.file_name} into {jobs}.",
          "success")
    return redirect(back)


@bp.route("/machines/<int:machine_id>/run-file-mapping", methods=["GET", "POST"])
@requires("edit_machines")
def mapping(machine_id: int):  # type: ignore[no-untyped-def]
    sess = db_session()
    machine = get_or_404(sess, Machine, machine_id)
    saved = mappings.mapping_of(sess, machine)
    form = MappingForm(obj=saved)
    if request.method == "GET" and saved is not None:
        for name, header in saved.columns.items():
            getattr(form, f"column_{name}").data = header
        form.reading_unit.data = saved.reading_unit or ""
    rows: list[files.Row] = []
    loose: list[str] = []
    status = 200
    if request.method == "POST":
        if not form.validate_on_submit():
            status = 422
        elif form.save.data:
            try:
                mappings.save_mapping(sess, machine, form.values(), by=acting_user())
                sess.commit()
            except ValidationFailed as exc:
                sess.rollback()
                loose = list(apply_errors(form, exc))
                status = 422
            else:
                flash(f"Run file mapping of {machine.name} saved.", "success")
                return redirect(url_for("machines.detail", machine_id=machine.id))
        else:
            sample = form.sample.data
            if sample is None or not sample.filename:
                form.sample.errors = ["choose a sample export to preview"]  # type: ignore[assignment]
                status = 422
            else:
                try:
                    rows = mappings.preview(sample.stream.read(files.MAX_FILE_BYTES + 1),
                                            form.values()).rows[:PREVIEW_ROWS]
                except ValidationFailed as exc:
                    loose = list(apply_errors(form, exc))
                    status = 422
    return render_template("intake/mapping.html", form=form, machine=machine, saved=saved,
                           rows=rows, loose=loose, fields=files.FIELDS, labels=FIELD_LABELS,
                           preview_rows=PREVIEW_ROWS), status

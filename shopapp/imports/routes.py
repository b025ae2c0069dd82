"""The import page: templates to download, upload and preview a file, apply it.

Customers, rotor types and rotors need ``edit_registry`` (the same people who edit them
on their pages); past jobs need ``import_history`` (quality and admin: README, "Who may
do what"). A preview writes nothing; the bytes previewed are kept on the server under
their SHA-256 (:mod:`shopapp.imports.stash`) and exactly those are applied on
confirmation, in one transaction (:func:`shopapp.imports.service.apply`).
"""

from __future__ import annotations

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

from shopapp.core.errors import ValidationFailed
from shopapp.core.extensions import db_session
from shopapp.core.web import acting_user, once, requires
from shopapp.imports import files, service, stash
from shopapp.imports.forms import ApplyForm, UploadForm
from shopapp.imports.kinds import KINDS, template_csv
from shopapp.models import ImportBatch

bp = Blueprint("imports", __name__, url_prefix="/imports", template_folder="templates")

REGISTRY_KINDS = ("customers", "rotor-types", "rotors")
HISTORY_KINDS = ("jobs",)
PREVIEW_ROWS = 200  # rows shown besides the refused ones; the counts cover every row
_FORM_OVERHEAD = 64 * 1024  # multipart boundaries, the CSRF token


@bp.before_request
def _cap_upload():  # type: ignore[no-untyped-def]
    if request.method == "POST":
        cap = files.MAX_FILE_BYTES + _FORM_OVERHEAD
        if (request.content_length or 0) > cap:
            return _too_large(None)  # refused before a byte of the body is read
        request.max_content_length = cap  # a body without a declared length
    return None


@bp.errorhandler(413)
def _too_large(_exc: Any):  # type: ignore[no-untyped-def]
    return render_template(
        "error.html", status=413, title="File too large",
        message=f"The file is larger than {files.MAX_FILE_BYTES // (1024 * 1024)} MB. Split "
                "it into several files and import them one after the other.",
    ), 413


def _folder() -> Path:
    return Path(current_app.instance_path) / "imports"


@bp.get("/")
@requires("read")
def index():  # type: ignore[no-untyped-def]
    return render_template("imports/index.html", kinds=KINDS, limit_mb=files.MAX_FILE_BYTES
                           // (1024 * 1024), max_rows=files.MAX_ROWS)


@bp.get("/template")
@requires("read")
def template():  # type: ignore[no-untyped-def]
    kind = request.args.get("kind", "customers")
    if kind not in KINDS:
        abort(404, description=f"no template for {kind[:30]!r}")
    return Response(template_csv(KINDS[kind]), mimetype="text/csv", headers={
        "Content-Disposition": f'attachment; filename="shopapp-{kind}-template.csv"'})


@bp.route("/registry", methods=["GET", "POST"])
@requires("edit_registry")
def registry():  # type: ignore[no-untyped-def]
    return _upload(REGISTRY_KINDS, "imports.registry_apply")


@bp.post("/registry/apply")
@requires("edit_registry")
def registry_apply():  # type: ignore[no-untyped-def]
    return _apply(REGISTRY_KINDS, "imports.registry")


@bp.route("/jobs", methods=["GET", "POST"])
@requires("import_history")
def jobs():  # type: ignore[no-untyped-def]
    return _upload(HISTORY_KINDS, "imports.jobs_apply")


@bp.post("/jobs/apply")
@requires("import_history")
def jobs_apply():  # type: ignore[no-untyped-def]
    return _apply(HISTORY_KINDS, "imports.jobs")


def _upload_page(form: UploadForm, kinds: tuple[str, ...], status: int,
                 loose: tuple[str, ...] = ()) -> Any:
    return render_template("imports/upload.html", form=form, kinds=[KINDS[k] for k in kinds],
                           loose=loose, limit_mb=files.MAX_FILE_BYTES // (1024 * 1024)), status


def _upload(kinds: tuple[str, ...], apply_endpoint: str) -> Any:
    form = UploadForm()
    form.kind.choices = [(k, KINDS[k].label) for k in kinds]
    if request.method == "GET":
        return _upload_page(form, kinds, 200)
    if not form.validate_on_submit():
        return _upload_page(form, kinds, 422)
    upload = form.file.data
    data = upload.read(files.MAX_FILE_BYTES + 1)
    name = Path(upload.filename or "upload.csv").name[:255]
    session = db_session()
    try:
        sheet = files.read_sheet(data, name)
        report = service.preview(session, by=acting_user(), kind=form.kind.data, sheet=sheet)
    except ValidationFailed as exc:
        session.rollback()
        form.file.errors = [exc.message.removeprefix("file: ")]
        return _upload_page(form, kinds, 422)
    session.rollback()  # the preview wrote nothing; end its transaction
    confirm = None
    if not report.refused:
        sha256 = stash.put(_folder(), data)
        # Drawn fresh (not from the upload post): its own one-time token.
        confirm = ApplyForm(formdata=None, kind=form.kind.data, sha256=sha256, file_name=name)
    return _preview_page(report, confirm, apply_endpoint, 200 if confirm else 422)


def _preview_page(report: service.ImportReport, confirm: ApplyForm | None,
                  apply_endpoint: str, status: int) -> Any:
    others = [r for r in report.rows if r.action != "refused"][:PREVIEW_ROWS]
    return render_template("imports/preview.html", report=report, refused=report.refused,
                           others=others, shown=PREVIEW_ROWS, confirm=confirm,
                           apply_endpoint=apply_endpoint, kind=KINDS[report.kind]), status


def _apply(kinds: tuple[str, ...], upload_endpoint: str) -> Any:
    form = ApplyForm()
    session = db_session()
    spend = once(session, form, lambda _spent: url_for("imports.index"))
    if not form.validate_on_submit() or form.kind.data not in kinds:
        abort(400, description="The confirmation does not name a previewed file of a kind "
                               "this page imports. Nothing was imported.")
    try:
        data = stash.get(_folder(), form.sha256.data)
        sheet = files.read_sheet(data, form.file_name.data)
        report = service.apply(session, by=acting_user(), kind=form.kind.data, sheet=sheet)
        spend(session.get(ImportBatch, report.batch_id))
        session.commit()
    except service.ImportRefused as exc:
        # The database changed since the preview (someone else's edit): show why now.
        session.rollback()
        return _preview_page(exc.report, None, "", 422)
    except ValidationFailed as exc:
        session.rollback()
        flash(exc.message, "error")
        return redirect(url_for(upload_endpoint))
    stash.drop(_folder(), report.sha256)
    flash(f"Imported {report.file_name}: {report.summary()}.", "success")
    return redirect(url_for("imports.index"))

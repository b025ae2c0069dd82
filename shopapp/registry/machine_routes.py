"""The shop's balancing machines: list, create, edit, retire, and a machine's page."""

from __future__ import annotations

from flask import Blueprint, flash, redirect, render_template, request, url_for
from flask_login import current_user
from sqlalchemy import select

from shopapp.core.errors import ValidationFailed
from shopapp.core.extensions import db_session
from shopapp.core.forms import ConfirmForm, apply_errors
from shopapp.core.pagination import page_number, paginate
from shopapp.core.web import get_or_404, page_size, requires, toggle_archive
from shopapp.models import Machine, MachineVerification, User
from shopapp.registry import services as registry
from shopapp.registry.machine_forms import MachineForm

bp = Blueprint("machines", __name__, url_prefix="/machines", template_folder="templates")


@bp.get("/")
@requires("read")
def index():  # type: ignore[no-untyped-def]
    archived = request.args.get("archived") == "1"
    page = paginate(
        db_session(),
        registry.machines_stmt(include_archived=archived),
        page=page_number(request.args.get("page")),
        per_page=page_size(),
        args={"archived": "1" if archived else ""},
    )
    return render_template("machines/index.html", page=page, archived=archived)


def _form_page(form: MachineForm, machine: Machine | None, status: int, loose=()):  # type: ignore[no-untyped-def]
    return render_template("machines/form.html", form=form, machine=machine, loose=loose), status


@bp.route("/new", methods=["GET", "POST"])
@requires("edit_machines")
def new():  # type: ignore[no-untyped-def]
    form = MachineForm()
    if request.method == "GET":
        return _form_page(form, None, 200)
    if not form.validate_on_submit():
        return _form_page(form, None, 422)
    sess = db_session()
    try:
        machine = registry.create_machine(
            sess, by=current_user._get_current_object(), **form.values()
        )
        sess.commit()
    except ValidationFailed as exc:
        sess.rollback()
        return _form_page(form, None, 422, apply_errors(form, exc))
    flash(f"Machine {machine.name} added.", "success")
    return redirect(url_for("machines.detail", machine_id=machine.id))


@bp.route("/<int:machine_id>/edit", methods=["GET", "POST"])
@requires("edit_machines")
def edit(machine_id: int):  # type: ignore[no-untyped-def]
    sess = db_session()
    machine = get_or_404(sess, Machine, machine_id)
    form = MachineForm(obj=machine)
    if request.method == "GET":
        return _form_page(form, machine, 200)
    if not form.validate_on_submit():
        return _form_page(form, machine, 422)
    try:
        registry.update_machine(
            sess, machine, by=current_user._get_current_object(), **form.values()
        )
        sess.commit()
    except ValidationFailed as exc:
        sess.rollback()
        machine = get_or_404(sess, Machine, machine_id)
        return _form_page(form, machine, 422, apply_errors(form, exc))
    flash("Machine saved.", "success")
    return redirect(url_for("machines.detail", machine_id=machine_id))


@bp.get("/<int:machine_id>")
@requires("read")
def detail(machine_id: int, status: int = 200, archive_error: str | None = None):  # type: ignore[no-untyped-def]
    sess = db_session()
    machine = get_or_404(sess, Machine, machine_id)
    verifications = paginate(
        sess,
        select(MachineVerification, User.full_name)
        .outerjoin(User, User.id == MachineVerification.performed_by_id)
        .where(MachineVerification.machine_id == machine.id)
        .order_by(MachineVerification.performed_on.desc(), MachineVerification.id.desc()),
        page=page_number(request.args.get("page")),
        per_page=page_size(),
        args={"machine_id": machine.id},
        scalars=False,
    )
    return (
        render_template(
            "machines/detail.html",
            machine=machine,
            verifications=verifications,
            confirm=ConfirmForm(),
            archive_error=archive_error,
        ),
        status,
    )


@bp.post("/<int:machine_id>/archive")
@requires("edit_machines")
def archive(machine_id: int):  # type: ignore[no-untyped-def]
    sess = db_session()
    machine = get_or_404(sess, Machine, machine_id)
    refused = toggle_archive(
        sess, machine, archive=registry.archive_machine, unarchive=registry.unarchive_machine,
        on_refused=lambda msg: detail(machine_id, status=422, archive_error=msg),
        done=lambda restored: f"{machine.name} {'back in service' if restored else 'retired'}.",
    )
    if refused is not None:
        return refused
    return redirect(url_for("machines.detail", machine_id=machine_id))

"""The shop's balancing machines: list, create, edit, retire, and a machine's page.

The machine page shows the machine's verification register through the panel the
traceability feature provides (``traceability/_machine_panel.html``).
"""

from __future__ import annotations

from flask import Blueprint, render_template, request, url_for

from shopapp.core.extensions import db_session
from shopapp.core.forms import ConfirmForm
from shopapp.core.web import (
    acting_user,
    form_page,
    get_or_404,
    request_page,
    requires,
    submit_form,
)
from shopapp.models import Machine
from shopapp.registry import machines, queries
from shopapp.registry.forms import READING_UNIT_LABELS, MachineForm
from shopapp.registry.pages import archive_button, drawn_on_record

bp = Blueprint("machines", __name__, url_prefix="/machines", template_folder="templates")


@bp.get("/")
@requires("read")
def index():  # type: ignore[no-untyped-def]
    archived = request.args.get("archived") == "1"
    page = request_page(db_session(), queries.machines_stmt(include_archived=archived),
                        {"archived": "1" if archived else ""})
    return render_template("machines/index.html", page=page, archived=archived)


@bp.route("/new", methods=["GET", "POST"])
@requires("edit_machines")
def new():  # type: ignore[no-untyped-def]
    form = MachineForm()
    return submit_form(
        form, form_page("machines/form.html", form=form, machine=None),
        lambda sess: machines.create_machine(sess, by=acting_user(), **form.values()),
        done=lambda m: (f"Machine {m.name} added.", url_for("machines.detail", machine_id=m.id)),
    )


@bp.route("/<int:machine_id>/edit", methods=["GET", "POST"])
@requires("edit_machines")
def edit(machine_id: int):  # type: ignore[no-untyped-def]
    machine = get_or_404(db_session(), Machine, machine_id)
    form = MachineForm(obj=machine)
    return submit_form(
        form, drawn_on_record(form_page("machines/form.html", form=form, machine=machine),
                              form, machine, machines.MACHINE_FIELDS, entity="machine"),
        lambda sess: machines.update_machine(sess, machine, by=acting_user(),
                                             drawn=form.drawn.data or None, **form.values()),
        done=lambda _: ("Machine saved.", url_for("machines.detail", machine_id=machine_id)),
    )


@bp.get("/<int:machine_id>")
@requires("read")
def detail(machine_id: int, status: int = 200, archive_error: str | None = None):  # type: ignore[no-untyped-def]
    machine = get_or_404(db_session(), Machine, machine_id)
    return (
        render_template(
            "machines/detail.html",
            machine=machine,
            confirm=ConfirmForm(),
            archive_error=archive_error,
            reading_unit_labels=READING_UNIT_LABELS,
        ),
        status,
    )


@bp.post("/<int:machine_id>/archive")
@requires("edit_machines")
def archive(machine_id: int):  # type: ignore[no-untyped-def]
    return archive_button(
        Machine, machine_id, archive=machines.archive_machine,
        unarchive=machines.unarchive_machine,
        page=lambda **kw: detail(machine_id, **kw),
        done=lambda m, restored: f"{m.name} {'back in service' if restored else 'retired'}.",
        target=url_for("machines.detail", machine_id=machine_id),
    )

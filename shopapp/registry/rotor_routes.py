"""Rotor types (part numbers with their geometry) and rotors (serials with their history)."""

from __future__ import annotations

from collections.abc import Callable

from flask import Blueprint, render_template, request, url_for

from shopapp.core.checks import plain_digits
from shopapp.core.display import ShopDisplay
from shopapp.core.extensions import db_session
from shopapp.core.forms import ConfirmForm
from shopapp.core.settings import get_settings
from shopapp.core.web import (
    acting_user,
    form_page,
    get_or_404,
    request_page,
    requires,
    submit_form,
)
from shopapp.models import ROTOR_KINDS, Rotor, RotorType
from shopapp.registry import queries, rotor_types, rotors
from shopapp.registry.forms import OneOffRotorForm, RotorForm, RotorTypeForm
from shopapp.registry.pages import archive_button, drawn_on_record

bp = Blueprint("rotors", __name__, template_folder="templates")

INFLUENCE_SETS_SHOWN = 50


def _int_arg(name: str) -> int | None:
    """An id from the query string; junk means no filter, never an error."""
    raw = request.args.get(name, "")
    return int(raw) if plain_digits(raw) and len(raw) < 10 else None


# --------------------------------------------------------------------------- rotor types


@bp.get("/rotor-types/")
@requires("read")
def types():  # type: ignore[no-untyped-def]
    sess = db_session()
    q = request.args.get("q", "")[:100]
    customer_id = _int_arg("customer_id")
    kind = request.args.get("kind", "")
    kind = kind if kind in ROTOR_KINDS else ""
    archived = request.args.get("archived") == "1"
    page = request_page(
        sess, queries.rotor_types_stmt(q, customer_id, kind or None, archived),
        {"q": q, "customer_id": customer_id, "kind": kind, "archived": "1" if archived else ""},
    )
    return render_template(
        "rotors/types.html", page=page, q=q, customer_id=customer_id, kind=kind,
        archived=archived, kinds=ROTOR_KINDS,
        customers=queries.customer_choices(sess, customer_id),
    )


@bp.route("/rotor-types/new", methods=["GET", "POST"])
@requires("edit_registry")
def type_new():  # type: ignore[no-untyped-def]
    sess = db_session()
    form = RotorTypeForm()
    form.customer.choices = queries.customer_choices(sess)
    if request.method == "GET":
        form.customer.data = _int_arg("customer_id")
    return submit_form(
        form, form_page("rotors/type_form.html", form=form, rotor_type=None),
        lambda s: rotor_types.create_rotor_type(
            s, by=acting_user(), customer=queries.customer_or_none(s, form.customer.data),
            **form.values()),
        done=lambda rt: (f"Rotor type {rt.part_number} created.",
                         url_for("rotors.type_detail", rotor_type_id=rt.id)),
    )


@bp.route("/rotor-types/<int:rotor_type_id>/edit", methods=["GET", "POST"])
@requires("edit_registry")
def type_edit(rotor_type_id: int):  # type: ignore[no-untyped-def]
    rotor_type = get_or_404(db_session(), RotorType, rotor_type_id)
    form = RotorTypeForm(obj=rotor_type if request.method == "GET" else None)
    # The customer of a rotor type is fixed: its rotors and jobs belong to it.
    form.customer.choices = [(rotor_type.customer_id, rotor_type.customer.name)]
    if request.method == "GET":
        form.load(rotor_type)
    form.customer.data = rotor_type.customer_id
    return submit_form(
        form, drawn_on_record(
            form_page("rotors/type_form.html", form=form, rotor_type=rotor_type), form,
            rotor_type, rotor_types.ROTOR_TYPE_FIELDS, entity="rotor type"),
        lambda s: rotor_types.update_rotor_type(s, rotor_type, by=acting_user(),
                                                drawn=form.drawn.data or None,
                                                **form.values()),
        done=lambda _: ("Rotor type saved.",
                        url_for("rotors.type_detail", rotor_type_id=rotor_type_id)),
    )


@bp.get("/rotor-types/<int:rotor_type_id>")
@requires("read")
def type_detail(rotor_type_id: int, status: int = 200, archive_error: str | None = None):  # type: ignore[no-untyped-def]
    sess = db_session()
    rotor_type = queries.rotor_type_with_customer(sess, rotor_type_id)
    if rotor_type is None:
        return get_or_404(sess, RotorType, rotor_type_id)
    rotor_list = request_page(
        sess, queries.rotors_stmt(rotor_type_id=rotor_type.id, include_archived=True),
        {"rotor_type_id": rotor_type.id},
    )
    sets, machine_names = queries.influence_sets(sess, rotor_type.id, INFLUENCE_SETS_SHOWN)
    return (
        render_template(
            "rotors/type_detail.html",
            rt=rotor_type,
            rotors=rotor_list,
            sets=sets,
            machines=machine_names,
            disp=ShopDisplay(get_settings(sess)),
            summary=rotor_types.summary(rotor_type),
            confirm=ConfirmForm(),
            archive_error=archive_error,
        ),
        status,
    )


@bp.post("/rotor-types/<int:rotor_type_id>/archive")
@requires("edit_registry")
def type_archive(rotor_type_id: int):  # type: ignore[no-untyped-def]
    return archive_button(
        RotorType, rotor_type_id, archive=rotor_types.archive_rotor_type,
        unarchive=rotor_types.unarchive_rotor_type,
        page=lambda **kw: type_detail(rotor_type_id, **kw),
        done=lambda rt, restored: f"{rt.part_number} {'restored' if restored else 'archived'}.",
        target=url_for("rotors.type_detail", rotor_type_id=rotor_type_id),
    )


# --------------------------------------------------------------------------- rotors


@bp.get("/rotors/")
@requires("read")
def index():  # type: ignore[no-untyped-def]
    sess = db_session()
    q = request.args.get("q", "")[:100]
    customer_id = _int_arg("customer_id")
    rotor_type_id = _int_arg("rotor_type_id")
    archived = request.args.get("archived") == "1"
    page = request_page(
        sess, queries.rotors_stmt(q, customer_id, rotor_type_id, archived),
        {"q": q, "customer_id": customer_id, "rotor_type_id": rotor_type_id,
         "archived": "1" if archived else ""},
    )
    return render_template(
        "rotors/index.html", page=page, q=q, customer_id=customer_id,
        rotor_type_id=rotor_type_id, archived=archived,
        customers=queries.customer_choices(sess, customer_id),
    )


def _rotor_done(verb: str) -> Callable[[Rotor], tuple[str, str]]:
    return lambda r: (f"{verb} {r.serial_number} registered.",
                      url_for("rotors.detail", rotor_id=r.id))


@bp.route("/rotors/new", methods=["GET", "POST"])
@requires("edit_registry")
def new():  # type: ignore[no-untyped-def]
    sess = db_session()
    form = RotorForm()
    form.rotor_type.choices = queries.rotor_type_choices(sess, _int_arg("customer_id"))
    if request.method == "GET":
        form.rotor_type.data = _int_arg("rotor_type_id")
    return submit_form(
        form, form_page("rotors/form.html", form=form, rotor=None),
        lambda s: rotors.register_rotor(
            s, by=acting_user(), rotor_type=queries.rotor_type_or_none(s, form.rotor_type.data),
            serial_number=form.serial_number.data or "", notes=form.notes.data or ""),
        done=_rotor_done("Rotor"),
    )


@bp.route("/rotors/new-one-off", methods=["GET", "POST"])
@requires("edit_registry")
def new_one_off():  # type: ignore[no-untyped-def]
    form = OneOffRotorForm()
    form.customer.choices = queries.customer_choices(db_session())
    if request.method == "GET":
        form.customer.data = _int_arg("customer_id")
    return submit_form(
        form, form_page("rotors/one_off_form.html", form=form),
        lambda s: rotors.register_one_off_rotor(
            s, by=acting_user(), customer=queries.customer_or_none(s, form.customer.data),
            serial_number=form.serial_number.data or "",
            rotor_notes=form.rotor_notes.data or "",
            **(form.geometry_values() | {"description": form.description.data or ""})),
        done=_rotor_done("One-off rotor"),
    )


@bp.route("/rotors/<int:rotor_id>/edit", methods=["GET", "POST"])
@requires("edit_registry")
def edit(rotor_id: int):  # type: ignore[no-untyped-def]
    sess = db_session()
    rotor = get_or_404(sess, Rotor, rotor_id)
    form = RotorForm(obj=rotor if request.method == "GET" else None)
    if rotor.rotor_type.one_off:
        own = f"{rotor.rotor_type.part_number} (own geometry)"
        form.rotor_type.choices = [(rotor.rotor_type_id, own)]
    else:
        form.rotor_type.choices = queries.rotor_type_choices(
            sess, rotor.customer_id, rotor.rotor_type
        )
    if request.method == "GET":
        form.rotor_type.data = rotor.rotor_type_id
    return submit_form(
        form, drawn_on_record(form_page("rotors/form.html", form=form, rotor=rotor), form,
                              rotor, rotors.ROTOR_COLUMNS, entity="rotor"),
        lambda s: rotors.update_rotor(
            s, rotor, by=acting_user(), drawn=form.drawn.data or None,
            rotor_type=queries.rotor_type_or_none(s, form.rotor_type.data),
            serial_number=form.serial_number.data or "", notes=form.notes.data or ""),
        done=lambda _: ("Rotor saved.", url_for("rotors.detail", rotor_id=rotor_id)),
    )


@bp.get("/rotors/<int:rotor_id>")
@requires("read")
def detail(rotor_id: int, status: int = 200, archive_error: str | None = None):  # type: ignore[no-untyped-def]
    sess = db_session()
    rotor = queries.rotor_with_type(sess, rotor_id)
    if rotor is None:
        return get_or_404(sess, Rotor, rotor_id)
    jobs = queries.rotor_jobs(sess, rotor.id)
    return (
        render_template(
            "rotors/detail.html",
            rotor=rotor,
            jobs=jobs,
            runs=queries.run_summaries(sess, [j.id for j in jobs]),
            confirm=ConfirmForm(),
            archive_error=archive_error,
        ),
        status,
    )


@bp.post("/rotors/<int:rotor_id>/archive")
@requires("edit_registry")
def archive(rotor_id: int):  # type: ignore[no-untyped-def]
    return archive_button(
        Rotor, rotor_id, archive=rotors.archive_rotor, unarchive=rotors.unarchive_rotor,
        page=lambda **kw: detail(rotor_id, **kw),
        done=lambda r, restored: f"Rotor {r.serial_number} "
        f"{'restored' if restored else 'archived'}.",
        target=url_for("rotors.detail", rotor_id=rotor_id),
    )

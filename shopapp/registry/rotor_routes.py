"""Rotor types (part numbers with their geometry) and rotors (serials with their history)."""

from __future__ import annotations

from typing import Any

from flask import Blueprint, flash, redirect, render_template, request, url_for
from flask_login import current_user
from sqlalchemy import select
from sqlalchemy.orm import Session, joinedload, selectinload

from shopapp.balancing import units
from shopapp.balancing.dynamics import rigid_or_flexible
from shopapp.balancing.errors import BalancingInputError
from shopapp.balancing.tolerance import permissible_unbalance
from shopapp.core.errors import ValidationFailed
from shopapp.core.extensions import db_session
from shopapp.core.forms import ConfirmForm, apply_errors
from shopapp.core.pagination import page_number, paginate
from shopapp.core.settings import get_settings
from shopapp.core.web import get_or_404, page_size, requires, toggle_archive
from shopapp.models import ROTOR_KINDS, Customer, InfluenceSet, Job, Machine, Rotor, RotorType, Run
from shopapp.registry import services as registry
from shopapp.registry.rotor_forms import OneOffRotorForm, RotorForm, RotorTypeForm

bp = Blueprint("rotors", __name__, template_folder="templates")

INFLUENCE_SETS_SHOWN = 50
SUMMARY_PURPOSES = ("initial", "check", "final")


def _int_arg(name: str) -> int | None:
    """An id from the query string; junk means no filter, never an error."""
    raw = request.args.get(name, "")
    return int(raw) if raw.isdigit() and len(raw) < 10 else None


def _customer_choices(sess: Session, selected: int | None = None) -> list[tuple[int, str]]:
    stmt = registry.customers_stmt()
    rows = [(c.id, c.name) for c in sess.scalars(stmt)]
    if selected is not None and selected not in {cid for cid, _ in rows}:
        customer = sess.get(Customer, selected)
        if customer is not None:
            rows.insert(0, (customer.id, f"{customer.name} (archived)"))
    return rows


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
    page = paginate(
        sess,
        registry.rotor_types_stmt(q, customer_id, kind or None, archived),
        page=page_number(request.args.get("page")),
        per_page=page_size(),
        args={
            "q": q, "customer_id": customer_id, "kind": kind,
            "archived": "1" if archived else "",
        },
    )
    return render_template(
        "rotors/types.html", page=page, q=q, customer_id=customer_id, kind=kind,
        archived=archived, kinds=ROTOR_KINDS, customers=_customer_choices(sess, customer_id),
    )


def _type_form_page(form: RotorTypeForm, rotor_type: RotorType | None, status: int, loose=()):  # type: ignore[no-untyped-def]
    return (
        render_template("rotors/type_form.html", form=form, rotor_type=rotor_type, loose=loose),
        status,
    )


@bp.route("/rotor-types/new", methods=["GET", "POST"])
@requires("edit_registry")
def type_new():  # type: ignore[no-untyped-def]
    sess = db_session()
    form = RotorTypeForm()
    form.customer.choices = _customer_choices(sess)
    if request.method == "GET":
        form.customer.data = _int_arg("customer_id")
        return _type_form_page(form, None, 200)
    if not form.validate_on_submit():
        return _type_form_page(form, None, 422)
    customer = sess.get(Customer, form.customer.data)
    try:
        if customer is None:
            raise ValidationFailed("customer", "choose a customer from the list")
        rotor_type = registry.create_rotor_type(
            sess, by=current_user._get_current_object(), customer=customer, **form.values()
        )
        sess.commit()
    except ValidationFailed as exc:
        sess.rollback()
        return _type_form_page(form, None, 422, apply_errors(form, exc))
    flash(f"Rotor type {rotor_type.part_number} created.", "success")
    return redirect(url_for("rotors.type_detail", rotor_type_id=rotor_type.id))


@bp.route("/rotor-types/<int:rotor_type_id>/edit", methods=["GET", "POST"])
@requires("edit_registry")
def type_edit(rotor_type_id: int):  # type: ignore[no-untyped-def]
    sess = db_session()
    rotor_type = get_or_404(sess, RotorType, rotor_type_id)
    form = RotorTypeForm(obj=rotor_type if request.method == "GET" else None)
    # The customer of a rotor type is fixed: its rotors and jobs belong to it.
    form.customer.choices = [(rotor_type.customer_id, rotor_type.customer.name)]
    if request.method == "GET":
        form.load(rotor_type)
        form.customer.data = rotor_type.customer_id
        return _type_form_page(form, rotor_type, 200)
    form.customer.data = rotor_type.customer_id
    if not form.validate_on_submit():
        return _type_form_page(form, rotor_type, 422)
    try:
        registry.update_rotor_type(
            sess, rotor_type, by=current_user._get_current_object(), **form.values()
        )
        sess.commit()
    except ValidationFailed as exc:
        sess.rollback()
        rotor_type = get_or_404(sess, RotorType, rotor_type_id)
        return _type_form_page(form, rotor_type, 422, apply_errors(form, exc))
    flash("Rotor type saved.", "success")
    return redirect(url_for("rotors.type_detail", rotor_type_id=rotor_type_id))


def _tolerance_summary(rotor_type: RotorType, unit: str) -> dict[str, Any]:
    """Default U_per in the shop's unit and the rigid/flexible note, for display."""
    out: dict[str, Any] = {"u_per": None, "flexible": None}
    try:
        if rotor_type.tolerance_grade is not None:
            u_per_gmm = permissible_unbalance(
                rotor_type.tolerance_grade, rotor_type.mass_kg, rotor_type.service_speed_rpm
            )
            out["u_per"] = units.convert_unbalance(u_per_gmm, "g·mm", unit)
        elif rotor_type.tolerance_gmm is not None:
            out["u_per"] = units.convert_unbalance(rotor_type.tolerance_gmm, "g·mm", unit)
        if rotor_type.first_critical_rpm is not None:
            verdict = rigid_or_flexible(rotor_type.service_speed_rpm, rotor_type.first_critical_rpm)
            out["flexible"] = verdict
    except BalancingInputError:
        pass  # stored data the core refuses: the page still shows the raw values
    return out


@bp.get("/rotor-types/<int:rotor_type_id>")
@requires("read")
def type_detail(rotor_type_id: int, status: int = 200, archive_error: str | None = None):  # type: ignore[no-untyped-def]
    sess = db_session()
    rotor_type = sess.scalars(
        select(RotorType)
        .options(joinedload(RotorType.customer))
        .where(RotorType.id == rotor_type_id)
    ).first()
    if rotor_type is None:
        return get_or_404(sess, RotorType, rotor_type_id)
    rotors = paginate(
        sess,
        registry.rotors_stmt(rotor_type_id=rotor_type.id, include_archived=True),
        page=page_number(request.args.get("page")),
        per_page=page_size(),
        args={"rotor_type_id": rotor_type.id},
    )
    sets = list(
        sess.scalars(
            select(InfluenceSet)
            .where(InfluenceSet.rotor_type_id == rotor_type.id)
            .order_by(InfluenceSet.learned_at.desc(), InfluenceSet.id.desc())
            .limit(INFLUENCE_SETS_SHOWN)
        )
    )
    machine_ids = {s.machine_id for s in sets}
    machines: dict[int, str] = {}
    if machine_ids:
        names = select(Machine.id, Machine.name).where(Machine.id.in_(machine_ids))
        machines = {mid: name for mid, name in sess.execute(names)}
    settings = get_settings(sess)
    return (
        render_template(
            "rotors/type_detail.html",
            rt=rotor_type,
            rotors=rotors,
            sets=sets,
            machines=machines,
            unit=settings.unbalance_unit,
            summary=_tolerance_summary(rotor_type, settings.unbalance_unit),
            confirm=ConfirmForm(),
            archive_error=archive_error,
        ),
        status,
    )


@bp.post("/rotor-types/<int:rotor_type_id>/archive")
@requires("edit_registry")
def type_archive(rotor_type_id: int):  # type: ignore[no-untyped-def]
    sess = db_session()
    rotor_type = get_or_404(sess, RotorType, rotor_type_id)
    refused = toggle_archive(
        sess, rotor_type, archive=registry.archive_rotor_type,
        unarchive=registry.unarchive_rotor_type,
        on_refused=lambda msg: type_detail(rotor_type_id, status=422, archive_error=msg),
        done=lambda restored: f"{rotor_type.part_number} "
        f"{'restored' if restored else 'archived'}.",
    )
    if refused is not None:
        return refused
    return redirect(url_for("rotors.type_detail", rotor_type_id=rotor_type_id))


# --------------------------------------------------------------------------- rotors


@bp.get("/rotors/")
@requires("read")
def index():  # type: ignore[no-untyped-def]
    sess = db_session()
    q = request.args.get("q", "")[:100]
    customer_id = _int_arg("customer_id")
    rotor_type_id = _int_arg("rotor_type_id")
    archived = request.args.get("archived") == "1"
    page = paginate(
        sess,
        registry.rotors_stmt(q, customer_id, rotor_type_id, archived),
        page=page_number(request.args.get("page")),
        per_page=page_size(),
        args={
            "q": q, "customer_id": customer_id, "rotor_type_id": rotor_type_id,
            "archived": "1" if archived else "",
        },
    )
    return render_template(
        "rotors/index.html", page=page, q=q, customer_id=customer_id,
        rotor_type_id=rotor_type_id, archived=archived,
        customers=_customer_choices(sess, customer_id),
    )


def _type_choices(
    sess: Session, customer_id: int | None, current: RotorType | None = None
) -> list[tuple[int, str]]:
    stmt = registry.rotor_types_stmt(customer_id=customer_id).where(RotorType.one_off.is_(False))
    rows = []
    for rt in sess.scalars(stmt):
        label = f"{rt.customer.name} · {rt.part_number}"
        rows.append((rt.id, f"{label} — {rt.description}" if rt.description else label))
    if current is not None and current.id not in {i for i, _ in rows}:
        rows.insert(0, (current.id, f"{current.customer.name} · {current.part_number} (current)"))
    return rows


def _rotor_form_page(form: RotorForm, rotor: Rotor | None, status: int, loose=()):  # type: ignore[no-untyped-def]
    return render_template("rotors/form.html", form=form, rotor=rotor, loose=loose), status


@bp.route("/rotors/new", methods=["GET", "POST"])
@requires("edit_registry")
def new():  # type: ignore[no-untyped-def]
    sess = db_session()
    form = RotorForm()
    form.rotor_type.choices = _type_choices(sess, _int_arg("customer_id"))
    if request.method == "GET":
        form.rotor_type.data = _int_arg("rotor_type_id")
        return _rotor_form_page(form, None, 200)
    if not form.validate_on_submit():
        return _rotor_form_page(form, None, 422)
    rotor_type = sess.get(RotorType, form.rotor_type.data)
    try:
        if rotor_type is None:
            raise ValidationFailed("rotor_type", "choose a rotor type from the list")
        rotor = registry.create_rotor(
            sess,
            by=current_user._get_current_object(),
            customer=rotor_type.customer,
            rotor_type=rotor_type,
            serial_number=form.serial_number.data or "",
            notes=form.notes.data or "",
        )
        sess.commit()
    except ValidationFailed as exc:
        sess.rollback()
        return _rotor_form_page(form, None, 422, apply_errors(form, exc))
    flash(f"Rotor {rotor.serial_number} registered.", "success")
    return redirect(url_for("rotors.detail", rotor_id=rotor.id))


@bp.route("/rotors/new-one-off", methods=["GET", "POST"])
@requires("edit_registry")
def new_one_off():  # type: ignore[no-untyped-def]
    sess = db_session()
    form = OneOffRotorForm()
    form.customer.choices = _customer_choices(sess)

    def page(status: int, loose=()):  # type: ignore[no-untyped-def]
        return render_template("rotors/one_off_form.html", form=form, loose=loose), status

    if request.method == "GET":
        form.customer.data = _int_arg("customer_id")
        return page(200)
    if not form.validate_on_submit():
        return page(422)
    customer = sess.get(Customer, form.customer.data)
    by = current_user._get_current_object()
    try:
        if customer is None:
            raise ValidationFailed("customer", "choose a customer from the list")
        geometry = form.geometry_values()
        geometry["description"] = form.description.data or ""
        serial = form.serial_number.data or ""
        # Check the serial before making the rotor type, so its message comes first.
        if registry.find_rotor(sess, customer.id, serial) is not None:
            raise ValidationFailed(
                "serial_number",
                f"{customer.name} already has a rotor with serial {serial.strip()!r}",
            )
        rotor_type = registry.create_one_off_rotor_type(
            sess, by=by, customer=customer, serial_number=serial, **geometry
        )
        rotor = registry.create_rotor(
            sess, by=by, customer=customer, rotor_type=rotor_type, serial_number=serial,
            notes=form.rotor_notes.data or "",
        )
        sess.commit()
    except ValidationFailed as exc:
        sess.rollback()
        return page(422, apply_errors(form, exc))
    flash(f"One-off rotor {rotor.serial_number} registered.", "success")
    return redirect(url_for("rotors.detail", rotor_id=rotor.id))


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
        form.rotor_type.choices = _type_choices(sess, rotor.customer_id, rotor.rotor_type)
    if request.method == "GET":
        form.rotor_type.data = rotor.rotor_type_id
        return _rotor_form_page(form, rotor, 200)
    if not form.validate_on_submit():
        return _rotor_form_page(form, rotor, 422)
    rotor_type = sess.get(RotorType, form.rotor_type.data)
    try:
        registry.update_rotor(
            sess, rotor, by=current_user._get_current_object(), rotor_type=rotor_type,
            serial_number=form.serial_number.data or "", notes=form.notes.data or "",
        )
        sess.commit()
    except ValidationFailed as exc:
        sess.rollback()
        rotor = get_or_404(sess, Rotor, rotor_id)
        return _rotor_form_page(form, rotor, 422, apply_errors(form, exc))
    flash("Rotor saved.", "success")
    return redirect(url_for("rotors.detail", rotor_id=rotor_id))


def _run_summaries(sess: Session, job_ids: list[int]) -> dict[int, dict[str, Run]]:
    """Per job: its first initial run and its last check or final run (two queries in all)."""
    out: dict[int, dict[str, Run]] = {}
    if not job_ids:
        return out
    runs = sess.scalars(
        select(Run)
        .options(selectinload(Run.readings))
        .where(Run.job_id.in_(job_ids), Run.purpose.in_(SUMMARY_PURPOSES))
        .order_by(Run.job_id, Run.seq)
    )
    for run in runs:
        entry = out.setdefault(run.job_id, {})
        if run.purpose == "initial":
            entry.setdefault("initial", run)
        else:
            entry["last_check"] = run
    return out


@bp.get("/rotors/<int:rotor_id>")
@requires("read")
def detail(rotor_id: int, status: int = 200, archive_error: str | None = None):  # type: ignore[no-untyped-def]
    sess = db_session()
    rotor = sess.scalars(
        select(Rotor)
        .options(joinedload(Rotor.customer), joinedload(Rotor.rotor_type))
        .where(Rotor.id == rotor_id)
    ).first()
    if rotor is None:
        return get_or_404(sess, Rotor, rotor_id)
    # The rotor's whole history, oldest first: it is what the owner reads as a trend.
    jobs = list(
        sess.scalars(
            select(Job)
            .options(joinedload(Job.machine), joinedload(Job.operator))
            .where(Job.rotor_id == rotor.id)
            .order_by(Job.received_on, Job.id)
        ).unique()
    )
    return (
        render_template(
            "rotors/detail.html",
            rotor=rotor,
            jobs=jobs,
            runs=_run_summaries(sess, [j.id for j in jobs]),
            confirm=ConfirmForm(),
            archive_error=archive_error,
        ),
        status,
    )


@bp.post("/rotors/<int:rotor_id>/archive")
@requires("edit_registry")
def archive(rotor_id: int):  # type: ignore[no-untyped-def]
    sess = db_session()
    rotor = get_or_404(sess, Rotor, rotor_id)
    refused = toggle_archive(
        sess, rotor, archive=registry.archive_rotor, unarchive=registry.unarchive_rotor,
        on_refused=lambda msg: detail(rotor_id, status=422, archive_error=msg),
        done=lambda restored: f"Rotor {rotor.serial_number} "
        f"{'restored' if restored else 'archived'}.",
    )
    if refused is not None:
        return refused
    return redirect(url_for("rotors.detail", rotor_id=rotor_id))

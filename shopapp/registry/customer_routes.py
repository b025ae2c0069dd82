"""Customers: list with search, create, edit, archive, and a customer's page."""

from __future__ import annotations

from flask import Blueprint, flash, redirect, render_template, request, url_for
from flask_login import current_user
from sqlalchemy import select
from sqlalchemy.orm import joinedload

from shopapp.core.errors import ValidationFailed
from shopapp.core.extensions import db_session
from shopapp.core.forms import ConfirmForm, apply_errors
from shopapp.core.pagination import page_number, paginate
from shopapp.core.web import get_or_404, page_size, requires, toggle_archive
from shopapp.models import Customer, Job
from shopapp.registry import services as registry
from shopapp.registry.customer_forms import CustomerForm

bp = Blueprint("customers", __name__, url_prefix="/customers", template_folder="templates")

DETAIL_LIST_SIZE = 20  # rotor types and rotors shown on a customer's page; the rest via links


@bp.get("/")
@requires("read")
def index():  # type: ignore[no-untyped-def]
    q = request.args.get("q", "")[:100]
    archived = request.args.get("archived") == "1"
    page = paginate(
        db_session(),
        registry.customers_stmt(q, include_archived=archived),
        page=page_number(request.args.get("page")),
        per_page=page_size(),
        args={"q": q, "archived": "1" if archived else ""},
    )
    return render_template("customers/index.html", page=page, q=q, archived=archived)


def _render_form(form: CustomerForm, customer: Customer | None, status: int, loose=()):  # type: ignore[no-untyped-def]
    return (
        render_template("customers/form.html", form=form, customer=customer, loose=loose),
        status,
    )


@bp.route("/new", methods=["GET", "POST"])
@requires("edit_registry")
def new():  # type: ignore[no-untyped-def]
    form = CustomerForm()
    if request.method == "GET":
        return _render_form(form, None, 200)
    if not form.validate_on_submit():
        return _render_form(form, None, 422)
    sess = db_session()
    try:
        customer = registry.create_customer(
            sess, by=current_user._get_current_object(), **form.values()
        )
        sess.commit()
    except ValidationFailed as exc:
        sess.rollback()
        return _render_form(form, None, 422, apply_errors(form, exc))
    flash(f"Customer {customer.name} created.", "success")
    return redirect(url_for("customers.detail", customer_id=customer.id))


@bp.route("/<int:customer_id>/edit", methods=["GET", "POST"])
@requires("edit_registry")
def edit(customer_id: int):  # type: ignore[no-untyped-def]
    sess = db_session()
    customer = get_or_404(sess, Customer, customer_id)
    form = CustomerForm(obj=customer)
    if request.method == "GET":
        return _render_form(form, customer, 200)
    if not form.validate_on_submit():
        return _render_form(form, customer, 422)
    try:
        registry.update_customer(
            sess, customer, by=current_user._get_current_object(), **form.values()
        )
        sess.commit()
    except ValidationFailed as exc:
        sess.rollback()
        customer = get_or_404(sess, Customer, customer_id)
        return _render_form(form, customer, 422, apply_errors(form, exc))
    flash("Customer saved.", "success")
    return redirect(url_for("customers.detail", customer_id=customer_id))


def _detail(customer: Customer, *, status: int = 200, archive_error: str | None = None):  # type: ignore[no-untyped-def]
    sess = db_session()
    rotor_types = paginate(
        sess,
        registry.rotor_types_stmt(customer_id=customer.id),
        page=1,
        per_page=DETAIL_LIST_SIZE,
    )
    rotors = paginate(
        sess, registry.rotors_stmt(customer_id=customer.id), page=1, per_page=DETAIL_LIST_SIZE
    )
    jobs_stmt = (
        select(Job)
        .options(joinedload(Job.rotor))
        .where(Job.customer_id == customer.id)
        .order_by(Job.received_on.desc(), Job.id.desc())
    )
    jobs = paginate(
        sess,
        jobs_stmt,
        page=page_number(request.args.get("page")),
        per_page=page_size(),
        args={"customer_id": customer.id},
    )
    return (
        render_template(
            "customers/detail.html",
            customer=customer,
            rotor_types=rotor_types,
            rotors=rotors,
            jobs=jobs,
            confirm=ConfirmForm(),
            archive_error=archive_error,
        ),
        status,
    )


@bp.get("/<int:customer_id>")
@requires("read")
def detail(customer_id: int):  # type: ignore[no-untyped-def]
    return _detail(get_or_404(db_session(), Customer, customer_id))


@bp.post("/<int:customer_id>/archive")
@requires("edit_registry")
def archive(customer_id: int):  # type: ignore[no-untyped-def]
    sess = db_session()
    customer = get_or_404(sess, Customer, customer_id)
    form = ConfirmForm()
    if not form.validate_on_submit():
        return _detail(customer, status=400, archive_error="The form expired; try again.")
    refused = toggle_archive(
        sess, customer, archive=registry.archive_customer, unarchive=registry.unarchive_customer,
        on_refused=lambda msg: _detail(get_or_404(sess, Customer, customer_id), status=422,
                                       archive_error=msg),
        done=lambda restored: f"{customer.name} {'restored' if restored else 'archived'}.",
    )
    if refused is not None:
        return refused
    return redirect(url_for("customers.detail", customer_id=customer_id))

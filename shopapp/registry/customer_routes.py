"""Customers: list with search, create, edit, archive, and a customer's page."""

from __future__ import annotations

from flask import Blueprint, render_template, request, url_for

from shopapp.core.extensions import db_session
from shopapp.core.forms import ConfirmForm
from shopapp.core.pagination import paginate
from shopapp.core.web import (
    acting_user,
    form_page,
    get_or_404,
    request_page,
    requires,
    submit_form,
)
from shopapp.models import Customer
from shopapp.registry import customers, queries
from shopapp.registry.forms import CustomerForm
from shopapp.registry.pages import archive_button, drawn_on_record

bp = Blueprint("customers", __name__, url_prefix="/customers", template_folder="templates")

DETAIL_LIST_SIZE = 20  # rotor types and rotors shown on a customer's page; the rest via links


@bp.get("/")
@requires("read")
def index():  # type: ignore[no-untyped-def]
    q = request.args.get("q", "")[:100]
    archived = request.args.get("archived") == "1"
    page = request_page(db_session(), queries.customers_stmt(q, include_archived=archived),
                        {"q": q, "archived": "1" if archived else ""})
    return render_template("customers/index.html", page=page, q=q, archived=archived)


@bp.route("/new", methods=["GET", "POST"])
@requires("edit_registry")
def new():  # type: ignore[no-untyped-def]
    form = CustomerForm()
    return submit_form(
        form, form_page("customers/form.html", form=form, customer=None),
        lambda sess: customers.create_customer(sess, by=acting_user(), **form.values()),
        done=lambda c: (f"Customer {c.name} created.",
                        url_for("customers.detail", customer_id=c.id)),
    )


@bp.route("/<int:customer_id>/edit", methods=["GET", "POST"])
@requires("edit_registry")
def edit(customer_id: int):  # type: ignore[no-untyped-def]
    customer = get_or_404(db_session(), Customer, customer_id)
    form = CustomerForm(obj=customer)
    return submit_form(
        form, drawn_on_record(form_page("customers/form.html", form=form, customer=customer),
                              form, customer, customers.CUSTOMER_FIELDS, entity="customer"),
        lambda sess: customers.update_customer(sess, customer, by=acting_user(),
                                               drawn=form.drawn.data or None, **form.values()),
        done=lambda _: ("Customer saved.", url_for("customers.detail", customer_id=customer_id)),
    )


def _detail(customer: Customer, *, status: int = 200, archive_error: str | None = None):  # type: ignore[no-untyped-def]
    sess = db_session()
    rotor_types = paginate(
        sess, queries.rotor_types_stmt(customer_id=customer.id), page=1,
        per_page=DETAIL_LIST_SIZE,
    )
    rotors = paginate(
        sess, queries.rotors_stmt(customer_id=customer.id), page=1, per_page=DETAIL_LIST_SIZE
    )
    jobs = request_page(sess, queries.customer_jobs_stmt(customer.id),
                        {"customer_id": customer.id})
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
    return archive_button(
        Customer, customer_id, archive=customers.archive_customer,
        unarchive=customers.unarchive_customer,
        page=lambda **kw: _detail(get_or_404(db_session(), Customer, customer_id), **kw),
        done=lambda c, restored: f"{c.name} {'restored' if restored else 'archived'}.",
        target=url_for("customers.detail", customer_id=customer_id),
    )

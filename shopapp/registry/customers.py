"""Customers: create, edit, archive. Names are unique, ignoring case."""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

from sqlalchemy import func, select
from sqlalchemy.orm import Session

from shopapp.core import checks
from shopapp.core.display import counted
from shopapp.core.permissions import require
from shopapp.models import Customer, Job, User
from shopapp.registry.common import (
    MAX_NOTES,
    flush_unique,
    record,
    refuse_if_changed,
    refuse_unknown,
    set_archived,
    update_fields,
)

CUSTOMER_FIELDS: tuple[str, ...] = (
    "name",
    "contact",
    "email",
    "phone",
    "address",
    "notes",
    "requires_residual_test",
)


def _clean_customer(values: Mapping[str, Any]) -> tuple[dict[str, Any], checks.Errors]:
    e = checks.Errors()
    out: dict[str, Any] = {
        "name": checks.text(e, "name", values.get("name"), max_len=200, required=True),
        "contact": checks.text(e, "contact", values.get("contact"), max_len=200),
        "email": checks.text(e, "email", values.get("email"), max_len=200),
        "phone": checks.text(e, "phone", values.get("phone"), max_len=64),
        "address": checks.text(e, "address", values.get("address"), max_len=2000),
        "notes": checks.text(e, "notes", values.get("notes"), max_len=MAX_NOTES),
        "requires_residual_test": bool(values.get("requires_residual_test")),
    }
    email: str = out["email"]
    if email and "email" not in e and (
        email.count("@") != 1 or email.startswith("@") or email.endswith("@") or " " in email
    ):
        e.add("email", f"{email!r} is not an e-mail address (name@example.org), or leave it empty")
    return out, e


def _check_name(session: Session, e: checks.Errors, name: str, exclude_id: int | None) -> None:
    if "name" in e:
        return
    stmt = select(Customer).where(func.lower(Customer.name) == name.lower())
    if exclude_id is not None:
        stmt = stmt.where(Customer.id != exclude_id)
    other = session.scalars(stmt.limit(1)).first()
    if other is not None:
        where = " (archived: unarchive it instead)" if other.archived else ""
        e.add("name", f"A customer called {other.name!r} already exists{where}.")


def _taken(name: str) -> str:
    return f"A customer called {name!r} already exists."


def create_customer(
    session: Session,
    *,
    by: User,
    name: str,
    contact: str = "",
    email: str = "",
    phone: str = "",
    address: str = "",
    notes: str = "",
    requires_residual_test: bool = False,
) -> Customer:
    """Create a customer. Names are unique, ignoring case.

    Raises
    ------
    PermissionDenied
        ``by`` may not edit the registry.
    ValidationFailed
        Missing name, too long text, a bad e-mail address or a duplicate name.
    """
    require(by, "edit_registry")
    clean, e = _clean_customer(
        {
            "name": name, "contact": contact, "email": email, "phone": phone,
            "address": address, "notes": notes, "requires_residual_test": requires_residual_test,
        }
    )
    _check_name(session, e, clean["name"], None)
    e.raise_if_any()
    customer = Customer(**clean)
    flush_unique(session, customer, "name", _taken(clean["name"]))
    record(session, by, customer, "customer", "create", None)
    return customer


def update_customer(session: Session, customer: Customer, *, by: User, drawn: str | None = None,
                    **fields: Any) -> Customer:
    """Change some of a customer's fields (:data:`CUSTOMER_FIELDS`); same rules as create.
    ``drawn``: the edit form's stamp (:func:`~shopapp.registry.common.refuse_if_changed`)."""
    require(by, "edit_registry")
    refuse_unknown(fields, CUSTOMER_FIELDS)
    refuse_if_changed(customer, CUSTOMER_FIELDS, drawn, entity="customer")
    merged = {name: getattr(customer, name) for name in CUSTOMER_FIELDS} | fields
    clean, e = _clean_customer(merged)
    _check_name(session, e, clean["name"], customer.id)
    e.raise_if_any()
    update_fields(session, customer, clean, by=by, entity="customer", field="name",
                  taken=_taken(clean["name"]))
    return customer


def archive_customer(session: Session, customer: Customer, *, by: User) -> Customer:
    """Hide a customer from the lists and from new work; refused while it has open jobs."""
    set_archived(
        session, customer, by=by, action="edit_registry", entity="customer", archived=True,
        open_job_column=Job.customer_id,
        refusal=lambda n: (f"{customer.name} has {counted(n, 'open job')}; "
                           "dispatch or reject them first"),
    )
    return customer


def unarchive_customer(session: Session, customer: Customer, *, by: User) -> Customer:
    """Bring an archived customer back."""
    set_archived(session, customer, by=by, action="edit_registry", entity="customer",
                 archived=False)
    return customer

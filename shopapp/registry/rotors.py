"""Rotors (a customer's serial numbers): register, one-off rotors, edit, archive, find.

Serial numbers are unique per customer, ignoring case; an archived rotor keeps
its serial (a rotor that comes back after years is the same rotor).
"""

from __future__ import annotations

from typing import Any

from sqlalchemy import func, select
from sqlalchemy.orm import Session, joinedload

from shopapp.core import checks
from shopapp.core.errors import ValidationFailed
from shopapp.core.permissions import require
from shopapp.models import Customer, Job, Rotor, RotorType, User
from shopapp.registry.common import (
    MAX_NOTES,
    flush_unique,
    record,
    refuse_if_changed,
    refuse_unknown,
    require_live_customer,
    set_archived,
    update_fields,
)
from shopapp.registry.rotor_types import create_one_off_rotor_type

ROTOR_FIELDS: tuple[str, ...] = ("serial_number", "notes", "rotor_type")
# The stored columns behind them, stamped by the edit form (common.edit_stamp).
ROTOR_COLUMNS: tuple[str, ...] = ("serial_number", "notes", "rotor_type_id")


def _serial_taken(
    session: Session, customer_id: int, serial: str, exclude_id: int | None
) -> Rotor | None:
    stmt = select(Rotor).where(
        Rotor.customer_id == customer_id, func.lower(Rotor.serial_number) == serial.lower()
    )
    if exclude_id is not None:
        stmt = stmt.where(Rotor.id != exclude_id)
    return session.scalars(stmt.limit(1)).first()


def _taken(customer: Customer, serial: str) -> str:
    return f"{customer.name} already has a rotor with serial {serial!r}"


def _clean_rotor(
    session: Session,
    customer: Customer,
    rotor_type: RotorType | None,
    serial_number: Any,
    notes: Any,
    exclude_id: int | None,
) -> dict[str, Any]:
    e = checks.Errors()
    serial = checks.text(e, "serial_number", serial_number, max_len=100, required=True)
    clean_notes = checks.text(e, "notes", notes, max_len=MAX_NOTES)
    if rotor_type is None:
        e.add("rotor_type_id", "is required; choose the rotor type (part number)")
    elif rotor_type.customer_id != customer.id:
        e.add(
            "rotor_type_id",
            f"rotor type {rotor_type.part_number!r} belongs to another customer",
        )
    if "serial_number" not in e:
        other = _serial_taken(session, customer.id, serial, exclude_id)
        if other is not None:
            where = " (archived)" if other.archived else ""
            e.add("serial_number", _taken(customer, other.serial_number) + where)
    e.raise_if_any()
    return {"serial_number": serial, "notes": clean_notes}


def create_rotor(
    session: Session,
    *,
    by: User,
    customer: Customer,
    rotor_type: RotorType,
    serial_number: str,
    notes: str = "",
) -> Rotor:
    """Register a rotor of ``customer``. Serial numbers are unique per customer (ignoring case)."""
    require(by, "edit_registry")
    require_live_customer(customer)
    if rotor_type is not None and rotor_type.archived:
        raise ValidationFailed(
            "rotor_type_id", f"rotor type {rotor_type.part_number!r} is archived"
        )
    clean = _clean_rotor(session, customer, rotor_type, serial_number, notes, None)
    rotor = Rotor(customer_id=customer.id, rotor_type_id=rotor_type.id, **clean)
    flush_unique(session, rotor, "serial_number", _taken(customer, clean["serial_number"]))
    record(session, by, rotor, "rotor", "create", None)
    return rotor


def register_rotor(
    session: Session, *, by: User, rotor_type: RotorType | None, serial_number: str,
    notes: str = "",
) -> Rotor:
    """Register a rotor of ``rotor_type`` for the type's customer (the rotor form)."""
    if rotor_type is None:
        require(by, "edit_registry")
        raise ValidationFailed("rotor_type_id", "choose a rotor type from the list")
    return create_rotor(session, by=by, customer=rotor_type.customer, rotor_type=rotor_type,
                        serial_number=serial_number, notes=notes)


def register_one_off_rotor(
    session: Session, *, by: User, customer: Customer | None, serial_number: str,
    rotor_notes: str = "", **geometry: Any,
) -> Rotor:
    """A rotor with a rotor type of its own (:func:`create_one_off_rotor_type`).

    The serial is checked first, so a taken serial is the message rather than a
    part-number clash of the one-off type; ``geometry`` as for the rotor type.
    """
    require(by, "edit_registry")
    customer = require_live_customer(customer)
    if find_rotor(session, customer.id, serial_number) is not None:
        raise ValidationFailed("serial_number", _taken(customer, serial_number.strip()))
    rotor_type = create_one_off_rotor_type(
        session, by=by, customer=customer, serial_number=serial_number, **geometry
    )
    return create_rotor(session, by=by, customer=customer, rotor_type=rotor_type,
                        serial_number=serial_number, notes=rotor_notes)


def update_rotor(session: Session, rotor: Rotor, *, by: User, drawn: str | None = None,
                 **fields: Any) -> Rotor:
    """Change a rotor's serial number, notes or rotor type (of the same customer).
    ``drawn``: the edit form's stamp (:func:`~shopapp.registry.common.refuse_if_changed`)."""
    require(by, "edit_registry")
    refuse_unknown(fields, ROTOR_FIELDS)
    refuse_if_changed(rotor, ROTOR_COLUMNS, drawn, entity="rotor")
    rotor_type = fields.get("rotor_type", rotor.rotor_type)
    clean = _clean_rotor(
        session,
        rotor.customer,
        rotor_type,
        fields.get("serial_number", rotor.serial_number),
        fields.get("notes", rotor.notes),
        rotor.id,
    )
    update_fields(session, rotor, clean | {"rotor_type": rotor_type}, by=by, entity="rotor",
                  field="serial_number", taken=_taken(rotor.customer, clean["serial_number"]))
    return rotor


def archive_rotor(session: Session, rotor: Rotor, *, by: User) -> Rotor:
    """Hide a rotor from the lists (its history stays); refused while it has an open job."""
    set_archived(
        session, rotor, by=by, action="edit_registry", entity="rotor", archived=True,
        open_job_column=Job.rotor_id,
        refusal=lambda n: f"rotor {rotor.serial_number} has an open job; finish that first",
    )
    return rotor


def unarchive_rotor(session: Session, rotor: Rotor, *, by: User) -> Rotor:
    set_archived(session, rotor, by=by, action="edit_registry", entity="rotor", archived=False)
    return rotor


def find_rotor(session: Session, customer_id: int, serial_number: str) -> Rotor | None:
    """The customer's rotor with this serial (ignoring case and outer spaces), or None.

    Archived rotors are found too: their serial is still taken, and a rotor that
    comes back after years is the same rotor with the same history.
    """
    serial = (serial_number or "").strip()
    if not serial:
        return None
    stmt = (
        select(Rotor)
        .options(joinedload(Rotor.rotor_type))
        .where(Rotor.customer_id == customer_id, func.lower(Rotor.serial_number) == serial.lower())
        .order_by(Rotor.id)
        .limit(1)
    )
    return session.scalars(stmt).first()

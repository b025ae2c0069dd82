"""Customers, rotor types and rotors: read, create, edit — the registry pages' use-cases."""

from __future__ import annotations

from typing import Any

from flask import Blueprint, url_for

from shopapp.api.operations import Call, operation
from shopapp.api.paging import page_of
from shopapp.api.schemas import (
    CustomerIn,
    CustomerListQuery,
    CustomerOut,
    CustomerPatch,
    Page,
    RegistryListQuery,
    RotorIn,
    RotorListQuery,
    RotorOut,
    RotorPatch,
    RotorTypeIn,
    RotorTypeOut,
    RotorTypePatch,
)
from shopapp.core.errors import ValidationFailed
from shopapp.core.web import get_or_404
from shopapp.models import Customer, Rotor, RotorType
from shopapp.registry import customers, queries, rotor_types, rotors

bp = Blueprint("api_registry", __name__)


@operation(bp, "GET", "/customers", summary="List customers", tag="customers", action="read",
           query=CustomerListQuery, response=Page[CustomerOut])
def list_customers(call: Call) -> Page[CustomerOut]:
    """Customers by name, a page at a time; ``q`` searches name and contact."""
    q: CustomerListQuery = call.query
    stmt = queries.customers_stmt(q.q, include_archived=q.include_archived)
    return page_of(call.session, stmt, q, CustomerOut)


@operation(bp, "GET", "/customers/<int:customer_id>", summary="Read a customer",
           tag="customers", action="read", response=CustomerOut, errors=(404,))
def get_customer(call: Call, customer_id: int) -> CustomerOut:
    return CustomerOut.model_validate(get_or_404(call.session, Customer, customer_id))


@operation(bp, "POST", "/customers", summary="Create a customer", tag="customers",
           action="edit_registry", body=CustomerIn, response=CustomerOut, status=201)
def create_customer(call: Call) -> Any:
    """Names are unique, ignoring case (the registry's rule)."""
    customer = customers.create_customer(call.session, by=call.by, **call.body.model_dump())
    return (CustomerOut.model_validate(customer), 201,
            {"Location": url_for(".get_customer", customer_id=customer.id)})


@operation(bp, "PATCH", "/customers/<int:customer_id>", summary="Edit a customer",
           tag="customers", action="edit_registry", body=CustomerPatch, response=CustomerOut,
           errors=(404,))
def edit_customer(call: Call, customer_id: int) -> CustomerOut:
    """Only the fields sent change; the same rules as creating one."""
    customer = get_or_404(call.session, Customer, customer_id)
    changes = call.body.model_dump(exclude_unset=True)
    customers.update_customer(call.session, customer, by=call.by, **changes)
    return CustomerOut.model_validate(customer)


# --------------------------------------------------------------------------- rotor types


@operation(bp, "GET", "/rotor-types", summary="List rotor types", tag="rotor types",
           action="read", query=RegistryListQuery, response=Page[RotorTypeOut])
def list_rotor_types(call: Call) -> Page[RotorTypeOut]:
    q: RegistryListQuery = call.query
    stmt = queries.rotor_types_stmt(q.q, customer_id=q.customer_id,
                                    include_archived=q.include_archived)
    return page_of(call.session, stmt, q, RotorTypeOut)


@operation(bp, "GET", "/rotor-types/<int:rotor_type_id>", summary="Read a rotor type",
           tag="rotor types", action="read", response=RotorTypeOut, errors=(404,))
def get_rotor_type(call: Call, rotor_type_id: int) -> RotorTypeOut:
    return RotorTypeOut.model_validate(get_or_404(call.session, RotorType, rotor_type_id))


@operation(bp, "POST", "/rotor-types", summary="Create a rotor type", tag="rotor types",
           action="edit_registry", body=RotorTypeIn, response=RotorTypeOut, status=201)
def create_rotor_type(call: Call) -> Any:
    """A customer's part number with its geometry; the registry checks the geometry."""
    values = call.body.model_dump(exclude_unset=True)
    customer = queries.customer_or_none(call.session, values.pop("customer_id"))
    rt = rotor_types.create_rotor_type(call.session, by=call.by,
                                       customer=_live_customer(customer), **values)
    return (RotorTypeOut.model_validate(rt), 201,
            {"Location": url_for(".get_rotor_type", rotor_type_id=rt.id)})


@operation(bp, "PATCH", "/rotor-types/<int:rotor_type_id>", summary="Edit a rotor type",
           tag="rotor types", action="edit_registry", body=RotorTypePatch,
           response=RotorTypeOut, errors=(404,))
def edit_rotor_type(call: Call, rotor_type_id: int) -> RotorTypeOut:
    rt = get_or_404(call.session, RotorType, rotor_type_id)
    rotor_types.update_rotor_type(call.session, rt, by=call.by,
                                  **call.body.model_dump(exclude_unset=True))
    return RotorTypeOut.model_validate(rt)


def _live_customer(customer: Customer | None) -> Customer:
    if customer is None:
        raise ValidationFailed("customer_id", "no such customer; choose one from /customers")
    return customer


# --------------------------------------------------------------------------- rotors


@operation(bp, "GET", "/rotors", summary="List rotors", tag="rotors", action="read",
           query=RotorListQuery, response=Page[RotorOut])
def list_rotors(call: Call) -> Page[RotorOut]:
    q: RotorListQuery = call.query
    stmt = queries.rotors_stmt(q.q, customer_id=q.customer_id, rotor_type_id=q.rotor_type_id,
                               include_archived=q.include_archived)
    return page_of(call.session, stmt, q, RotorOut)


@operation(bp, "GET", "/rotors/<int:rotor_id>", summary="Read a rotor", tag="rotors",
           action="read", response=RotorOut, errors=(404,))
def get_rotor(call: Call, rotor_id: int) -> RotorOut:
    return RotorOut.model_validate(get_or_404(call.session, Rotor, rotor_id))


@operation(bp, "POST", "/rotors", summary="Register a rotor", tag="rotors",
           action="edit_registry", body=RotorIn, response=RotorOut, status=201)
def create_rotor(call: Call) -> Any:
    """A serial of a rotor type, for the type's customer (unique per customer)."""
    b: RotorIn = call.body
    rt = queries.rotor_type_or_none(call.session, b.rotor_type_id)
    rotor = rotors.register_rotor(call.session, by=call.by, rotor_type=rt,
                                  serial_number=b.serial_number, notes=b.notes)
    return (RotorOut.model_validate(rotor), 201,
            {"Location": url_for(".get_rotor", rotor_id=rotor.id)})


@operation(bp, "PATCH", "/rotors/<int:rotor_id>", summary="Edit a rotor", tag="rotors",
           action="edit_registry", body=RotorPatch, response=RotorOut, errors=(404,))
def edit_rotor(call: Call, rotor_id: int) -> RotorOut:
    rotor = get_or_404(call.session, Rotor, rotor_id)
    changes = call.body.model_dump(exclude_unset=True)
    if "rotor_type_id" in changes:
        rt = queries.rotor_type_or_none(call.session, changes.pop("rotor_type_id"))
        if rt is None:
            raise ValidationFailed("rotor_type_id", "no such rotor type")
        changes["rotor_type"] = rt
    rotors.update_rotor(call.session, rotor, by=call.by, **changes)
    return RotorOut.model_validate(rotor)

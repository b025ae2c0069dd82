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
)
from shopapp.core.web import get_or_404
from shopapp.models import Customer
from shopapp.registry import customers, queries

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

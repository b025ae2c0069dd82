"""Intake: book a rotor in as a new job (customer, rotor, tolerance, machine, number).

A use-case (docs/architecture.md, "Inside a feature package"): checks the role,
validates with :mod:`shopapp.core.checks`, flushes and writes its audit event;
the request or CLI command commits once.
"""

from __future__ import annotations

import datetime as dt
import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

from sqlalchemy.exc import IntegrityError
from sqlalchemy.orm import Session

from shopapp.balancing.errors import BalancingInputError
from shopapp.balancing.tolerance import GRADE_VALUES_MM_S
from shopapp.core import audit, locks, numbering
from shopapp.core.checks import PROMISE_AHEAD_DAYS
from shopapp.core.checks import Errors as _Errors
from shopapp.core.checks import date as _date
from shopapp.core.checks import number as _num
from shopapp.core.checks import text as _text
from shopapp.core.clock import shop_today
from shopapp.core.display import plain
from shopapp.core.errors import ValidationFailed
from shopapp.core.permissions import require
from shopapp.core.settings import get_settings
from shopapp.jobs import calc as job_calc
from shopapp.jobs import limits, residual_tests
from shopapp.jobs.queries import open_job_of
from shopapp.models import (
    JOB_KINDS,
    Customer,
    Job,
    JobTransition,
    Machine,
    RotorType,
    User,
)
from shopapp.registry import customers, rotor_types, rotors
from shopapp.registry.common import MAX_SPEED_RPM
from shopapp.traceability import services as traceability


def today() -> dt.date:
    """The shop's today (:func:`shopapp.core.clock.shop_today`), the default day of intake,
    dispatch and returns."""
    return shop_today()


def _prefixed(exc: ValidationFailed, prefix: str, keep: Sequence[str] = ()) -> ValidationFailed:
    """Rename a registry error's fields for the intake form (``name`` → ``new_customer_name``)."""
    errors = {(k if k in keep else prefix + k): v for k, v in exc.errors.items()}
    first = next(iter(errors))
    return ValidationFailed(first, errors[first], errors=errors)


def _is_unique_violation(exc: IntegrityError) -> bool:
    orig = exc.orig
    return getattr(orig, "sqlstate", None) == "23505" or "UNIQUE" in str(orig).upper()


# --------------------------------------------------------------------------- tolerance


@dataclass(frozen=True)
class ToleranceSpec:
    """Requested tolerance: ``grade`` (ISO grade G), ``4w/n`` (journal loads A and B, kg)
    or ``explicit`` (g·mm per correction plane)."""

    method: str
    grade: float | None = None
    journal_load_a_kg: float | None = None
    journal_load_b_kg: float | None = None
    plane_1_gmm: float | None = None
    plane_2_gmm: float | None = None


def _tolerance_columns(e: _Errors, spec: ToleranceSpec | None, rt: RotorType | None
                       ) -> dict[str, Any]:
    if spec is None:
        if rt is not None and rt.tolerance_grade is not None:
            spec = ToleranceSpec("grade", grade=rt.tolerance_grade)
        elif rt is not None and rt.tolerance_gmm is not None:
            spec = ToleranceSpec("explicit", plane_1_gmm=rt.tolerance_gmm)
        else:
            e.add("tolerance_method", "is required (the rotor type has no default tolerance)")
            return {}
    out: dict[str, Any] = {"tolerance_method": spec.method}
    if spec.method == "grade":
        g = _num(e, "tolerance_grade", spec.grade, above=0)
        if g is not None and not any(math.isclose(g, x) for x in GRADE_VALUES_MM_S):
            e.add("tolerance_grade", f"G {plain(g)} is not an ISO 21940-11 grade; use one of "
                  + ", ".join(plain(x) for x in GRADE_VALUES_MM_S))
        out["tolerance_grade"] = g
    elif spec.method == "4w/n":
        out["journal_load_a_kg"] = _num(e, "journal_load_a_kg", spec.journal_load_a_kg, above=0,
                                        maximum=1e6, unit="kg")
        out["journal_load_b_kg"] = _num(e, "journal_load_b_kg", spec.journal_load_b_kg,
                                        required=False, above=0, maximum=1e6, unit="kg")
    elif spec.method == "explicit":
        out["explicit_limit_1_gmm"] = _num(e, "explicit_limit_1_gmm", spec.plane_1_gmm, above=0,
                                           maximum=1e9, unit="g·mm")
        out["explicit_limit_2_gmm"] = _num(e, "explicit_limit_2_gmm", spec.plane_2_gmm,
                                           required=False, above=0, maximum=1e9, unit="g·mm")
    else:
        e.add("tolerance_method", f"{str(spec.method)[:20]!r} is not allowed; choose grade, "
              "4w/n or explicit")
    return out


# --------------------------------------------------------------------------- book in


def _customer_for(session: Session, e: _Errors, by: User,
                  customer: int | Mapping[str, Any]) -> Customer | None:
    if isinstance(customer, Mapping):
        try:
            return customers.create_customer(session, by=by, **dict(customer))
        except ValidationFailed as exc:
            for k, v in _prefixed(exc, "new_customer_").errors.items():
                e.add(k, v)
            return None
        except TypeError:
            e.add("new_customer_name", "unknown customer fields")
            return None
    row = session.get(Customer, customer) if isinstance(customer, int) else None
    if row is None:
        e.add("customer_id", "choose a customer from the list, or enter a new one")
    elif row.archived:
        e.add("customer_id", f"{row.name} is archived; unarchive the customer first")
    return row


def book_in(
    session: Session,
    *,
    by: User,
    customer: int | Mapping[str, Any],
    serial_number: str,
    rotor_type_id: int | None = None,
    one_off: Mapping[str, Any] | None = None,
    tolerance: ToleranceSpec | None = None,
    service_speed_rpm: float | None = None,
    balancing_speed_rpm: float | None = None,
    machine_id: int | None = None,
    received_on: dt.date | None = None,
    promised_on: dt.date | None = None,
    customer_order_ref: str = "",
    notes: str = "",
    kind: str = "new",
    return_of_job_id: int | None = None,
) -> Job:
    """Book a rotor in: a new job in ``booked_in`` with a number from the shop's pattern.

    ``customer`` is an existing customer id or the fields of a new customer
    (:func:`shopapp.registry.customers.create_customer`). The rotor is found by
    serial for that customer (:func:`registry.find_rotor`) or registered with
    ``rotor_type_id`` or, for a one-off rotor, ``one_off`` geometry
    (:func:`registry.create_one_off_rotor_type`). ``tolerance`` defaults to the
    rotor type's. ``service_speed_rpm`` defaults to the rotor type's. The
    machine must take the rotor's mass and the balancing speed. A return job
    (``kind="return"``) names the earlier job (``return_of_job_id``).

    Raises
    ------
    PermissionDenied, ValidationFailed (field → message for every bad field)
    """
    require(by, "work_jobs")
    e = _Errors()
    if kind not in JOB_KINDS:
        e.add("kind", f"{str(kind)[:20]!r} is not allowed; choose new or return")
    earlier: Job | None = None
    if kind == "return":
        earlier = session.get(Job, return_of_job_id) if isinstance(return_of_job_id, int) else None
        if earlier is None:
            e.add("return_of_job_id", "a return job needs the earlier job it returns from")
    elif return_of_job_id is not None:
        e.add("return_of_job_id", "only a return job links to an earlier job")
    bal = _num(e, "balancing_speed_rpm", balancing_speed_rpm, above=0, maximum=MAX_SPEED_RPM,
               unit="rpm")
    svc = _num(e, "service_speed_rpm", service_speed_rpm, required=False, above=0,
               maximum=MAX_SPEED_RPM, unit="rpm")
    received = _date(e, "received_on", received_on or today(), not_after=today())
    promised_on = _date(e, "promised_on", promised_on, ahead_days=PROMISE_AHEAD_DAYS,
                        today=today(), required=False)
    if promised_on is not None and received is not None and promised_on < received:
        e.add("promised_on", f"{promised_on.isoformat()} is before the job is received "
              f"({received.isoformat()})")
    ref = _text(e, "customer_order_ref", customer_order_ref, max_len=100)
    note_text = _text(e, "notes", notes)
    serial = _text(e, "serial_number", serial_number, max_len=100, required=True)
    machine = session.get(Machine, machine_id) if isinstance(machine_id, int) else None
    if machine is None:
        e.add("machine_id", "is required: choose the balancing machine")
    elif machine.archived:
        e.add("machine_id", f"{machine.name} is archived")
    rt_pick = session.get(RotorType, rotor_type_id) if isinstance(rotor_type_id, int) else None
    if rotor_type_id is not None and rt_pick is None:
        e.add("rotor_type_id", "choose a rotor type from the list")
    e.raise_if_any()
    assert machine is not None and bal is not None and received is not None
    # A savepoint: a refusal after the customer or rotor was registered leaves nothing behind.
    with session.begin_nested():
        return _book_in_rows(
            session, e, by=by, customer=customer, serial=serial, rt_pick=rt_pick,
            one_off=one_off, tolerance=tolerance, svc=svc, bal=bal, machine=machine,
            received=received, promised_on=promised_on, ref=ref, note_text=note_text,
            kind=kind, earlier=earlier)


def _book_in_rows(
    session: Session, e: _Errors, *, by: User, customer: int | Mapping[str, Any], serial: str,
    rt_pick: RotorType | None, one_off: Mapping[str, Any] | None,
    tolerance: ToleranceSpec | None, svc: float | None, bal: float, machine: Machine,
    received: dt.date, promised_on: dt.date | None, ref: str, note_text: str, kind: str,
    earlier: Job | None,
) -> Job:
    cust = _customer_for(session, e, by, customer)
    e.raise_if_any()
    assert cust is not None
    if earlier is not None and earlier.customer_id != cust.id:
        e.add("return_of_job_id", f"job {earlier.number} belongs to another customer")
    rotor = rotors.find_rotor(session, cust.id, serial)
    if rotor is not None:
        if rt_pick is not None and rotor.rotor_type_id != rt_pick.id:
            e.add("rotor_type_id", f"serial {rotor.serial_number} is already registered as "
                  f"{rotor.rotor_type.part_number}; leave the type empty or pick that one")
        if rotor.archived:
            e.add("serial_number", f"rotor {rotor.serial_number} is archived; unarchive it first")
        open_job = open_job_of(session, rotor.id)
        if open_job is not None:
            e.add("serial_number", f"rotor {rotor.serial_number} is still in the shop on job "
                  f"{open_job.number}")
    elif rt_pick is None and one_off is None:
        e.add("rotor_type_id", "is required for a new serial: choose its rotor type, or give "
              "one-off geometry")
    if earlier is not None and rotor is not None and earlier.rotor_id != rotor.id:
        e.add("return_of_job_id", f"job {earlier.number} was for another rotor")
    e.raise_if_any()

    if rotor is None:
        try:
            if rt_pick is not None:
                rotor = rotors.create_rotor(session, by=by, customer=cust, rotor_type=rt_pick,
                                              serial_number=serial)
            else:
                assert one_off is not None
                rt_new = rotor_types.create_one_off_rotor_type(
                    session, by=by, customer=cust, serial_number=serial, **dict(one_off))
                rotor = rotors.create_rotor(session, by=by, customer=cust, rotor_type=rt_new,
                                              serial_number=serial)
        except TypeError as exc:
            raise ValidationFailed("one_off", f"unknown geometry field ({exc})") from None
    rt = rotor.rotor_type
    cols = _tolerance_columns(e, tolerance, rt)
    e.raise_if_any()
    limits.check_machine_capacity(e, machine, mass_kg=rt.mass_kg)
    limits.check_reading_planes(e, "machine_id", rt.planes, machine)
    limits.check_speed(e, "balancing_speed_rpm", bal, machine=machine, rotor_type=rt,
                       service_speed_rpm=svc or rt.service_speed_rpm)
    e.raise_if_any()
    # Traceability: an overdue (or failed) machine cannot be chosen for a new job.
    for day in sorted({received, today()}):
        try:
            traceability.require_machine_current(session, machine, day)
        except traceability.MachineNotCurrent as exc:
            raise ValidationFailed("machine_id", exc.message) from None

    job = Job(
        customer_id=cust.id, rotor=rotor, machine_id=machine.id, state="booked_in", kind=kind,
        return_of_job_id=earlier.id if earlier else None, customer_order_ref=ref,
        received_on=received, promised_on=promised_on, service_speed_rpm=svc or
        rt.service_speed_rpm, balancing_speed_rpm=bal, notes=note_text, reopen_count=0,
        residual_test_required=residual_tests.default_residual_test_required(
            cust, cols["tolerance_method"]), **cols,
    )
    try:
        job_calc.job_tolerance(job, rt)
    except BalancingInputError as exc:
        raise ValidationFailed(exc.field, exc.message) from None
    _insert_numbered(session, job)
    session.add(JobTransition(job=job, from_state=None, to_state="booked_in",
                              reason="booked in" if kind == "new" else "customer return",
                              by_id=by.id))
    session.flush()
    audit.record(session, by=by, entity="job", entity_id=job.id, action="book_in",
                 after=audit.snapshot(job), job_id=job.id)
    return job


def _insert_numbered(session: Session, job: Job) -> None:
    """Give ``job`` the next job number and insert it (gapless, race-free: core.locks)."""
    pattern = get_settings(session).job_number_pattern
    locks.hold_sequence(session, "job_number")
    job.number = numbering.next_job_number(session, pattern, on=job.received_on)
    session.add(job)
    session.flush()

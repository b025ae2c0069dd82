"""Jobs: intake, the state machine, runs, corrections, learning and the job list.

States (docs/architecture.md, "Job states")::

    booked_in → on_machine → in_tolerance → certified → dispatched
    booked_in | on_machine | in_tolerance → rejected          (with a reason)
    in_tolerance | certified | dispatched → on_machine        (reopen, with a reason)

Only this module changes ``Job.state``. Every change writes a
:class:`JobTransition` (with its reason) and an :class:`AuditEvent` in the
caller's transaction; a refused change raises :class:`TransitionRefused` that
says why and what is allowed. ``certified`` is set only by the certificates
service through :func:`mark_certified`. Reopening counts as rework
(``reopen_count``) and voids the certificate of a certified job.

Services never commit: the request or CLI command does, once.
"""

from __future__ import annotations

import datetime as dt
import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, fields
from typing import Any

from sqlalchemy import Select, and_, func, or_, select
from sqlalchemy.orm import Session, joinedload, selectinload

from shopapp.balancing.errors import BalancingInputError
from shopapp.balancing.phasors import normalize_deg
from shopapp.balancing.positions import position_angles_deg
from shopapp.balancing.tolerance import GRADE_VALUES_MM_S
from shopapp.core import audit, locks, numbering
from shopapp.core.checks import Errors as _Errors
from shopapp.core.checks import number as _num
from shopapp.core.checks import text as _text
from shopapp.core.errors import NotFound, TransitionRefused, ValidationFailed
from shopapp.core.permissions import require
from shopapp.core.settings import get_settings
from shopapp.jobs import calc as job_calc
from shopapp.jobs import certificate_link
from shopapp.jobs import evidence as job_traceability
from shopapp.models import (
    CORRECTION_ACTIONS,
    JOB_KINDS,
    JOB_STATES,
    READING_UNITS,
    RUN_PURPOSES,
    AuditEvent,
    Correction,
    Customer,
    InfluenceSet,
    Job,
    JobTransition,
    Machine,
    Rotor,
    RotorType,
    Run,
    RunReading,
    User,
    utcnow,
)
from shopapp.registry import customers, rotor_types, rotors
from shopapp.traceability import services as traceability

# The state machine: from-state → states it may move to.
ALLOWED: dict[str, frozenset[str]] = {
    "booked_in": frozenset({"on_machine", "rejected"}),
    "on_machine": frozenset({"in_tolerance", "rejected"}),
    "in_tolerance": frozenset({"certified", "rejected", "on_machine"}),
    "certified": frozenset({"dispatched", "on_machine"}),
    "dispatched": frozenset({"on_machine"}),
    "rejected": frozenset(),
}
REOPEN_FROM = frozenset({"in_tolerance", "certified", "dispatched"})
OPEN_STATES = ("booked_in", "on_machine", "in_tolerance", "certified")
RUN_STATES = frozenset({"booked_in", "on_machine"})
MAX_SPEED_RPM = 500_000.0


# --------------------------------------------------------------------------- small checks


def _today() -> dt.date:
    return utcnow().date()


def _prefixed(exc: ValidationFailed, prefix: str, keep: Sequence[str] = ()) -> ValidationFailed:
    """Rename a registry error's fields for the intake form (``name`` → ``new_customer_name``)."""
    errors = {(k if k in keep else prefix + k): v for k, v in exc.errors.items()}
    first = next(iter(errors))
    return ValidationFailed(first, errors[first], errors=errors)


# --------------------------------------------------------------------------- loading


def load_job(session: Session, job_id: int) -> Job:
    """A job with everything its page shows, in a fixed number of queries."""
    stmt = (
        select(Job)
        .where(Job.id == job_id)
        .options(
            joinedload(Job.customer),
            joinedload(Job.rotor).joinedload(Rotor.rotor_type),
            joinedload(Job.machine),
            joinedload(Job.operator),
            joinedload(Job.return_of),
            selectinload(Job.runs).selectinload(Run.readings),
            selectinload(Job.corrections),
            selectinload(Job.transitions),
        )
    )
    job = session.scalars(stmt).unique().first()
    if job is None:
        raise NotFound(f"no job with id {job_id}")
    return job


def get_job(session: Session, job_id: int) -> Job:
    job = session.get(Job, job_id)
    if job is None:
        raise NotFound(f"no job with id {job_id}")
    return job


def influence_sets_for(session: Session, job: Job) -> list[InfluenceSet]:
    """Stored sets of the job's rotor type on the job's machine (any speed)."""
    if job.machine_id is None:
        return []
    stmt = select(InfluenceSet).where(
        InfluenceSet.rotor_type_id == job.rotor.rotor_type_id,
        InfluenceSet.machine_id == job.machine_id,
    ).order_by(InfluenceSet.learned_at.desc(), InfluenceSet.id.desc())
    return list(session.scalars(stmt))


def evaluate(session: Session, job: Job, *, drill_diameter_mm: float | None = None
             ) -> job_calc.JobCalc:
    """:func:`shopapp.jobs.calc.evaluate` with the job's stored sets loaded."""
    kw: dict[str, Any] = {}
    if drill_diameter_mm is not None:
        kw["drill_diameter_mm"] = drill_diameter_mm
    # A known arbor error the job subtracts (traceability); no query without an arbor.
    kw["arbor_error_gmm"] = job_traceability.arbor_error_gmm(session, job)
    return job_calc.evaluate(job, runs=job.runs, corrections=job.corrections,
                             influence_sets=influence_sets_for(session, job), **kw)


def job_audit_trail(session: Session, job_id: int) -> list[tuple[AuditEvent, str]]:
    """The job's audit events, oldest first, with who did it (one query)."""
    stmt = (
        select(AuditEvent, User.full_name)
        .outerjoin(User, User.id == AuditEvent.user_id)
        .where(AuditEvent.job_id == job_id)
        .order_by(AuditEvent.at, AuditEvent.id)
    )
    return [(ev, name or "system") for ev, name in session.execute(stmt)]


def return_jobs_of(session: Session, job_id: int) -> list[Job]:
    return list(session.scalars(
        select(Job).where(Job.return_of_job_id == job_id).order_by(Job.id)))


# --------------------------------------------------------------------------- transitions


def _refuse(job: Job, to_state: str, why: str = "") -> TransitionRefused:
    allowed = sorted(ALLOWED[job.state])
    nxt = ", ".join(allowed) if allowed else "nothing (it is closed)"
    reason = f" {why}" if why else ""
    return TransitionRefused(
        f"Job {job.number} is {job.state.replace('_', ' ')} and cannot go to "
        f"{to_state.replace('_', ' ')}.{reason} From {job.state} it may go to: {nxt}."
    )


def _move(session: Session, job: Job, to_state: str, *, by: User, reason: str = "",
          action: str, extra: Mapping[str, Any] | None = None,
          at: dt.datetime | None = None) -> JobTransition:
    """Change the state, write the transition and the audit event (no checks here).

    ``at``: a historical moment for both (loading past records); now when omitted.
    """
    names = ["state", *(extra or {})]
    before = audit.snapshot(job, names)
    from_state = job.state
    job.state = to_state
    for k, v in (extra or {}).items():
        setattr(job, k, v)
    tr = JobTransition(job=job, from_state=from_state, to_state=to_state, reason=reason,
                       by_id=by.id)
    if at is not None:
        tr.at = at
    session.add(tr)
    session.flush()
    after = audit.snapshot(job, names)
    if reason:
        after["reason"] = reason
    event = audit.record(session, by=by, entity="job", entity_id=job.id, action=action,
                         before=before, after=after, job_id=job.id)
    if at is not None:
        event.at = at
    return tr


def transition(session: Session, job: Job, to_state: str, *, by: User, reason: str = "",
               on: dt.date | None = None) -> Job:
    """Move ``job`` to ``to_state`` if the job state rules allow it
    (docs/architecture.md, "Job states").

    ``reason`` is required for ``rejected`` and for a reopen (back to
    ``on_machine`` from in_tolerance, certified or dispatched); ``on`` is the
    dispatch date (today by default). ``certified`` is refused here: use
    :func:`mark_certified` (the certificates service does).

    Raises
    ------
    PermissionDenied, ValidationFailed (state, reason, dispatched_on), TransitionRefused
    """
    require(by, "work_jobs")
    if to_state not in JOB_STATES:
        raise ValidationFailed("state", f"{str(to_state)[:40]!r} is not a job state; states are "
                               + ", ".join(JOB_STATES))
    if to_state not in ALLOWED[job.state]:
        raise _refuse(job, to_state)
    if to_state == "certified":
        raise _refuse(job, to_state, "A job becomes certified only when quality issues its "
                                     "certificate.")
    if to_state == "on_machine" and job.state in REOPEN_FROM:
        return reopen(session, job, by=by, reason=reason)
    if to_state == "on_machine":
        return start(session, job, by=by)
    if to_state == "in_tolerance":
        return mark_in_tolerance(session, job, by=by)
    if to_state == "dispatched":
        return dispatch(session, job, by=by, on=on)
    return reject(session, job, by=by, reason=reason)


def _check_allowed(job: Job, to_state: str, from_states: frozenset[str] | None = None) -> None:
    if to_state not in ALLOWED[job.state] or (from_states is not None
                                              and job.state not in from_states):
        raise _refuse(job, to_state)


def start(session: Session, job: Job, *, by: User, reason: str = "") -> Job:
    """booked_in → on_machine (also done by the first run). Sets the operator if unset."""
    require(by, "work_jobs")
    _check_allowed(job, "on_machine", frozenset({"booked_in"}))
    extra: dict[str, Any] = {}
    if job.operator_id is None:
        extra["operator_id"] = by.id
    _move(session, job, "on_machine", by=by, reason=reason, action="start", extra=extra)
    return job


def _refuse_in_tolerance(job: Job, calc: job_calc.JobCalc) -> TransitionRefused:
    v = calc.last_check
    if v is None:
        why = "Log a check or final run first: no check run has been judged yet."
    elif not v.judged:
        why = f"Run {v.seq} could not be judged: {v.message}."
    else:
        out = [f"{r.label} at {r.pct:.0f} % of its limit" for r in v.rows if not r.passed]
        why = f"Run {v.seq} is out of tolerance: {', '.join(out)}."
    return _refuse(job, "in_tolerance", why)


def mark_in_tolerance(session: Session, job: Job, *, by: User) -> Job:
    """on_machine → in_tolerance, only when the last check/final run passes in every plane.

    Sets ``first_in_tolerance_at`` the first time, and learns the job's own
    influence coefficients for its rotor type, machine and speed
    (:func:`learn_coefficients`).
    """
    require(by, "work_jobs")
    _check_allowed(job, "in_tolerance")
    calc = evaluate(session, job)
    if not calc.in_tolerance:
        raise _refuse_in_tolerance(job, calc)
    extra: dict[str, Any] = {}
    if job.first_in_tolerance_at is None:
        extra["first_in_tolerance_at"] = utcnow()
    _move(session, job, "in_tolerance", by=by, action="in_tolerance", extra=extra)
    learn_coefficients(session, job, calc, by=by)
    return job


def mark_certified(session: Session, job: Job, *, by: User, at: dt.datetime | None = None
                   ) -> Job:
    """in_tolerance → certified. Called only by the certificates service (quality role).

    ``at``: the certificate's issue time when it is a historical one (default now).
    """
    require(by, "issue_certificates")
    _check_allowed(job, "certified")
    _move(session, job, "certified", by=by, action="certified", at=at)
    return job


def dispatch(session: Session, job: Job, *, by: User, on: dt.date | None = None) -> Job:
    """certified → dispatched, setting ``dispatched_on`` (today by default)."""
    require(by, "work_jobs")
    _check_allowed(job, "dispatched")
    day = on or _today()
    if day < job.received_on:
        raise ValidationFailed("dispatched_on", f"{day.isoformat()} is before the job was "
                               f"received ({job.received_on.isoformat()})")
    _move(session, job, "dispatched", by=by, action="dispatch", extra={"dispatched_on": day})
    return job


def reject(session: Session, job: Job, *, by: User, reason: str) -> Job:
    """Any state before certified → rejected, with a mandatory reason."""
    require(by, "work_jobs")
    _check_allowed(job, "rejected")
    e = _Errors()
    text = _text(e, "reason", reason, required=True)
    if "reason" in e and not text:
        e["reason"] = "is required: say why the rotor cannot be balanced (e.g. cracked hub)"
    e.raise_if_any()
    _move(session, job, "rejected", by=by, reason=text, action="reject",
          extra={"reject_reason": text})
    return job


def reopen(session: Session, job: Job, *, by: User, reason: str) -> Job:
    """in_tolerance, certified or dispatched → on_machine, with a mandatory reason (rework).

    Increments ``reopen_count`` and clears ``dispatched_on``; a certified (or
    dispatched) job's valid certificate is voided in the same transaction
    (:func:`shopapp.jobs.certificate_link.void_for_reopen`).
    """
    require(by, "work_jobs")
    _check_allowed(job, "on_machine", REOPEN_FROM)
    e = _Errors()
    text = _text(e, "reason", reason, required=True)
    if "reason" in e and not text:
        e["reason"] = "is required: reopening is rework, say why"
    e.raise_if_any()
    was = job.state
    extra: dict[str, Any] = {"reopen_count": job.reopen_count + 1}
    if job.dispatched_on is not None:
        extra["dispatched_on"] = None
    _move(session, job, "on_machine", by=by, reason=text, action="reopen", extra=extra)
    if was in ("certified", "dispatched"):
        certificate_link.void_for_reopen(session, job, by=by, reason=text)
    return job


def allowed_actions(job: Job) -> list[str]:
    """Buttons the job page may show: start, in_tolerance, dispatch, reject, reopen, return."""
    out = []
    nxt = ALLOWED[job.state]
    if job.state == "booked_in":
        out.append("start")
    if "in_tolerance" in nxt:
        out.append("in_tolerance")
    if "dispatched" in nxt:
        out.append("dispatch")
    if "rejected" in nxt:
        out.append("reject")
    if job.state in REOPEN_FROM:
        out.append("reopen")
    if job.state == "dispatched":
        out.append("return")
    return out


# --------------------------------------------------------------------------- intake


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
            e.add("tolerance_grade", f"G {g:g} is not an ISO 21940-11 grade; use one of "
                  + ", ".join(f"{x:g}" for x in GRADE_VALUES_MM_S))
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


def check_machine_capacity(machine: Machine, *, mass_kg: float, speed_rpm: float) -> None:
    """Refuse a rotor the machine cannot take (mass range) or a speed outside its range."""
    e = _Errors()
    if not machine.min_mass_kg <= mass_kg <= machine.max_mass_kg:
        e.add("machine_id", f"{machine.name} takes rotors of {machine.min_mass_kg:g}–"
              f"{machine.max_mass_kg:g} kg; this rotor is {mass_kg:g} kg")
    if not machine.min_speed_rpm <= speed_rpm <= machine.max_speed_rpm:
        e.add("balancing_speed_rpm", f"{machine.name} runs at {machine.min_speed_rpm:g}–"
              f"{machine.max_speed_rpm:g} rpm; {speed_rpm:g} rpm is outside that range")
    e.raise_if_any()


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


def _open_job_of(session: Session, rotor_id: int) -> Job | None:
    return session.scalars(select(Job).where(Job.rotor_id == rotor_id,
                                             Job.state.in_(OPEN_STATES)).limit(1)).first()


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
    serial for that customer (:func:`shopapp.registry.rotors.find_rotor`) or registered with
    ``rotor_type_id`` or, for a one-off rotor, ``one_off`` geometry
    (:func:`shopapp.registry.rotor_types.create_one_off_rotor_type`). ``tolerance`` defaults to the
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
    received = received_on or _today()
    if promised_on is not None and promised_on < received:
        e.add("promised_on", f"{promised_on.isoformat()} is before the job is received "
              f"({received.isoformat()})")
    ref = _text(e, "customer_order_ref", customer_order_ref, max_len=100)
    note_text = _text(e, "notes", notes)
    serial = _text(e, "serial_number", serial_number, max_len=100, required=True)
    machine = session.get(Machine, machine_id) if isinstance(machine_id, int) else None
    if machine is None:
        e.add("machine_id", "choose the balancing machine")
    elif machine.archived:
        e.add("machine_id", f"{machine.name} is archived")
    rt_pick = session.get(RotorType, rotor_type_id) if isinstance(rotor_type_id, int) else None
    if rotor_type_id is not None and rt_pick is None:
        e.add("rotor_type_id", "choose a rotor type from the list")
    e.raise_if_any()
    assert machine is not None and bal is not None
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
        open_job = _open_job_of(session, rotor.id)
        if open_job is not None:
            e.add("serial_number", f"rotor {rotor.serial_number} is still in the shop on job "
                  f"{open_job.number}")
    elif rt_pick is None and one_off is None:
        e.add("rotor_type_id", "new serial: choose its rotor type, or give one-off geometry")
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
    check_machine_capacity(machine, mass_kg=rt.mass_kg, speed_rpm=bal)
    # Traceability: an overdue (or failed) machine cannot be chosen for a new job.
    for day in sorted({received, _today()}):
        try:
            traceability.require_machine_current(session, machine, day)
        except traceability.MachineNotCurrent as exc:
            raise ValidationFailed("machine_id", exc.message) from None

    job = Job(
        customer_id=cust.id, rotor=rotor, machine_id=machine.id, state="booked_in", kind=kind,
        return_of_job_id=earlier.id if earlier else None, customer_order_ref=ref,
        received_on=received, promised_on=promised_on, service_speed_rpm=svc or
        rt.service_speed_rpm, balancing_speed_rpm=bal, notes=note_text, reopen_count=0,
        residual_test_required=job_traceability.default_residual_test_required(
            cust, cols["tolerance_method"]), **cols,
    )
    if job.balancing_speed_rpm > job.service_speed_rpm:
        raise ValidationFailed("balancing_speed_rpm", f"{bal:g} rpm is above the service speed "
                               f"{job.service_speed_rpm:g} rpm: over-speed risk")
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


def open_return(session: Session, *, by: User, earlier_job: Job, received_on: dt.date | None
                = None, notes: str = "") -> Job:
    """A customer return: a new job of kind ``return`` linked to a dispatched earlier job.

    Copies the rotor, tolerance, speeds and machine of the earlier job.
    """
    require(by, "work_jobs")
    if earlier_job.state != "dispatched":
        raise TransitionRefused(f"Job {earlier_job.number} is {earlier_job.state}: only a "
                                "dispatched job can come back as a return.")
    received = received_on or _today()
    if received < (earlier_job.dispatched_on or earlier_job.received_on):
        raise ValidationFailed("received_on", f"{received.isoformat()} is before job "
                               f"{earlier_job.number} was dispatched")
    spec = ToleranceSpec(earlier_job.tolerance_method, earlier_job.tolerance_grade,
                         earlier_job.journal_load_a_kg, earlier_job.journal_load_b_kg,
                         earlier_job.explicit_limit_1_gmm, earlier_job.explicit_limit_2_gmm)
    return book_in(
        session, by=by, customer=earlier_job.customer_id,
        serial_number=earlier_job.rotor.serial_number, tolerance=spec,
        service_speed_rpm=earlier_job.service_speed_rpm,
        balancing_speed_rpm=earlier_job.balancing_speed_rpm, machine_id=earlier_job.machine_id,
        received_on=received, notes=notes, customer_order_ref=earlier_job.customer_order_ref,
        kind="return", return_of_job_id=earlier_job.id,
    )


@dataclass(frozen=True)
class RotorHistory:
    """What intake shows for a known serial: the rotor, its job count, last job and residual."""

    rotor: Rotor
    jobs: int
    last_job: Job | None
    last_verdict: job_calc.RunVerdict | None
    open_job: Job | None


def rotor_history(session: Session, customer_id: int, serial_number: str) -> RotorHistory | None:
    """History of a known serial for the intake page, or None for an unknown serial."""
    serial = "".join(ch for ch in serial_number if ord(ch) >= 32)
    rotor = rotors.find_rotor(session, customer_id, serial)
    if rotor is None:
        return None
    count = session.scalar(select(func.count()).select_from(Job).where(Job.rotor_id == rotor.id))
    last_id = session.scalar(select(Job.id).where(Job.rotor_id == rotor.id)
                             .order_by(Job.received_on.desc(), Job.id.desc()).limit(1))
    last = load_job(session, last_id) if last_id is not None else None
    verdict = None
    if last is not None:
        verdict = evaluate(session, last).last_check
    return RotorHistory(rotor, count or 0, last, verdict, _open_job_of(session, rotor.id))


# --------------------------------------------------------------------------- runs


Reading = tuple[int, float, float, str]
Trial = tuple[int, float, float, float]


def record_run(
    session: Session,
    job: Job,
    *,
    by: User,
    purpose: str,
    speed_rpm: float,
    readings: Sequence[Reading],
    trial: Trial | None = None,
    earlier_trial_left_on: bool = False,
    notes: str = "",
) -> Run:
    """Log a run: per-plane readings ``(plane, amplitude, angle_deg, unit)``, internal angles.

    ``trial = (plane, mass_g, angle_deg, radius_mm)`` for trial runs only. The
    first run moves a booked-in job onto the machine. Angles are normalised to
    [0, 360). Errors name the form fields ``amplitude_<plane>``,
    ``angle_<plane>_deg``, ``unit``, ``trial_*``, ``speed_rpm``, ``purpose``.
    """
    require(by, "work_jobs")
    if job.state not in RUN_STATES and not (purpose == "verification"
                                            and job.state == "in_tolerance"):
        raise TransitionRefused(f"Job {job.number} is {job.state.replace('_', ' ')}: runs are "
                                "logged while it is booked in or on the machine"
                                + (" (reopen it first)" if job.state in REOPEN_FROM else "."))
    planes = job.rotor.rotor_type.planes
    e = _Errors()
    if purpose not in RUN_PURPOSES:
        e.add("purpose", f"{str(purpose)[:20]!r} is not allowed; choose "
              + ", ".join(RUN_PURPOSES))
    speed = _num(e, "speed_rpm", speed_rpm, above=0, maximum=MAX_SPEED_RPM, unit="rpm")
    note_text = _text(e, "notes", notes)
    clean: dict[int, tuple[float, float, str]] = {}
    units = set()
    for item in readings:
        try:
            plane, amplitude, angle, unit = item
        except (TypeError, ValueError):
            e.add("readings", "each reading is (plane, amplitude, angle_deg, unit)")
            continue
        if plane not in range(1, planes + 1):
            e.add("readings", f"plane {plane!r} does not exist: this rotor has {planes} plane(s)")
            continue
        if plane in clean:
            e.add("readings", f"plane {plane} is given twice")
            continue
        amp = _num(e, f"amplitude_{plane}", amplitude, minimum=0.0, maximum=1e9)
        ang = _num(e, f"angle_{plane}_deg", angle, minimum=-1e6, maximum=1e6, unit="°")
        if unit not in READING_UNITS:
            e.add("unit", f"{str(unit)[:12]!r} is not a reading unit; use one of "
                  + ", ".join(READING_UNITS))
        units.add(unit)
        if amp is not None and ang is not None:
            clean[plane] = (amp, normalize_deg(ang), unit)
    for p in range(1, planes + 1):
        if p not in clean and f"amplitude_{p}" not in e and f"angle_{p}_deg" not in e:
            e.add(f"amplitude_{p}", f"plane {p}: amplitude and angle are required")
    if len(units) > 1:
        e.add("unit", "all readings of one run must be in the same unit")
    trial_cols: dict[str, Any] = {}
    if purpose == "trial":
        if trial is None:
            e.add("trial_mass_g", "a trial run needs the trial mass, its plane, angle and radius")
        else:
            try:
                t_plane, t_mass, t_angle, t_radius = trial
            except (TypeError, ValueError):
                t_plane = t_mass = t_angle = t_radius = None
            if t_plane not in range(1, planes + 1):
                e.add("trial_plane", f"must be a plane of this rotor (1–{planes})")
            trial_cols = {
                "trial_plane": t_plane,
                "trial_mass_g": _num(e, "trial_mass_g", t_mass, above=0, maximum=1e6, unit="g"),
                "trial_angle_deg": _num(e, "trial_angle_deg", t_angle, minimum=-1e6,
                                        maximum=1e6),
                "trial_radius_mm": _num(e, "trial_radius_mm", t_radius, above=0, maximum=1e5,
                                        unit="mm"),
            }
            if trial_cols["trial_angle_deg"] is not None:
                trial_cols["trial_angle_deg"] = normalize_deg(trial_cols["trial_angle_deg"])
    else:
        if trial is not None:
            e.add("trial_mass_g", "trial mass fields are only for trial runs")
        if earlier_trial_left_on:
            e.add("earlier_trial_left_on", "only for trial runs")
    e.raise_if_any()
    assert speed is not None
    if job.state == "booked_in":
        start(session, job, by=by, reason=f"first run logged ({purpose})")
    locks.hold_row(session, job)  # the next run number is decided on the committed runs
    seq = (session.scalar(select(func.max(Run.seq)).where(Run.job_id == job.id)) or 0) + 1
    run = Run(job=job, seq=seq, purpose=purpose, speed_rpm=speed, notes=note_text, by_id=by.id,
              earlier_trial_left_on=bool(earlier_trial_left_on and purpose == "trial"),
              **trial_cols)
    run.readings = [RunReading(plane=p, amplitude=a, angle_deg=g, unit=u)
                    for p, (a, g, u) in sorted(clean.items())]
    session.add(run)
    session.flush()
    if purpose in job_calc.CHECK_PURPOSES:
        # Stored so the shop measures (first-pass rate) can read the verdict in SQL.
        verdict = evaluate(session, job).verdicts.get(run.id)
        run.within_tolerance = verdict.passed if verdict is not None and verdict.judged else None
        session.flush()
    audit.record(
        session, by=by, entity="run", entity_id=run.id, action="record_run", job_id=job.id,
        after={**audit.snapshot(run, ["seq", "purpose", "speed_rpm", "trial_plane",
                                      "trial_mass_g", "trial_angle_deg", "trial_radius_mm",
                                      "earlier_trial_left_on", "within_tolerance"]),
               "readings": [[p, a, g, u] for p, (a, g, u) in sorted(clean.items())]},
    )
    if purpose in job_calc.CHECK_PURPOSES:
        _score_stored_set(session, job, run, by=by)
    return run


# --------------------------------------------------------------------------- corrections


def _parse_split(e: _Errors, split: Any, rt: RotorType, plane: int) -> list[dict[str, Any]] | None:
    if split is None or split == [] or split == "":
        return None
    count = rt.positions_1 if plane == 1 else rt.positions_2
    first = rt.first_position_1_deg if plane == 1 else rt.first_position_2_deg
    if count is None or count < 3:
        e.add("split", f"plane {plane} has no fixed positions to split onto")
        return None
    angles = position_angles_deg(count, first)
    out = []
    if not isinstance(split, Sequence) or isinstance(split, str):
        e.add("split", "must be a list of positions and masses")
        return None
    for part in split:
        if not isinstance(part, Mapping):
            e.add("split", "each part is a position and a mass")
            return None
        pos = part.get("position")
        if isinstance(pos, bool) or not isinstance(pos, int) or not 1 <= pos <= count:
            e.add("split", f"position {pos!r} does not exist: plane {plane} has positions "
                  f"1–{count}")
            return None
        mass = _num(e, "split", part.get("mass_g"), above=0, maximum=1e6, unit="g")
        if mass is None:
            return None
        out.append({"position": pos, "angle_deg": angles[pos - 1], "mass_g": mass})
    return out or None


def record_correction(
    session: Session,
    job: Job,
    *,
    by: User,
    run_id: int | None,
    plane: int,
    action: str,
    mass_g: float,
    angle_deg: float,
    radius_mm: float,
    advised_mass_g: float | None = None,
    advised_angle_deg: float | None = None,
    split: Sequence[Mapping[str, Any]] | None = None,
    drill_diameter_mm: float | None = None,
    drill_depth_mm: float | None = None,
    drill_holes: int | None = None,
) -> Correction:
    """Record what was actually fitted (or removed) in one plane; it may differ from the advice.

    ``mass_g``/``angle_deg`` are the single equivalent correction (internal
    angle: where mass was added, or where it was removed); ``split`` lists the
    parts fitted on fixed positions (``{"position", "mass_g"}``, angles from the
    rotor type). Drill fields are for removal only.
    """
    require(by, "work_jobs")
    if job.state != "on_machine":
        raise TransitionRefused(f"Job {job.number} is {job.state.replace('_', ' ')}: corrections "
                                "are recorded while it is on the machine.")
    rt = job.rotor.rotor_type
    e = _Errors()
    if plane not in range(1, rt.planes + 1):
        e.add("plane", f"must be a plane of this rotor (1–{rt.planes})")
    if action not in CORRECTION_ACTIONS:
        e.add("action", f"{str(action)[:20]!r} is not allowed; choose add or remove")
    if run_id is not None:
        run = session.get(Run, run_id) if isinstance(run_id, int) else None
        if run is None or run.job_id != job.id:
            e.add("run_id", "must be a run of this job")
    cols: dict[str, Any] = {
        "mass_g": _num(e, "mass_g", mass_g, above=0, maximum=1e6, unit="g"),
        "angle_deg": _num(e, "angle_deg", angle_deg, minimum=-1e6, maximum=1e6),
        "radius_mm": _num(e, "radius_mm", radius_mm, above=0, maximum=1e5, unit="mm"),
        "advised_mass_g": _num(e, "advised_mass_g", advised_mass_g, required=False, minimum=0),
        "advised_angle_deg": _num(e, "advised_angle_deg", advised_angle_deg, required=False,
                                  minimum=-1e6, maximum=1e6),
        "drill_diameter_mm": _num(e, "drill_diameter_mm", drill_diameter_mm, required=False,
                                  above=0, maximum=1000, unit="mm"),
        "drill_depth_mm": _num(e, "drill_depth_mm", drill_depth_mm, required=False, above=0,
                               maximum=10000, unit="mm"),
    }
    holes = _num(e, "drill_holes", drill_holes, required=False, minimum=1, maximum=100)
    if holes is not None and not float(holes).is_integer():
        e.add("drill_holes", f"must be a whole number, got {holes:g}")
    cols["drill_holes"] = int(holes) if holes is not None and float(holes).is_integer() else None
    if action == "add":
        for f in ("drill_diameter_mm", "drill_depth_mm", "drill_holes"):
            if cols[f] is not None:
                e.add(f, "drill details are only for removal")
    for f in ("angle_deg", "advised_angle_deg"):
        if cols[f] is not None:
            cols[f] = normalize_deg(cols[f])
    parts = _parse_split(e, split, rt, plane) if plane in (1, 2) else None
    e.raise_if_any()
    _record_influence_set(session, job, run_id, by=by)
    corr = Correction(job=job, run_id=run_id, plane=plane, action=action, split=parts,
                      applied_by_id=by.id, **cols)
    session.add(corr)
    session.flush()
    audit.record(session, by=by, entity="correction", entity_id=corr.id,
                 action="record_correction", after=audit.snapshot(corr), job_id=job.id)
    return corr


def _record_influence_set(session: Session, job: Job, run_id: int | None, *, by: User) -> None:
    """Fix the stored set on the job when its first correction follows that set's advice.

    From then on the job is judged with this set whatever is learned later
    (:func:`shopapp.jobs.calc.job_influence_set`). Jobs with trial runs
    of their own, or already fixed, cost no evaluation.
    """
    if job.influence_set_id is not None or job.machine_id is None:
        return
    if any(r.purpose == "trial" for r in job.runs):
        return
    calc = evaluate(session, job)
    c = calc.coefficients
    if c is None or c.source != "stored" or c.stored is None:
        return
    if run_id is not None and calc.advice is not None and calc.advice.run_id != run_id:
        return
    job.influence_set_id = c.stored.id
    session.flush()
    audit.record(session, by=by, entity="job", entity_id=job.id, action="use_influence_set",
                 before={"influence_set_id": None}, after={"influence_set_id": c.stored.id},
                 job_id=job.id)


# --------------------------------------------------------------------------- learning


def learn_coefficients(session: Session, job: Job, calc: job_calc.JobCalc, *, by: User
                       ) -> InfluenceSet | None:
    """Store the job's own influence coefficients for its rotor type, machine and speed.

    Done when a job with trial runs reaches in_tolerance (single- and
    two-plane); a job reaching tolerance again after a reopen updates the set
    it learned before instead of adding a second one.
    """
    c = calc.coefficients
    if c is None or c.source != "trials" or job.machine_id is None or c.speed_rpm is None:
        return None
    rt_id = job.rotor.rotor_type_id
    existing = session.scalars(select(InfluenceSet).where(
        InfluenceSet.source_job_id == job.id, InfluenceSet.rotor_type_id == rt_id,
        InfluenceSet.machine_id == job.machine_id)).first()
    values = {"speed_rpm": c.speed_rpm, "planes": calc.planes, "coefficients": c.as_json(),
              "reading_unit": c.unit, "condition_number": c.condition_number}
    if existing is not None:
        before = audit.snapshot(existing)
        for k, v in values.items():
            setattr(existing, k, v)
        existing.learned_at = utcnow()
        row, action = existing, "relearn"
    else:
        before = None
        row = InfluenceSet(rotor_type_id=rt_id, machine_id=job.machine_id, source_job_id=job.id,
                           **values)
        session.add(row)
        action = "learn"
    session.flush()
    audit.record(session, by=by, entity="influence_set", entity_id=row.id, action=action,
                 before=before, after=audit.snapshot(row), job_id=job.id)
    return row


def _score_stored_set(session: Session, job: Job, run: Run, *, by: User) -> None:
    """After a check run of a job corrected from a stored set: how well did it predict?

    ``last_prediction_error_pct = ‖V0 + A·W_applied − V_check‖ / ‖V0‖ · 100``
    (:func:`job_calc.prediction_error_pct`), V0 the run the corrections answered.
    """
    data = [job_calc.run_data(r) for r in sorted(job.runs, key=lambda r: r.seq) if r.readings]
    if any(r.purpose == "trial" for r in data):
        return  # the job used its own coefficients
    judged = [r for r in data if r.purpose in job_calc.JUDGED_PURPOSES and r.run_id != run.id]
    if not judged:
        return
    before_run = judged[-1]
    answering = [c for c in job.corrections if c.run_id == before_run.run_id]
    if not answering:
        return
    stored = job_calc.job_influence_set(job, influence_sets_for(session, job), job.runs,
                                        speed_rpm=before_run.speed_rpm,
                                        planes=job.rotor.rotor_type.planes,
                                        unit=before_run.unit)
    if stored is None:
        return
    current = job_calc.run_data(run)
    if current.unit != stored.reading_unit:
        return
    radii = job_calc.plane_radii_mm(job.rotor.rotor_type)
    applied = [job_calc.applied_vector_g(answering, p + 1, r) for p, r in enumerate(radii)]
    try:
        err = job_calc.prediction_error_pct(job_calc.stored_matrix(stored), before_run.readings,
                                            applied, current.readings)
    except BalancingInputError:
        return
    before = audit.snapshot(stored, ["last_prediction_error_pct", "last_used_at"])
    stored.last_prediction_error_pct = err
    stored.last_used_at = utcnow()
    session.flush()
    audit.record(session, by=by, entity="influence_set", entity_id=stored.id,
                 action="prediction_scored", before=before,
                 after=audit.snapshot(stored, ["last_prediction_error_pct", "last_used_at"]),
                 job_id=job.id)


# --------------------------------------------------------------------------- job list


@dataclass
class JobFilter:
    """Filters of the job list (query parameters of ``/jobs``; dashboard links use them).

    ``reworked``: True = reopened at least once or a return job; False = neither.
    ``q`` searches job number, serial number and customer name (case-insensitive).
    """

    operator_id: int | None = None
    machine_id: int | None = None
    rotor_type_id: int | None = None
    customer_id: int | None = None
    rotor_id: int | None = None
    state: str | None = None
    kind: str | None = None
    received_from: dt.date | None = None
    received_to: dt.date | None = None
    dispatched_from: dt.date | None = None
    dispatched_to: dt.date | None = None
    reworked: bool | None = None
    q: str = ""

    @classmethod
    def from_args(cls, args: Mapping[str, Any]) -> tuple[JobFilter, list[str]]:
        """Parse query parameters; junk values are dropped with a message, never an error."""
        f = cls()
        messages: list[str] = []
        for fl in fields(cls):
            raw = args.get(fl.name)
            if raw is None or str(raw).strip() == "":
                continue
            # Control characters (NUL breaks PostgreSQL text) are never meaningful here.
            text = "".join(ch for ch in str(raw) if ord(ch) >= 32).strip()[:200]
            if not text:
                continue
            if fl.name.endswith("_id"):
                if text.isdigit() and len(text) < 12:
                    setattr(f, fl.name, int(text))
                else:
                    messages.append(f"{fl.name}: {text[:20]!r} is not an id; ignored")
            elif fl.name in ("received_from", "received_to", "dispatched_from", "dispatched_to"):
                try:
                    setattr(f, fl.name, dt.date.fromisoformat(text))
                except ValueError:
                    messages.append(f"{fl.name}: {text[:20]!r} is not a date (YYYY-MM-DD); "
                                    "ignored")
            elif fl.name == "state":
                if text in JOB_STATES:
                    f.state = text
                else:
                    messages.append(f"state: {text[:20]!r} is not a job state; ignored")
            elif fl.name == "kind":
                if text in JOB_KINDS:
                    f.kind = text
                else:
                    messages.append(f"kind: {text[:20]!r} is not new or return; ignored")
            elif fl.name == "reworked":
                if text in ("0", "1"):
                    f.reworked = text == "1"
                else:
                    messages.append(f"reworked: {text[:20]!r} is not 0 or 1; ignored")
            elif fl.name == "q":
                f.q = text
        return f, messages

    def to_args(self) -> dict[str, str]:
        """The filter as query parameters (for pager and links)."""
        out: dict[str, str] = {}
        for fl in fields(self):
            v = getattr(self, fl.name)
            if v is None or v == "":
                continue
            if isinstance(v, bool):
                out[fl.name] = "1" if v else "0"
            elif isinstance(v, dt.date):
                out[fl.name] = v.isoformat()
            else:
                out[fl.name] = str(v)
        return out


def _like(text: str) -> str:
    esc = text.replace("\\", "\\\\").replace("%", "\\%").replace("_", "\\_")
    return f"%{esc}%"


def filtered_jobs_stmt(f: JobFilter) -> Select[tuple[Job]]:
    """Jobs matching ``f``, newest received first, with what the list shows eager-loaded."""
    stmt = select(Job).options(
        joinedload(Job.customer),
        joinedload(Job.rotor).joinedload(Rotor.rotor_type),
        joinedload(Job.machine),
        joinedload(Job.operator),
    )
    conds: list[Any] = []
    for name in ("operator_id", "machine_id", "customer_id", "rotor_id", "state", "kind"):
        value = getattr(f, name)
        if value is not None:
            conds.append(getattr(Job, name) == value)
    if f.rotor_type_id is not None:
        conds.append(Job.rotor.has(Rotor.rotor_type_id == f.rotor_type_id))
    if f.received_from is not None:
        conds.append(Job.received_on >= f.received_from)
    if f.received_to is not None:
        conds.append(Job.received_on <= f.received_to)
    if f.dispatched_from is not None:
        conds.append(Job.dispatched_on >= f.dispatched_from)
    if f.dispatched_to is not None:
        conds.append(Job.dispatched_on <= f.dispatched_to)
    if f.reworked is True:
        conds.append(or_(Job.reopen_count > 0, Job.kind == "return"))
    elif f.reworked is False:
        conds.append(and_(Job.reopen_count == 0, Job.kind == "new"))
    if f.q:
        pat = _like(f.q)
        conds.append(or_(
            Job.number.ilike(pat, escape="\\"),
            Job.rotor.has(Rotor.serial_number.ilike(pat, escape="\\")),
            Job.customer.has(Customer.name.ilike(pat, escape="\\")),
        ))
    if conds:
        stmt = stmt.where(*conds)
    return stmt.order_by(Job.received_on.desc(), Job.id.desc())


@dataclass(frozen=True)
class HomePanel:
    my_open: list[Job]
    waiting: list[Job]


def home_panel(session: Session, user: User, *, limit: int = 10) -> HomePanel:
    """Start-page panel: the user's open jobs and the jobs waiting to start (2 queries)."""
    base = select(Job).options(joinedload(Job.customer),
                               joinedload(Job.rotor).joinedload(Rotor.rotor_type),
                               joinedload(Job.machine))
    mine = session.scalars(base.where(Job.operator_id == user.id,
                                      Job.state.in_(("on_machine", "in_tolerance")))
                           .order_by(Job.received_on, Job.id).limit(limit)).unique().all()
    waiting = session.scalars(base.where(Job.state == "booked_in")
                              .order_by(Job.promised_on.is_(None), Job.promised_on,
                                        Job.received_on, Job.id).limit(limit)).unique().all()
    return HomePanel(list(mine), list(waiting))

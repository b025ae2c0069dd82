"""Job states: the state machine, its transitions and the customer return.

States (docs/architecture.md, "Job states")::

    booked_in → on_machine → in_tolerance → certified → dispatched
    booked_in | on_machine | in_tolerance → rejected          (with a reason)
    in_tolerance | certified | dispatched → on_machine        (reopen, with a reason)
    certified → in_tolerance                                   (its only valid certificate voided)

Only this module changes ``Job.state``. Every change writes a
:class:`JobTransition` (with its reason) and an :class:`AuditEvent` in the
caller's transaction; a refused change raises :class:`TransitionRefused` that
says why and what is allowed. ``certified`` is set only by the certificates
service through :func:`mark_certified`, and left only through
:func:`certificate_voided` when quality voids the job's only valid certificate:
the job goes back to ``in_tolerance`` so it cannot be dispatched until a new
revision is issued. Dispatch itself also asks for a valid certificate. Reopening counts as rework
(``reopen_count``) and voids the certificate of a certified job.

Use-cases never commit: the request or CLI command does, once.
"""

from __future__ import annotations

import datetime as dt
from collections.abc import Mapping
from typing import Any

from sqlalchemy.orm import Session

from shopapp.core import audit
from shopapp.core.checks import Errors as _Errors
from shopapp.core.checks import day_refusal
from shopapp.core.checks import text as _text
from shopapp.core.display import of_limit
from shopapp.core.errors import TransitionRefused, ValidationFailed
from shopapp.core.permissions import require
from shopapp.jobs import calc as job_calc
from shopapp.jobs import certificate_link
from shopapp.jobs.intake import ToleranceSpec, book_in, today
from shopapp.jobs.learning import learn_coefficients
from shopapp.jobs.queries import evaluate
from shopapp.models import JOB_STATES, Job, JobTransition, User, utcnow

# The state machine: from-state → states it may move to.
ALLOWED: dict[str, frozenset[str]] = {
    "booked_in": frozenset({"on_machine", "rejected"}),
    "on_machine": frozenset({"in_tolerance", "rejected"}),
    "in_tolerance": frozenset({"certified", "rejected", "on_machine"}),
    "certified": frozenset({"dispatched", "on_machine", "in_tolerance"}),
    "dispatched": frozenset({"on_machine"}),
    "rejected": frozenset(),
}
REOPEN_FROM = frozenset({"in_tolerance", "certified", "dispatched"})


# A past job imported from spreadsheets (shopapp.jobs.past_jobs) is a record of old work:
# never reworked or returned, so it never counts as rework and never gets a certificate.
_IMPORTED = ("Job {number} is a past job imported from old records and cannot be {what}; "
             "book the rotor in as a new job.")


def _words(state: str) -> str:
    """A state as the pages write it (``on_machine`` → ``on machine``)."""
    return state.replace("_", " ")


def _refuse(job: Job, to_state: str, why: str = "") -> TransitionRefused:
    allowed = sorted(ALLOWED[job.state])
    nxt = ", ".join(_words(s) for s in allowed) if allowed else "nothing (it is closed)"
    reason = f" {why}" if why else ""
    if to_state == job.state:
        return TransitionRefused(f"Job {job.number} is already {_words(job.state)}.{reason} "
                                 f"From {_words(job.state)} it may go to: {nxt}.")
    return TransitionRefused(
        f"Job {job.number} is {_words(job.state)} and cannot go to "
        f"{_words(to_state)}.{reason} From {_words(job.state)} it may go to: {nxt}."
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
    if to_state == "in_tolerance" and job.state == "certified":
        raise _refuse(job, to_state, "A certified job goes back to in tolerance only when "
                                     "quality voids its certificate.")
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
        out = [f"{r.label} at {of_limit(r.pct)} of its limit" for r in v.rows if not r.passed]
        why = f"Run {v.seq} is out of tolerance: {', '.join(out)}."
    return _refuse(job, "in_tolerance", why)


def mark_in_tolerance(session: Session, job: Job, *, by: User) -> Job:
    """on_machine → in_tolerance, only when the job has an initial run and its last
    check/final run passes in every plane.

    Sets ``first_in_tolerance_at`` the first time, and learns the job's own
    influence coefficients for its rotor type, machine and speed
    (:func:`shopapp.jobs.learning.learn_coefficients`).
    """
    require(by, "work_jobs")
    _check_allowed(job, "in_tolerance", frozenset({"on_machine"}))
    if not any(r.purpose == "initial" for r in job.runs):
        # The certificate states the unbalance as received; without an initial run it
        # would state a reading nobody took.
        raise _refuse(job, "in_tolerance", "It has no initial run: log the rotor's "
                      "unbalance as received first.")
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


def certificate_voided(session: Session, job: Job, *, by: User, reason: str,
                       at: dt.datetime | None = None) -> Job:
    """certified → in_tolerance: quality voided the job's only valid certificate.

    Called by the certificates service after the void (``job`` must then have
    no valid certificate left). A certified job without a valid certificate
    could otherwise be dispatched on a void paper; back in ``in_tolerance`` it
    waits in the certificate queue until quality issues the next revision. A
    dispatched job keeps its state (the rotor has left the shop); quality
    reissues or the job is reopened. ``at``: the void's moment when historical.
    """
    require(by, "issue_certificates")
    _check_allowed(job, "in_tolerance", frozenset({"certified"}))
    if certificate_link.current_certificate(session, job) is not None:
        raise _refuse(job, "in_tolerance", "It still has a valid certificate.")
    _move(session, job, "in_tolerance", by=by, reason=reason, action="certificate_void", at=at)
    return job


def dispatch(session: Session, job: Job, *, by: User, on: dt.date | None = None) -> Job:
    """certified → dispatched, setting ``dispatched_on`` (today by default).

    Every job leaves with a valid certificate: a certified job whose
    certificate was voided is refused (docs/architecture.md, "Job states").
    """
    require(by, "work_jobs")
    _check_allowed(job, "dispatched")
    day = on or today()  # the typed field first: its message goes beside it
    refusal = day_refusal(day, today=today())
    if refusal is not None:
        raise ValidationFailed("dispatched_on", refusal)
    if day < job.received_on:
        raise ValidationFailed("dispatched_on", f"{day.isoformat()} is before the job was "
                               f"received ({job.received_on.isoformat()})")
    if certificate_link.current_certificate(session, job) is None:
        raise _refuse(job, "dispatched", "It has no valid certificate: quality must issue "
                                         "a new revision first.")
    _move(session, job, "dispatched", by=by, action="dispatch", extra={"dispatched_on": day})
    return job


def _reason(reason: str, missing: str) -> str:
    """The checked reason of a reject or reopen; ``missing`` says why one is needed."""
    e = _Errors()
    text = _text(e, "reason", reason, required=True)
    if "reason" in e and not text:
        e["reason"] = f"is required: {missing}"
    e.raise_if_any()
    return text


def reject(session: Session, job: Job, *, by: User, reason: str) -> Job:
    """Any state before certified → rejected, with a mandatory reason."""
    require(by, "work_jobs")
    _check_allowed(job, "rejected")
    text = _reason(reason, "say why the rotor cannot be balanced (e.g. cracked hub)")
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
    if job.imported:
        raise TransitionRefused(_IMPORTED.format(number=job.number, what="reopened"))
    _check_allowed(job, "on_machine", REOPEN_FROM)
    text = _reason(reason, "reopening is rework, say why")
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
    if job.state == "on_machine":
        out.append("in_tolerance")
    if "dispatched" in nxt:
        out.append("dispatch")
    if "rejected" in nxt:
        out.append("reject")
    if job.state in REOPEN_FROM and not job.imported:
        out.append("reopen")
    if job.state == "dispatched" and not job.imported:
        out.append("return")
    return out


# --------------------------------------------------------------------------- returns


def open_return(session: Session, *, by: User, earlier_job: Job, received_on: dt.date | None
                = None, notes: str = "") -> Job:
    """A customer return: a new job of kind ``return`` linked to a dispatched earlier job.

    Copies the rotor, tolerance, speeds and machine of the earlier job.
    """
    require(by, "work_jobs")
    if earlier_job.imported:
        raise TransitionRefused(_IMPORTED.format(number=earlier_job.number,
                                                 what="the earlier job of a return"))
    if earlier_job.state != "dispatched":
        raise TransitionRefused(f"Job {earlier_job.number} is {earlier_job.state}: only a "
                                "dispatched job can come back as a return.")
    received = received_on or today()
    refusal = day_refusal(received, today=today())
    if refusal is not None:
        raise ValidationFailed("received_on", refusal)
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

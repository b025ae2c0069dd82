"""Jobs: the list with the page's filters, one job, book in, change state, log a run,
correction advice and recording what was fitted — the jobs pages' use-cases."""

from __future__ import annotations

from typing import Any

from flask import Blueprint, url_for

from shopapp.api.operations import Call, operation
from shopapp.api.paging import page_of
from shopapp.api.schemas import (
    AdviceOut,
    AdviceQuery,
    BookInIn,
    CorrectionIn,
    CorrectionOut,
    JobDetail,
    JobListQuery,
    JobOut,
    Page,
    ReturnIn,
    RunIn,
    RunOut,
    StateIn,
)
from shopapp.core.errors import ValidationFailed
from shopapp.core.web import get_or_404
from shopapp.jobs import corrections, intake, queries, runs, states
from shopapp.models import Job

bp = Blueprint("api_jobs", __name__)

# The run use-case names the page's fields; a script sent these.
RUN_FIELDS = {
    "amplitude_1": "readings[plane=1].amplitude",
    "angle_1_deg": "readings[plane=1].angle_deg",
    "amplitude_2": "readings[plane=2].amplitude",
    "angle_2_deg": "readings[plane=2].angle_deg",
    "trial_plane": "trial.plane",
    "trial_mass_g": "trial.mass_g",
    "trial_angle_deg": "trial.angle_deg",
    "trial_radius_mm": "trial.radius_mm",
}
BOOK_IN_FIELDS = {
    "new_customer_name": "new_customer.name",
    "new_customer_contact": "new_customer.contact",
    "new_customer_phone": "new_customer.phone",
    "tolerance_method": "tolerance.method",
    "tolerance_grade": "tolerance.grade",
    "journal_load_a_kg": "tolerance.journal_load_a_kg",
    "journal_load_b_kg": "tolerance.journal_load_b_kg",
    "explicit_limit_1_gmm": "tolerance.plane_1_gmm",
    "explicit_limit_2_gmm": "tolerance.plane_2_gmm",
    "customer": "customer_id",
}


def job_detail(call: Call, job_id: int) -> JobDetail:
    get_or_404(call.session, Job, job_id)
    job = queries.load_job(call.session, job_id)
    return JobDetail.model_validate({
        **JobOut.model_validate(job).model_dump(),
        "runs": [RunOut.model_validate(r) for r in job.runs],
        "corrections": [CorrectionOut.model_validate(c) for c in job.corrections],
        "transitions": list(job.transitions),
        "allowed_actions": states.allowed_actions(job),
    }, from_attributes=True)


@operation(bp, "GET", "/jobs", summary="List jobs", tag="jobs", action="read",
           query=JobListQuery, response=Page[JobOut])
def list_jobs(call: Call) -> Page[JobOut]:
    """The job list with the page's filters, newest received first."""
    args = call.query.model_dump(exclude={"page", "size"})
    if isinstance(args["reworked"], bool):  # the list page's values: "1" / "0" / "window"
        args["reworked"] = "1" if args["reworked"] else "0"
    job_filter = queries.JobFilter(**{k: v for k, v in args.items() if v is not None})
    return page_of(call.session, queries.filtered_jobs_stmt(job_filter), call.query, JobOut)


@operation(bp, "GET", "/jobs/<int:job_id>", summary="Read a job with its runs, corrections "
           "and state changes", tag="jobs", action="read", response=JobDetail, errors=(404,))
def get_job(call: Call, job_id: int) -> JobDetail:
    return job_detail(call, job_id)


@operation(bp, "POST", "/jobs", summary="Book a rotor in", tag="jobs", action="work_jobs",
           body=BookInIn, response=JobDetail, status=201, field_names=BOOK_IN_FIELDS)
def book_in(call: Call) -> Any:
    """A new job in ``booked_in``; an unknown serial is registered on the spot (with
    ``rotor_type_id`` or ``one_off`` geometry), as on the intake page."""
    b: BookInIn = call.body
    customer: int | dict[str, Any]
    if b.customer_id is not None and b.new_customer is not None:
        raise ValidationFailed("customer_id", "give customer_id or new_customer, not both")
    if b.customer_id is not None:
        customer = b.customer_id
    elif b.new_customer is not None:
        customer = b.new_customer.model_dump()
    else:
        raise ValidationFailed("customer_id", "is required (or give new_customer)")
    tol = None
    if b.tolerance is not None:
        tol = intake.ToleranceSpec(**b.tolerance.model_dump())
    job = intake.book_in(
        call.session, by=call.by, customer=customer, serial_number=b.serial_number,
        rotor_type_id=b.rotor_type_id,
        one_off=b.one_off.model_dump() if b.one_off is not None else None,
        tolerance=tol, service_speed_rpm=b.service_speed_rpm,
        balancing_speed_rpm=b.balancing_speed_rpm, machine_id=b.machine_id,
        received_on=b.received_on, promised_on=b.promised_on,
        customer_order_ref=b.customer_order_ref, notes=b.notes)
    call.session.flush()
    return (job_detail(call, job.id), 201,
            {"Location": url_for(".get_job", job_id=job.id)})


@operation(bp, "POST", "/jobs/<int:job_id>/state", summary="Change a job's state",
           tag="jobs", action="work_jobs", body=StateIn, response=JobDetail, errors=(404,))
def change_state(call: Call, job_id: int) -> JobDetail:
    """start, in_tolerance, dispatch, reject (with a reason) or reopen (with a reason: it is
    rework, and a certified job's certificate is voided) — the job page's buttons."""
    job = get_or_404(call.session, Job, job_id)
    b: StateIn = call.body
    if b.action == "start":
        states.start(call.session, job, by=call.by)
    elif b.action == "in_tolerance":
        states.mark_in_tolerance(call.session, job, by=call.by)
    elif b.action == "dispatch":
        states.dispatch(call.session, job, by=call.by, on=b.dispatched_on)
    elif b.action == "reject":
        states.reject(call.session, job, by=call.by, reason=b.reason)
    else:
        states.reopen(call.session, job, by=call.by, reason=b.reason)
    call.session.flush()
    return job_detail(call, job_id)


@operation(bp, "POST", "/jobs/<int:job_id>/return", summary="Open a customer return of a "
           "dispatched job", tag="jobs", action="work_jobs", body=ReturnIn, response=JobDetail,
           status=201, errors=(404,))
def open_return(call: Call, job_id: int) -> Any:
    """A new job of kind ``return`` linked to this dispatched job, with its rotor, tolerance,
    speeds and machine (the job page's return form)."""
    earlier = get_or_404(call.session, Job, job_id)
    b: ReturnIn = call.body
    job = states.open_return(call.session, by=call.by, earlier_job=earlier,
                             received_on=b.received_on, notes=b.notes)
    call.session.flush()
    return (job_detail(call, job.id), 201, {"Location": url_for(".get_job", job_id=job.id)})


@operation(bp, "POST", "/jobs/<int:job_id>/runs", summary="Log a run with its readings",
           tag="runs", action="work_jobs", body=RunIn, response=RunOut, status=201,
           errors=(404,), field_names=RUN_FIELDS)
def log_run(call: Call, job_id: int) -> Any:
    """One reading per correction plane of the rotor; the trial mass for trial runs. The
    first run moves a booked-in job onto the machine. Send an ``Idempotency-Key`` so that
    a retry after a lost answer never logs the run twice."""
    job = get_or_404(call.session, Job, job_id)
    b: RunIn = call.body
    readings = [(r.plane, r.amplitude, r.angle_deg, b.unit) for r in b.readings]
    trial = None
    if b.trial is not None:
        trial = (b.trial.plane, b.trial.mass_g, b.trial.angle_deg, b.trial.radius_mm)
    run = runs.record_run(call.session, job, by=call.by, purpose=b.purpose,
                          speed_rpm=b.speed_rpm, readings=readings, trial=trial,
                          earlier_trial_left_on=b.earlier_trial_left_on, notes=b.notes)
    return (RunOut.model_validate(run), 201,
            {"Location": url_for(".get_job", job_id=job_id)})


@operation(bp, "GET", "/jobs/<int:job_id>/advice", summary="Correction advice for a job",
           tag="corrections", action="read", query=AdviceQuery, response=AdviceOut,
           errors=(404,))
def advice(call: Call, job_id: int) -> AdviceOut:
    """What to fit in each plane from the job's runs (and stored influence coefficients),
    split onto fixed positions and drill depths when removing; the trial-mass suggestion
    before a trial run. Show the cautions to whoever fits the masses."""
    get_or_404(call.session, Job, job_id)
    job = queries.load_job(call.session, job_id)
    calc = queries.evaluate(call.session, job,
                            drill_diameter_mm=call.query.drill_diameter_mm)
    adv = calc.advice
    planes = []
    if adv is not None:
        planes = [{**{k: getattr(p, k) for k in (
            "plane", "method", "action", "mass_g", "angle_deg", "add_angle_deg", "radius_mm",
            "unbalance_gmm", "drill_diameter_mm")}, "split": list(p.split),
            "drill": list(p.drill), "warnings": list(p.warnings)} for p in adv.planes]
    return AdviceOut.model_validate({
        "job_id": job.id,
        "run_id": adv.run_id if adv else None,
        "run_seq": adv.run_seq if adv else None,
        "source": adv.source if adv else None,
        "planes": planes,
        "predicted_residual_gmm": list(adv.predicted_residual_gmm) if adv else [],
        "predicted_pct_of_limit": (list(adv.predicted_pct_of_limit)
                                   if adv and adv.predicted_pct_of_limit is not None else None),
        "note": calc.advice_note,
        "trial_advice": list(calc.trial_advice),
        "warnings": list(calc.warnings) + (list(adv.warnings) if adv else []),
        "cautions": list(calc.cautions),
    }, from_attributes=True)


@operation(bp, "POST", "/jobs/<int:job_id>/corrections", summary="Record a correction as "
           "fitted", tag="corrections", action="work_jobs", body=CorrectionIn,
           response=CorrectionOut, status=201, errors=(404,))
def record_correction(call: Call, job_id: int) -> Any:
    """What was actually added or removed in one plane (it may differ from the advice)."""
    job = get_or_404(call.session, Job, job_id)
    b: CorrectionIn = call.body
    data = b.model_dump()
    split = data.pop("split")
    corr = corrections.record_correction(call.session, job, by=call.by, split=split, **data)
    return (CorrectionOut.model_validate(corr), 201,
            {"Location": url_for(".get_job", job_id=job_id)})

"""Job pages: list with filters, intake, the job page with runs, corrections and states.

Thin: parse the form, convert display angles and units at the edge, call one
use-case (:mod:`shopapp.jobs.intake`, :mod:`~shopapp.jobs.runs`,
:mod:`~shopapp.jobs.corrections`, :mod:`~shopapp.jobs.states`), commit once, or roll
back and show the messages beside the fields (422). Read queries are in
:mod:`shopapp.jobs.queries`. Nothing is written on a GET.
"""

from __future__ import annotations

import datetime as dt
from collections.abc import Callable
from typing import Any

from flask import Blueprint, abort, flash, redirect, render_template, request, url_for
from flask_login import current_user

from shopapp.balancing.errors import BalancingInputError
from shopapp.charts.svg import to_svg
from shopapp.core.checks import plain_digits
from shopapp.core.clock import shop_today
from shopapp.core.display import ShopDisplay, plain, quantity
from shopapp.core.errors import ServiceError, ValidationFailed
from shopapp.core.extensions import db_session
from shopapp.core.forms import apply_errors, hidden_field_errors, parse_number
from shopapp.core.pagination import page_number
from shopapp.core.permissions import can
from shopapp.core.settings import get_settings
from shopapp.core.web import acting_user, get_or_404, once, page_size, requires, saved_row
from shopapp.jobs import advice as job_advice
from shopapp.jobs import calc as job_calc
from shopapp.jobs import corrections, intake, limits, queries, runs, states
from shopapp.jobs.advice import DEFAULT_DRILL_DIAMETER_MM
from shopapp.jobs.forms import (
    CorrectionForm,
    DrillForm,
    IntakeForm,
    LookupForm,
    ReturnForm,
    RunForm,
    StateForm,
    StrikeCorrectionForm,
    StrikeForm,
    options,
    parse_split,
)
from shopapp.models import JOB_KINDS, JOB_STATES, Correction, Job, Run

bp = Blueprint("jobs", __name__, url_prefix="/jobs", template_folder="templates")

PAST_TENSE = {"add": "added", "remove": "removed"}


# --------------------------------------------------------------------------- list


# "/jobs" and "/jobs/" both: the other lists live at "/customers/", "/machines/" …,
# so a typed or edited address with the slash must not be a 404.
@bp.get("", strict_slashes=False)
@requires("read")
def index():  # type: ignore[no-untyped-def]
    sess = db_session()
    f, messages = queries.JobFilter.from_args(request.args)
    page = queries.job_page(sess, f, page=page_number(request.args.get("page")),
                            per_page=page_size())
    return render_template("jobs/index.html", page=page, f=f, messages=messages,
                           states=JOB_STATES, kinds=JOB_KINDS,
                           rework_choices=queries.REWORK_CHOICES, **queries.filter_choices(sess))


# --------------------------------------------------------------------------- intake


NO_ROTOR_TYPE = (0, "— none: known serial, or one-off geometry below —")


def _rotor_type_label(t: Any) -> str:
    return f"{t.name} · {t.part_number} {t.description}".strip()


def _intake_choices(form: IntakeForm, choices: queries.IntakeChoices,
                    customer_id: int | None) -> dict[str, list[list[Any]]]:
    """Set the form's choices; the rotor types are the chosen customer's only.

    Returns every customer's rotor types for the page's script (intake.js), which
    narrows the list when the customer changes; without it a submit does.
    """
    form.customer_id.choices = options([(0, "— new customer (fill in below) —")] + [
        (c.id, c.name) for c in choices.customers])
    form.rotor_type_id.choices = options(
        [NO_ROTOR_TYPE] + [(t.id, _rotor_type_label(t))
                           for t in choices.rotor_types_of(customer_id)])
    form.machine_id.choices = options([(0, "— choose —")] + [
        (m.id, f"{m.name} ({plain(m.min_mass_kg)}–{plain(m.max_mass_kg)} kg, "
               f"≤ {quantity(m.max_speed_rpm, 'rpm')})")
        for m in choices.machines])
    return {str(cid): [[t.id, _rotor_type_label(t)] for t in types]
            for cid, types in choices.rotor_types_by_customer().items()}


def _intake_kwargs(form: IntakeForm, disp: ShopDisplay) -> dict[str, Any]:
    customer: int | dict[str, Any] = form.customer_id.data or 0
    if not customer:
        customer = {"name": form.new_customer_name.data or "",
                    "contact": form.new_customer_contact.data or "",
                    "phone": form.new_customer_phone.data or ""}
    method = form.tolerance_method.data or ""
    spec = None
    if method:
        grade = form.tolerance_grade.data
        spec = intake.ToleranceSpec(
            method, grade=float(grade) if grade else None,
            journal_load_a_kg=form.journal_load_a_kg.data,
            journal_load_b_kg=form.journal_load_b_kg.data,
            plane_1_gmm=disp.to_gmm(form.explicit_limit_1.data),
            plane_2_gmm=disp.to_gmm(form.explicit_limit_2.data))
    one_off = None
    sub = form.one_off.form
    if not form.rotor_type_id.data and sub.used():
        one_off = sub.values()
        one_off["service_speed_rpm"] = form.service_speed_rpm.data
    return {
        "customer": customer,
        "serial_number": form.serial_number.data or "",
        "rotor_type_id": form.rotor_type_id.data or None,
        "one_off": one_off,
        "tolerance": spec,
        "service_speed_rpm": form.service_speed_rpm.data,
        "balancing_speed_rpm": form.balancing_speed_rpm.data,
        "machine_id": form.machine_id.data or None,
        "received_on": form.received_on.data,
        "promised_on": form.promised_on.data,
        "customer_order_ref": form.customer_order_ref.data or "",
        "notes": form.notes.data or "",
    }


def _intake_mapping(form: IntakeForm) -> dict[str, Any]:
    sub = form.one_off.form
    mapping: dict[str, Any] = {name: getattr(sub, name) for name in sub.GEOMETRY}
    mapping.update({
        "explicit_limit_1_gmm": form.explicit_limit_1,
        "explicit_limit_2_gmm": form.explicit_limit_2,
        "new_customer_contact": form.new_customer_contact,
        "new_customer_phone": form.new_customer_phone,
        "one_off": sub.mass_kg,
    })
    return mapping


LOOKUP_PREFIX = "lookup"


@bp.route("/new", methods=["GET", "POST"])
@requires("work_jobs")
def new():  # type: ignore[no-untyped-def]
    sess = db_session()
    disp = ShopDisplay(get_settings(sess))
    form = IntakeForm()
    # Its own prefix: both forms have a customer and a serial, and ids must be unique.
    lookup = LookupForm(request.args, prefix=LOOKUP_PREFIX)
    chosen = form.customer_id.data if request.method == "POST" else request.args.get(
        lookup.customer_id.name, type=int)
    types_by_customer = _intake_choices(form, queries.intake_choices(sess), chosen)
    lookup.customer_id.choices = form.customer_id.choices
    history = None
    status = 200
    loose: list[str] = []
    if request.method == "GET":
        cid = request.args.get(lookup.customer_id.name, "")
        serial = (request.args.get(lookup.serial_number.name) or "").strip()[:100]
        if plain_digits(cid) and len(cid) < 12 and serial:
            history = queries.rotor_history(sess, int(cid), serial)
            form.customer_id.data = int(cid)
            form.serial_number.data = serial
            if history is not None:
                last = history.last_job
                form.rotor_type_id.data = history.rotor.rotor_type_id
                if last is not None:
                    form.balancing_speed_rpm.data = last.balancing_speed_rpm
                    form.service_speed_rpm.data = last.service_speed_rpm
                    form.machine_id.data = last.machine_id or 0
        form.received_on.data = form.received_on.data or shop_today()
        return render_template("jobs/new.html", form=form, lookup=lookup, history=history,
                               types_by_customer=types_by_customer,
                               disp=disp, loose=loose)
    spend = once(sess, form, _saved_job_page)
    if form.validate_on_submit():
        try:
            job = intake.book_in(sess, by=acting_user(), **_intake_kwargs(form, disp))
            spend(job)
            sess.commit()
            flash(f"Job {job.number} booked in.", "success")
            return redirect(url_for("jobs.detail", job_id=job.id))
        except ValidationFailed as exc:
            sess.rollback()
            loose = apply_errors(form, exc, _intake_mapping(form))
        except ServiceError as exc:
            sess.rollback()
            loose = [exc.message]
        except BalancingInputError as exc:
            sess.rollback()
            loose = [str(exc)]
    status = 422
    return render_template("jobs/new.html", form=form, lookup=lookup, history=history,
                           types_by_customer=types_by_customer,
                           disp=disp, loose=loose), status


def _saved_job_page(spent: Any) -> str:
    """Where a book-in or return form posted twice leads: the job the first post opened."""
    job = saved_row(db_session(), spent)
    return url_for("jobs.detail", job_id=job.id) if isinstance(job, Job) else url_for("jobs.index")


def jobs_can_work() -> bool:
    return can(current_user, "work_jobs")


# --------------------------------------------------------------------------- job page


def _drill_form() -> DrillForm:
    """The drill diameter asked for on the page (validated; its message goes beside the field)."""
    form = DrillForm(request.args)
    form.validate()
    return form


def _weight_label(c: Any, disp: ShopDisplay, seq: dict[int, int]) -> str:
    run = f", after run {seq[c.run_id]}" if c.run_id in seq else ""
    return f"{quantity(c.mass_g, 'g')} at {disp.a(c.angle_deg)}{run}"


def _replace_choices(form: CorrectionForm, job: Job, plane: int, disp: ShopDisplay) -> None:
    seq = {r.id: r.seq for r in job.runs}
    form.replaces_correction_id.choices = [("", "nothing (an extra weight)")] + [
        (str(c.id), _weight_label(c, disp, seq))
        for c in corrections.replaceable_weights(job, plane)]


def _correction_forms(job: Job, calc: job_calc.JobCalc, disp: ShopDisplay
                      ) -> dict[int, CorrectionForm]:
    """One record form per plane, prefilled with what the advice says to fit (the split
    rounded to stock weights, in place of a weight when it says so), or the plane's radius."""
    rt = job.rotor.rotor_type
    radii = job_calc.plane_radii_mm(rt)
    forms = {}
    advice = {a.plane: a for a in calc.advice.planes} if calc.advice else {}
    for plane in range(1, rt.planes + 1):
        f = CorrectionForm(prefix=f"c{plane}", formdata=None)
        _replace_choices(f, job, plane, disp)
        a = advice.get(plane)
        f.radius_mm.data = radii[plane - 1]
        f.action.data = job_advice.plane_action(rt, plane)  # the advice's, or the method's
        if a is not None:
            f.run_id.data = str(calc.advice.run_id) if calc.advice else ""
            f.action.data = a.action
            mass, angle = a.record_resultant()
            f.mass_g.data = round(mass, 2)
            f.angle_deg.data = round(disp.angle(angle) or 0.0, 1)
            f.split.data = a.split_text()
            f.advised_mass_g.data = f"{a.mass_g:.4f}"
            f.advised_angle_deg.data = f"{disp.angle(a.angle_deg):.2f}"
            if a.fit is not None and a.fit.replaces is not None:
                f.replaces_correction_id.data = str(a.fit.replaces)
            if a.drill:
                f.drill_diameter_mm.data = a.drill_diameter_mm
                f.drill_depth_mm.data = round(max(d.depth_to_tip_mm for d in a.drill), 2)
                f.drill_holes.data = sum(d.holes for d in a.drill)
        forms[plane] = f
    return forms


def _render_detail(job_id: int, *, status: int = 200, run_form: RunForm | None = None,
                   corr_forms: dict[int, CorrectionForm] | None = None,
                   state_form: StateForm | None = None, state_action: str = "",
                   return_form: ReturnForm | None = None,
                   strike_form: tuple[int, StrikeForm] | None = None,
                   strike_corr_form: tuple[int, StrikeCorrectionForm] | None = None,
                   page_error: str = "",
                   loose: list[str] | None = None):  # type: ignore[no-untyped-def]
    sess = db_session()
    job = queries.load_job(sess, job_id)
    settings = get_settings(sess)
    disp = ShopDisplay(settings)
    drill_form = _drill_form()
    drill_mm = drill_form.drill_mm.data if not drill_form.errors else None
    calc = queries.evaluate(sess, job, drill_diameter_mm=drill_mm)
    figures = job_calc.polar_figures(calc, to_unit=disp.unb, unit_label=disp.unit,
                                     angle_sense=disp.sense, angle_zero_deg=disp.zero)
    rt = job.rotor.rotor_type
    if run_form is None:
        run_form = RunForm(prefix="run", formdata=None)
        run_form.speed_rpm.data = job.balancing_speed_rpm
        last = job.runs[-1] if job.runs else None
        run_form.purpose.data = "check" if job.corrections else ("trial" if last else "initial")
        # The machine says what its readings are; a job without one keeps its last unit.
        if job.machine is not None:
            run_form.unit.data = job.machine.reading_unit
        elif last is not None and last.readings:
            run_form.unit.data = last.readings[0].unit
        run_form.trial_radius_mm.data = rt.radius_1_mm
    forms = _correction_forms(job, calc, disp)
    forms.update(corr_forms or {})
    actions = states.allowed_actions(job)
    state_forms = {a: StateForm(prefix=f"s-{a}", formdata=None) for a in actions}
    if state_form is not None and state_action in state_forms:
        state_forms[state_action] = state_form
    if return_form is None:
        return_form = ReturnForm(prefix="ret", formdata=None)
    strike_forms = {r.id: StrikeForm(prefix=f"strike-{r.id}", formdata=None)
                    for r in job.run_log if r.struck_at is None}
    if strike_form is not None and strike_form[0] in strike_forms:
        strike_forms[strike_form[0]] = strike_form[1]
    strike_corr_forms = {c.id: StrikeCorrectionForm(prefix=f"strike-c{c.id}", formdata=None)
                         for c in job.correction_log if c.struck_at is None}
    if strike_corr_form is not None and strike_corr_form[0] in strike_corr_forms:
        strike_corr_forms[strike_corr_form[0]] = strike_corr_form[1]
    trail = queries.job_audit_trail(sess, job.id)
    returns = queries.return_jobs_of(sess, job.id)
    now = dt.datetime.now(dt.UTC)
    return render_template(
        "jobs/detail.html", job=job, rt=rt, calc=calc, disp=disp,
        svgs=[to_svg(fig, css_class="chart polar") for fig in figures],
        run_form=run_form, corr_forms=forms, state_forms=state_forms, return_form=return_form,
        strike_forms=strike_forms, strike_corr_forms=strike_corr_forms,
        can_strike=can(current_user, "strike_runs") and job.state in runs.STRIKE_STATES,
        page_caution=job_calc.PAGE_CAUTION,
        permitted_speed_rpm=limits.highest_speed_rpm(job.machine, rt, job.service_speed_rpm),
        actions=actions, trail=trail, returns=returns, now=now,
        page_error=page_error, loose=loose or [], can_work=jobs_can_work(),
        drill_form=drill_form, drill_mm=drill_mm or DEFAULT_DRILL_DIAMETER_MM,
        run_seq={r.id: r.seq for r in job.runs},
    ), status


@bp.get("/<int:job_id>")
@requires("read")
def detail(job_id: int):  # type: ignore[no-untyped-def]
    return _render_detail(job_id)


def _failed(job_id: int, exc: ServiceError, form: Any, *, mapping: dict[str, Any] | None = None,
            **forms: Any):  # type: ignore[no-untyped-def]
    """Roll back, then show the page again: a refusal above it (with the error's status,
    409 for a state rule) or the field messages beside ``form``'s fields (422)."""
    db_session().rollback()
    if isinstance(exc, ValidationFailed):
        return _render_detail(job_id, status=422, loose=apply_errors(form, exc, mapping),
                              **forms)
    return _render_detail(job_id, status=exc.status, page_error=exc.message, **forms)


@bp.post("/<int:job_id>/runs")
@requires("work_jobs")
def add_run(job_id: int):  # type: ignore[no-untyped-def]
    sess = db_session()
    job = get_or_404(sess, Job, job_id)
    disp = ShopDisplay(get_settings(sess))
    form = RunForm(prefix="run")
    spend = once(sess, form, lambda _spent: url_for("jobs.detail", job_id=job_id) + "#runs")
    if not form.validate_on_submit():
        return _render_detail(job_id, status=422, run_form=form)
    readings = [(1, form.amplitude_1.data, disp.internal(form.angle_1_deg.data), form.unit.data)]
    if form.amplitude_2.data is not None or form.angle_2_deg.data is not None:
        readings.append((2, form.amplitude_2.data, disp.internal(form.angle_2_deg.data),
                         form.unit.data))
    trial = None
    if form.trial_given():
        plane = int(form.trial_plane.data) if form.trial_plane.data else None
        trial = (plane, form.trial_mass_g.data, disp.internal(form.trial_angle_deg.data),
                 form.trial_radius_mm.data)
    try:
        run = runs.record_run(
            sess, job, by=acting_user(), purpose=form.purpose.data,
            speed_rpm=form.speed_rpm.data, readings=readings, trial=trial,
            earlier_trial_left_on=bool(form.earlier_trial_left_on.data),
            notes=form.notes.data or "")
        spend(run)
        sess.commit()
    except ServiceError as exc:
        return _failed(job_id, exc, form, run_form=form,
                       mapping={"readings": form.amplitude_1, "trial_plane": form.trial_plane})
    flash(f"Run {run.seq} ({run.purpose}) logged.", "success")
    caution = limits.trial_force_warning(run, job.rotor.rotor_type)
    if caution is not None:
        flash(caution, "error")
    return redirect(url_for("jobs.detail", job_id=job_id) + "#runs")


def _strike(job_id: int, model: type[Run] | type[Correction], row_id: int, *, noun: str,
            form: StrikeForm | StrikeCorrectionForm, form_arg: str,
            strike: Callable[..., Any], done: Callable[[Any], str], anchor: str):  # type: ignore[no-untyped-def]
    """Strike out a run or a correction of the job: the row must belong to the job (404
    otherwise), the reason is checked by ``form``, ``strike`` is the use-case; a refusal
    draws the job page again with ``form`` (the page's ``form_arg``) and its messages."""
    sess = db_session()
    job = get_or_404(sess, Job, job_id)
    row = get_or_404(sess, model, row_id)
    if row.job_id != job.id:
        abort(404, description=f"No such {noun} on this job.")
    if not form.validate_on_submit():
        return _render_detail(job_id, status=422, **{form_arg: (row_id, form)})
    try:
        strike(sess, job, row, by=acting_user(), reason=form.reason.data or "")
        sess.commit()
    except ServiceError as exc:
        return _failed(job_id, exc, form, **{form_arg: (row_id, form)})
    flash(done(row), "success")
    return redirect(url_for("jobs.detail", job_id=job_id) + anchor)


@bp.post("/<int:job_id>/runs/<int:run_id>/strike")
@requires("strike_runs")
def strike_run(job_id: int, run_id: int):  # type: ignore[no-untyped-def]
    return _strike(
        job_id, Run, run_id, noun="run", form=StrikeForm(prefix=f"strike-{run_id}"),
        form_arg="strike_form", strike=runs.strike_run, anchor="#runs",
        done=lambda run: f"Run {run.seq} struck out: it stays in the log and counts for nothing.")


@bp.post("/<int:job_id>/corrections/<int:correction_id>/strike")
@requires("strike_runs")
def strike_correction(job_id: int, correction_id: int):  # type: ignore[no-untyped-def]
    return _strike(
        job_id, Correction, correction_id, noun="correction",
        form=StrikeCorrectionForm(prefix=f"strike-c{correction_id}"),
        form_arg="strike_corr_form", strike=corrections.strike_correction, anchor="#applied",
        done=lambda corr: (f"Correction struck out (plane {corr.plane}, "
                           f"{quantity(corr.mass_g, 'g')}): it stays listed and counts "
                           "for nothing."))


@bp.post("/<int:job_id>/corrections/<int:plane>")
@requires("work_jobs")
def add_correction(job_id: int, plane: int):  # type: ignore[no-untyped-def]
    sess = db_session()
    job = get_or_404(sess, Job, job_id)
    if plane not in (1, 2):
        abort(404, description="No such plane.")
    disp = ShopDisplay(get_settings(sess))
    form = CorrectionForm(prefix=f"c{plane}")
    spend = once(sess, form, lambda _spent: url_for("jobs.detail", job_id=job_id) + "#correction")
    _replace_choices(form, job, plane, disp)
    if form.validate_on_submit():
        try:
            split = parse_split(form.split.data)
        except ValueError as exc:
            form.split.errors = [str(exc)]
            return _render_detail(job_id, status=422, corr_forms={plane: form})
        try:
            advised_mass_g = _advised(form.advised_mass_g.data, "advised_mass_g")
            advised_angle_deg = _advised(form.advised_angle_deg.data, "advised_angle_deg",
                                         angle=True)
            corr = corrections.record_correction(
                sess, job, by=acting_user(), run_id=form.run_id.data, plane=plane,
                action=form.action.data,
                mass_g=form.mass_g.data, angle_deg=disp.internal(form.angle_deg.data),
                radius_mm=form.radius_mm.data, advised_mass_g=advised_mass_g,
                advised_angle_deg=disp.internal(advised_angle_deg),
                split=split, drill_diameter_mm=form.drill_diameter_mm.data,
                drill_depth_mm=form.drill_depth_mm.data, drill_holes=form.drill_holes.data,
                replaces_correction_id=(int(form.replaces_correction_id.data)
                                        if form.replaces_correction_id.data else None))
            spend(corr)
            sess.commit()
            flash(f"Plane {corr.plane}: {quantity(corr.mass_g, 'g')} "
                  f"{PAST_TENSE.get(corr.action, corr.action)} — log a check run.", "success")
            return redirect(url_for("jobs.detail", job_id=job_id) + "#correction")
        except ServiceError as exc:
            return _failed(job_id, exc, form, corr_forms={plane: form})
    return _render_detail(job_id, status=422, corr_forms={plane: form},
                          loose=hidden_field_errors(form))


def _advised(raw: str | None, field: str, *, angle: bool = False) -> float | None:
    """A hidden advised figure the page drew, read back: empty is None; anything the page
    cannot have drawn (not a number, NaN, infinity, an angle outside 0–360°) is refused
    naming the field, not dropped (a tampered 1e309 was saved as "no advice")."""
    text = (raw or "").strip()
    if not text:
        return None
    try:
        value = parse_number(text)
    except ValueError as exc:
        raise ValidationFailed(field, str(exc)) from None
    if angle and not 0.0 <= value <= 360.0:
        raise ValidationFailed(field, f"must be between 0 and 360°, got {plain(value)}")
    if not angle and value < 0.0:
        raise ValidationFailed(field, f"must not be negative, got {plain(value)}")
    return value


STATE_ACTIONS = ("start", "in_tolerance", "dispatch", "reject", "reopen")


@bp.post("/<int:job_id>/state")
@requires("work_jobs")
def change_state(job_id: int):  # type: ignore[no-untyped-def]
    sess = db_session()
    job = get_or_404(sess, Job, job_id)
    action = (request.form.get("action") or "")[:20]
    if action not in STATE_ACTIONS:
        return _render_detail(job_id, status=422, page_error=f"{action!r} is not a state action;"
                              " use the buttons on the page")
    form = StateForm(prefix=f"s-{action}")
    if not form.validate_on_submit():
        return _render_detail(job_id, status=422, state_form=form, state_action=action)
    by = acting_user()
    reason = form.reason.data or ""
    try:
        if action == "start":
            states.start(sess, job, by=by)
        elif action == "in_tolerance":
            states.mark_in_tolerance(sess, job, by=by)
        elif action == "dispatch":
            states.dispatch(sess, job, by=by, on=form.dispatched_on.data)
        elif action == "reject":
            states.reject(sess, job, by=by, reason=reason)
        else:
            states.reopen(sess, job, by=by, reason=reason)
        sess.commit()
    except ServiceError as exc:
        return _failed(job_id, exc, form, state_form=form, state_action=action)
    flash(f"Job {job.number} is now {job.state.replace('_', ' ')}.", "success")
    return redirect(url_for("jobs.detail", job_id=job_id))


@bp.post("/<int:job_id>/return")
@requires("work_jobs")
def open_return(job_id: int):  # type: ignore[no-untyped-def]
    sess = db_session()
    job = get_or_404(sess, Job, job_id)
    form = ReturnForm(prefix="ret")
    spend = once(sess, form, _saved_job_page)
    if not form.validate_on_submit():
        return _render_detail(job_id, status=422, return_form=form)
    try:
        new_job = states.open_return(sess, by=acting_user(), earlier_job=job,
                                     received_on=form.received_on.data,
                                     notes=form.notes.data or "")
        spend(new_job)
        sess.commit()
    except ServiceError as exc:
        return _failed(job_id, exc, form, return_form=form)
    flash(f"Return job {new_job.number} opened for rotor {job.rotor.serial_number}.", "success")
    return redirect(url_for("jobs.detail", job_id=new_job.id))


# --------------------------------------------------------------------------- start page


@bp.app_context_processor
def _home_panel() -> dict[str, Any]:
    def jobs_home() -> queries.HomePanel | None:
        if not current_user.is_authenticated:
            return None
        return queries.home_panel(db_session(), acting_user())

    return {"jobs_home": jobs_home}

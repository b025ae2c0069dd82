"""The job page's evidence steps: residual-unbalance test, arbor and index runs, arbor
subtraction and repeated runs.

Thin: parse the form, call one use-case (:mod:`shopapp.jobs.residual_tests`,
:mod:`shopapp.jobs.evidence`), commit once, render. Angles are typed and shown in
the shop's display convention (:class:`shopapp.core.display.ShopDisplay`).
"""

from __future__ import annotations

from functools import partial
from typing import Any

from flask import Blueprint, abort, flash, redirect, render_template, request, url_for
from flask_login import current_user

from shopapp.charts.svg import to_svg
from shopapp.core.clock import shop_today
from shopapp.core.display import ShopDisplay, counted, number, plain
from shopapp.core.errors import ServiceError, ValidationFailed
from shopapp.core.extensions import db_session
from shopapp.core.forms import apply_errors
from shopapp.core.permissions import can
from shopapp.core.settings import get_settings
from shopapp.core.web import acting_user, get_or_404, once, requires
from shopapp.jobs import evidence, residual_tests
from shopapp.models import RESIDUAL_TEST_POSITIONS, Arbor, ArborErrorMeasurement, Job
from shopapp.traceability import services as tr
from shopapp.traceability.forms import (
    ErrorRunsForm,
    IndexRunsForm,
    JobArborForm,
    RequiredForm,
    ResidualTestForm,
    SubtractForm,
    index_runs_from,
    options,
    sized,
    typed_angle,
)

bp = Blueprint("evidence", __name__, url_prefix="/traceability", template_folder="templates")


def _blank(v: Any) -> Any:
    return None if v is None or (isinstance(v, str) and not v.strip()) else v


# --------------------------------------------------------------------------- job steps


def _back_url(job: Job) -> str:
    return url_for("jobs.detail", job_id=job.id) + "#traceability"


def _back(job: Job):  # type: ignore[no-untyped-def]
    return redirect(_back_url(job))


def _refused(job: Job, exc: ServiceError):  # type: ignore[no-untyped-def]
    db_session().rollback()
    flash(exc.message, "error")
    return _back(job)


@bp.post("/jobs/<int:job_id>/residual-required")
@requires("work_jobs")
def residual_required(job_id: int):  # type: ignore[no-untyped-def]
    sess = db_session()
    job = get_or_404(sess, Job, job_id)
    form = RequiredForm()
    if not form.validate_on_submit():
        abort(400, description="The form expired; reload the job page.")
    try:
        residual_tests.set_residual_test_required(sess, job, by=acting_user(),
                                      required=form.required.data == "1")
        sess.commit()
    except ServiceError as exc:
        return _refused(job, exc)
    return _back(job)


@bp.route("/jobs/<int:job_id>/residual-test", methods=["GET", "POST"])
@requires("work_jobs")
def residual_test(job_id: int):  # type: ignore[no-untyped-def]
    sess = db_session()
    job = get_or_404(sess, Job, job_id)
    disp = ShopDisplay(get_settings(sess))
    planes = job.rotor.rotor_type.planes
    posted = request.method == "POST"
    form = ResidualTestForm() if posted else ResidualTestForm(formdata=None)
    plane = request.args.get("plane", type=int) or 1
    if posted:
        try:
            plane = int(form.plane.data or 1)
        except ValueError:
            plane = 1
    if plane not in range(1, planes + 1):
        abort(404, description=f"The rotor has {counted(planes, 'plane')}.")
    try:
        advice = residual_tests.suggested_test_masses(job)[plane - 1]
    except ValidationFailed as exc:
        flash(exc.message, "error")
        return _back(job)
    n = request.args.get("positions", type=int) or 8
    if posted and form.positions.data in RESIDUAL_TEST_POSITIONS:
        n = form.positions.data
    if n not in RESIDUAL_TEST_POSITIONS:
        n = 8
    if not posted:
        form.plane.data = str(plane)
        form.positions.data = n
        form.test_mass_g.data = number(advice.suggested_g)
        form.test_radius_mm.data = plain(advice.radius_mm)
        last = job.runs[-1] if job.runs else None
        if last is not None and last.readings:
            form.unit.data = last.readings[0].unit
    resized = len(form.amp.entries) != n
    sized(form.amp, n)
    sized(form.ang, n)
    outcome = None
    svg = ""
    loose: list[str] = []
    status = 200
    if posted and resized:
        loose.append(f"Enter the {n} readings, one per position.")
        status = 422
    elif posted and form.validate_on_submit():
        kw: dict[str, Any] = dict(
            plane=plane, test_mass_g=form.test_mass_g.data, positions=n,
            test_radius_mm=_blank(form.test_radius_mm.data) or advice.radius_mm,
            amplitudes=[e.data for e in form.amp.entries],
            angles_deg=[typed_angle(disp, _blank(e.data)) for e in form.ang.entries],
            repeat_amplitude=form.repeat_amplitude.data,
            repeat_angle_deg=typed_angle(disp, _blank(form.repeat_angle_deg.data)),
        )
        mapping: dict[str, Any] = {f"amplitude_{k}": e for k, e in enumerate(form.amp.entries, 1)}
        mapping.update({f"angle_{k}": e for k, e in enumerate(form.ang.entries, 1)})
        try:
            if form.save.data:
                spend = once(sess, form, lambda _spent: _back_url(job))
                row = residual_tests.record_residual_test(sess, job, by=acting_user(),
                                                          unit=form.unit.data, **kw)
                spend(row)
                sess.commit()
                flash(f"Residual test of plane {plane} saved: "
                      + ("valid." if row.valid else row.invalid_reason),
                      "success" if row.valid else "error")
                return _back(job)
            outcome = residual_tests.evaluate_residual_test(permissible_gmm=advice.limit_gmm, **kw)
            svg = to_svg(residual_tests.outcome_figure(
                outcome, unit=form.unit.data, angle_sense=disp.sense, angle_zero_deg=disp.zero),
                css_class="chart polar")
        except ValidationFailed as exc:
            sess.rollback()
            loose = apply_errors(form, exc, mapping)
            status = 422
        except ServiceError as exc:
            return _refused(job, exc)
    elif posted:
        status = 422
    return render_template("evidence/residual_test.html", job=job, form=form, plane=plane,
                           advice=advice, outcome=outcome, svg=svg, disp=disp, loose=loose,
                           positions=tr.equally_spaced_deg(n), n=n), status


@bp.post("/jobs/<int:job_id>/arbor")
@requires("work_jobs")
def job_arbor(job_id: int):  # type: ignore[no-untyped-def]
    sess = db_session()
    job = get_or_404(sess, Job, job_id)
    form = JobArborForm()
    form.arbor_id.choices = options([(0, "none")] + [(a.id, a.name) for a in tr.arbors(sess)])
    if not form.validate_on_submit():
        flash("Choose an arbor from the list.", "error")
        return _back(job)
    arbor = get_or_404(sess, Arbor, form.arbor_id.data) if form.arbor_id.data else None
    try:
        evidence.set_job_arbor(sess, job, by=acting_user(), arbor=arbor)
        sess.commit()
    except ServiceError as exc:
        return _refused(job, exc)
    return _back(job)


@bp.post("/jobs/<int:job_id>/index-runs")
@requires("work_jobs")
def job_index_runs(job_id: int):  # type: ignore[no-untyped-def]
    sess = db_session()
    job = get_or_404(sess, Job, job_id)
    disp = ShopDisplay(get_settings(sess))
    form = IndexRunsForm(prefix="ix")
    if job.arbor_id is None:
        flash("Choose the job's arbor first.", "error")
        return _back(job)
    a = get_or_404(sess, Arbor, job.arbor_id)
    planes = job.rotor.rotor_type.planes
    spend = once(sess, form, lambda _spent: _back_url(job))
    if not form.validate_on_submit():
        # A sub-form's errors are a dict of its fields': its fields are listed themselves.
        flash("Index runs: " + "; ".join(
            m for fld in (*form, *form.first, *form.second)
            if isinstance(fld.errors, list | tuple) for m in fld.errors), "error")
        return _back(job)
    first, second = index_runs_from(form, planes, partial(typed_angle, disp))
    try:
        tr.record_arbor_error(sess, a, by=acting_user(), measured_on=form.measured_on.data,
                              first_run=first, second_run=second, planes=planes,
                              index_deg=form.index_deg.data, second_frame=form.second_frame.data,
                              rotor_mass_kg=_blank(form.rotor_mass_kg.data), job=job,
                              notes=form.notes.data or "")
        spend(None)
        sess.commit()
        flash(f"Arbor error of {a.name} recorded from the index runs.", "success")
    except ServiceError as exc:
        return _refused(job, exc)
    return _back(job)


@bp.post("/jobs/<int:job_id>/arbor-subtraction")
@requires("work_jobs")
def job_subtraction(job_id: int):  # type: ignore[no-untyped-def]
    sess = db_session()
    job = get_or_404(sess, Job, job_id)
    form = SubtractForm()
    choices = [(0, "do not subtract")]
    if job.arbor_id is not None:
        a = get_or_404(sess, Arbor, job.arbor_id)
        choices += [(m.id, f"{m.measured_on}") for m in a.measurements]
    form.measurement_id.choices = options(choices)
    if not form.validate_on_submit():
        flash("Choose one of the arbor's measured errors.", "error")
        return _back(job)
    m = (get_or_404(sess, ArborErrorMeasurement, form.measurement_id.data)
         if form.measurement_id.data else None)
    try:
        evidence.set_arbor_subtraction(sess, job, by=acting_user(), measurement=m)
        sess.commit()
    except ServiceError as exc:
        return _refused(job, exc)
    return _back(job)


@bp.route("/jobs/<int:job_id>/repeat-runs", methods=["GET", "POST"])
@requires("work_jobs")
def repeat_runs(job_id: int):  # type: ignore[no-untyped-def]
    sess = db_session()
    job = get_or_404(sess, Job, job_id)
    disp = ShopDisplay(get_settings(sess))
    planes = job.rotor.rotor_type.planes
    posted = request.method == "POST"
    form = ErrorRunsForm() if posted else ErrorRunsForm(formdata=None)
    loose: list[str] = []
    status = 200
    systematic, notes = evidence.systematic_errors(sess, job)
    spend = once(sess, form, lambda _spent: _back_url(job)) if posted else None
    if spend is not None and form.validate_on_submit():
        rows = [r for r in form.runs.entries
                if any(_blank(getattr(r.form, f).data) is not None for f in ("amp_1", "ang_1"))]
        runs = []
        for r in rows:
            run = [(r.form.amp_1.data, typed_angle(disp, r.form.ang_1.data))]
            if planes == 2:
                run.append((r.form.amp_2.data, typed_angle(disp, r.form.ang_2.data)))
            runs.append(run)
        try:
            evidence.record_error_estimate(
                sess, job, by=acting_user(), runs=runs,
                key_compensation_applied=form.key_compensation_applied.data,
                notes=form.notes.data or "")
            spend(None)
            sess.commit()
            flash("Repeated runs recorded: ΔU per plane computed.", "success")
            return _back(job)
        except ValidationFailed as exc:
            sess.rollback()
            loose = [f"{k}: {v}" for k, v in exc.errors.items()]
            status = 422
        except ServiceError as exc:
            return _refused(job, exc)
    elif posted:
        status = 422
    return render_template("evidence/repeat_runs.html", job=job, form=form, planes=planes,
                           systematic=systematic, notes=notes, disp=disp, loose=loose), status


# --------------------------------------------------------------------------- panel


@bp.app_context_processor
def _panel() -> dict[str, Any]:
    def traceability_panel(job: Job, calc: Any = None) -> dict[str, Any]:
        sess = db_session()
        settings = get_settings(sess)
        disp = ShopDisplay(settings)
        data = evidence.job_traceability(sess, job, calc)
        svgs = {t.id: to_svg(residual_tests.residual_test_figure(
                    t, angle_sense=disp.sense, angle_zero_deg=disp.zero, size=220),
                    css_class="chart polar")
                for t in (data.test_state.latest.values() if data.test_state else []) if t}
        arbor_form = JobArborForm(prefix="", formdata=None)
        arbor_form.arbor_id.choices = options([(0, "none")] + [(a.id, a.name)
                                                               for a in data.arbors])
        arbor_form.arbor_id.data = job.arbor_id or 0
        sub_form = SubtractForm(formdata=None)
        choices = [(0, "do not subtract")]
        if data.arbor is not None:
            choices += [(m.id, f"{m.measured_on} · {disp.u(m.error_1_gmm)}")
                        for m in reversed(data.arbor.measurements)]
        sub_form.measurement_id.choices = options(choices)
        sub_form.measurement_id.data = data.subtraction.measurement_id if data.subtraction else 0
        ix_form = IndexRunsForm(prefix="ix", formdata=None)
        ix_form.measured_on.data = shop_today()
        ix_form.rotor_mass_kg.data = plain(job.rotor.rotor_type.mass_kg)
        return {"data": data, "disp": disp, "svgs": svgs, "arbor_form": arbor_form,
                "sub_form": sub_form, "ix_form": ix_form, "req_form": RequiredForm(formdata=None),
                "can_work": can(current_user, "work_jobs"),
                "can_quality": can(current_user, "issue_certificates")}

    return {"traceability_panel": traceability_panel}

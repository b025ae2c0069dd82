"""Traceability pages: machine verification register and proving tests, arbors, and the
job-page steps (residual test, arbor and index runs, repeated runs, key convention).

Thin: parse the form, call :mod:`shopapp.services.traceability` or
:mod:`shopapp.services.job_traceability`, commit once, render. Angles are typed
and shown in the shop's display convention.
"""

from __future__ import annotations

import datetime as dt
import math
from typing import Any

from flask import Blueprint, abort, flash, redirect, render_template, request, url_for
from flask_login import current_user
from sqlalchemy.orm import Session

from shopapp.balancing.phasors import from_display_deg, to_display_deg
from shopapp.balancing.units import convert_unbalance
from shopapp.charts.svg import to_svg
from shopapp.extensions import db_session
from shopapp.models import (
    RESIDUAL_TEST_POSITIONS,
    Arbor,
    ArborErrorMeasurement,
    Job,
    Machine,
    ProvingRotor,
    RotorType,
    ShopSettings,
)
from shopapp.services import job_traceability as jt
from shopapp.services import traceability as tr
from shopapp.services.errors import ServiceError, ValidationFailed
from shopapp.services.permissions import can
from shopapp.services.settings import get_settings
from shopapp.web.helpers import requires
from shopapp.web.traceability.forms import (
    ArborForm,
    ErrorRunsForm,
    IndexRunsForm,
    JobArborForm,
    KeyForm,
    ProvingRotorForm,
    ProvingTestForm,
    RequiredForm,
    ResidualTestForm,
    SubtractForm,
    options,
    sized,
)

bp = Blueprint("traceability", __name__, url_prefix="/traceability")


class Display:
    """The shop's angle convention and unbalance unit."""

    def __init__(self, settings: ShopSettings) -> None:
        self.sense = settings.angle_sense
        self.zero = settings.angle_zero_deg
        self.unit = settings.unbalance_unit

    def angle(self, internal_deg: float | None) -> str:
        if internal_deg is None:
            return "—"
        return f"{to_display_deg(internal_deg, sense=self.sense, zero_deg=self.zero):.0f}°"

    def internal(self, typed: Any) -> Any:
        """A typed display angle as internal degrees; non-numbers pass on for the service."""
        try:
            value = float(typed)
        except (TypeError, ValueError):
            return typed
        if not math.isfinite(value):
            return typed
        return from_display_deg(value, sense=self.sense, zero_deg=self.zero)

    def u(self, gmm: float | None) -> str:
        if gmm is None:
            return "—"
        return f"{convert_unbalance(gmm, 'g·mm', self.unit):.4g} {self.unit}"


def _user() -> Any:
    return current_user._get_current_object()


def _get(sess: Session, model: Any, ident: int) -> Any:
    obj = sess.get(model, ident)
    if obj is None:
        abort(404, description=f"No {model.__name__.lower()} with id {ident}.")
    return obj


def _blank(v: Any) -> Any:
    return None if v is None or (isinstance(v, str) and not v.strip()) else v


def _put_errors(form: Any, exc: ValidationFailed,
                mapping: dict[str, Any] | None = None) -> list[str]:
    """Put each service error beside its form field; return the ones with no field."""
    loose: list[str] = []
    for name, message in exc.errors.items():
        target = (mapping or {}).get(name)
        if target is None and hasattr(form, name.split(".")[0]) and "." not in name:
            target = getattr(form, name)
        if target is not None:
            target.errors = [*list(target.errors or []), message]
        else:
            loose.append(f"{name}: {message}")
    return loose


# --------------------------------------------------------------------------- register


@bp.get("/")
@requires("read")
def index():  # type: ignore[no-untyped-def]
    sess = db_session()
    day = dt.datetime.now(dt.UTC).date()
    return render_template(
        "traceability/index.html", register=tr.register(sess, day), day=day,
        rotors=tr.proving_rotors(sess), rotor_form=ProvingRotorForm(formdata=None),
        settings=get_settings(sess),
    )


@bp.post("/proving-rotors")
@requires("edit_machines")
def add_proving_rotor():  # type: ignore[no-untyped-def]
    sess = db_session()
    form = ProvingRotorForm()
    if form.validate_on_submit():
        try:
            rotor = tr.create_proving_rotor(
                sess, by=_user(), name=form.name.data, mass_kg=form.mass_kg.data,
                planes=form.planes.data, radius_1_mm=form.radius_1_mm.data,
                radius_2_mm=_blank(form.radius_2_mm.data), positions=form.positions.data,
                notes=form.notes.data or "")
            sess.commit()
            flash(f"Proving rotor {rotor.name} added.", "success")
            return redirect(url_for("traceability.index"))
        except ValidationFailed as exc:
            sess.rollback()
            _put_errors(form, exc)
    day = dt.datetime.now(dt.UTC).date()
    return render_template("traceability/index.html", register=tr.register(sess, day), day=day,
                           rotors=tr.proving_rotors(sess), rotor_form=form,
                           settings=get_settings(sess)), 422


@bp.get("/machines/<int:machine_id>")
@requires("read")
def machine(machine_id: int):  # type: ignore[no-untyped-def]
    sess = db_session()
    m = _get(sess, Machine, machine_id)
    day = dt.datetime.now(dt.UTC).date()
    return render_template("traceability/machine.html", machine=m,
                           standing=tr.machine_status(sess, m, day),
                           records=tr.verifications_of(sess, m))


def _proving_form_for(form: ProvingTestForm, rotor: ProvingRotor | None) -> None:
    n = rotor.positions if rotor is not None else 8
    for fl in (form.p1_amp, form.p1_ang, form.p2_amp, form.p2_ang):
        sized(fl, n)


@bp.route("/machines/<int:machine_id>/proving-test", methods=["GET", "POST"])
@requires("verify_machines")
def proving_test(machine_id: int):  # type: ignore[no-untyped-def]
    sess = db_session()
    m = _get(sess, Machine, machine_id)
    disp = Display(get_settings(sess))
    rotors = tr.proving_rotors(sess)
    posted = request.method == "POST"
    form = ProvingTestForm() if posted else ProvingTestForm(formdata=None)
    form.proving_rotor_id.choices = options([(r.id, f"{r.name} ({r.mass_kg:g} kg, {r.planes} "
                                                     f"plane(s), {r.positions} positions)")
                                             for r in rotors])
    pick = request.args.get("rotor", type=int)
    if posted:
        pick = form.proving_rotor_id.data
    rotor = next((r for r in rotors if r.id == pick), rotors[0] if rotors else None)
    if not posted:
        form.performed_on.data = dt.datetime.now(dt.UTC).date()
        if rotor is not None:
            form.proving_rotor_id.data = rotor.id
            form.test_radius_mm.data = f"{rotor.radius_1_mm:g}"
            claim = tr.claimed_umar_gmm(m, rotor)
            form.claimed_umar.data = "" if claim is None else f"{claim:.4g}"
            # 15 × the plane's share of the claim: the middle of the usual 10–20 ×.
            if claim is not None:
                share = claim if rotor.planes == 1 else claim / 2
                form.test_mass_g.data = f"{15 * share / rotor.radius_1_mm:.3g}"
        if m.claimed_urr_pct is not None:
            form.claimed_urr_pct.data = f"{m.claimed_urr_pct:g}"
    _proving_form_for(form, rotor)
    result = None
    loose: list[str] = []
    status = 200
    if posted and rotor is not None and form.validate_on_submit():
        n = rotor.planes
        amps = [[e.data for e in form.p1_amp.entries], [e.data for e in form.p2_amp.entries]][:n]
        angs = [[disp.internal(_blank(e.data)) for e in form.p1_ang.entries],
                [disp.internal(_blank(e.data)) for e in form.p2_ang.entries]][:n]
        kw: dict[str, Any] = dict(
            test_mass_g=form.test_mass_g.data, test_radius_mm=_blank(form.test_radius_mm.data),
            indicated_gmm=amps, indicated_angles_deg=angs,
            first_position_deg=disp.internal(form.first_position_deg.data or 0) or 0.0,
            claimed_umar=_blank(form.claimed_umar.data),
            urr_before_gmm=[_blank(form.urr_before_1.data), _blank(form.urr_before_2.data)][:n],
            urr_after_gmm=[_blank(form.urr_after_1.data), _blank(form.urr_after_2.data)][:n],
            claimed_urr_pct=_blank(form.claimed_urr_pct.data),
        )
        if not isinstance(kw["first_position_deg"], float):
            kw["first_position_deg"] = 0.0
        mapping: dict[str, Any] = {}
        for p, (fa, fg) in enumerate(((form.p1_amp, form.p1_ang), (form.p2_amp, form.p2_ang)),
                                     start=1):
            for k, entry in enumerate(fa.entries, start=1):
                mapping[f"plane_{p}.amplitude_{k}"] = entry
            for k, entry in enumerate(fg.entries, start=1):
                mapping[f"plane_{p}.angle_{k}"] = entry
        for p in (1, 2):
            mapping[f"urr_before_{p}_gmm"] = getattr(form, f"urr_before_{p}")
            mapping[f"urr_after_{p}_gmm"] = getattr(form, f"urr_after_{p}")
        mapping["claimed_umar_gmm"] = form.claimed_umar
        try:
            if form.save.data:
                row = tr.record_proving_test(sess, m, by=_user(),
                                             performed_on=form.performed_on.data,
                                             proving_rotor=rotor, notes=form.notes.data or "",
                                             **kw)
                sess.commit()
                flash(f"Proving test of {m.name} saved: "
                      f"{'passed' if row.passed else 'FAILED'}.",
                      "success" if row.passed else "error")
                return redirect(url_for("traceability.machine", machine_id=m.id))
            result = tr.evaluate_proving_test(m, rotor, **kw)
        except ValidationFailed as exc:
            sess.rollback()
            loose = _put_errors(form, exc, mapping)
            status = 422
    elif posted:
        status = 422
    return render_template("traceability/proving_test.html", machine=m, rotor=rotor,
                           form=form, result=result, disp=disp, loose=loose,
                           positions=tr.equally_spaced_deg(rotor.positions) if rotor else ()
                           ), status


# --------------------------------------------------------------------------- arbors


def _arbors_page(form: ArborForm, status: int = 200):  # type: ignore[no-untyped-def]
    sess = db_session()
    return render_template("traceability/arbors.html",
                           arbors=tr.arbors(sess, include_archived=True),
                           form=form, disp=Display(get_settings(sess))), status


@bp.get("/arbors")
@requires("read")
def arbors():  # type: ignore[no-untyped-def]
    return _arbors_page(ArborForm(formdata=None))


@bp.post("/arbors")
@requires("edit_machines")
def add_arbor():  # type: ignore[no-untyped-def]
    sess = db_session()
    form = ArborForm()
    if form.validate_on_submit():
        try:
            arbor = tr.create_arbor(sess, by=_user(), name=form.name.data,
                                    description=form.description.data or "",
                                    mass_kg=_blank(form.mass_kg.data), notes=form.notes.data or "")
            sess.commit()
            flash(f"Arbor {arbor.name} added.", "success")
            return redirect(url_for("traceability.arbor", arbor_id=arbor.id))
        except ValidationFailed as exc:
            sess.rollback()
            _put_errors(form, exc)
    return _arbors_page(form, 422)


def _runs_from(form: IndexRunsForm, planes: int, disp: Display) -> tuple[list[Any], list[Any]]:
    def run(sub: Any) -> list[Any]:
        out = [(sub.amp_1.data, disp.internal(sub.ang_1.data))]
        if planes == 2:
            out.append((sub.amp_2.data, disp.internal(sub.ang_2.data)))
        return out

    return run(form.first), run(form.second)


def _index_mapping(form: IndexRunsForm) -> dict[str, Any]:
    m: dict[str, Any] = {"index_deg": form.index_deg, "rotor_mass_kg": form.rotor_mass_kg,
                         "measured_on": form.measured_on}
    for name, sub in (("first_run", form.first), ("second_run", form.second)):
        for p in (1, 2):
            m[f"{name}.plane_{p}.amplitude"] = getattr(sub, f"amp_{p}")
            m[f"{name}.plane_{p}.angle_deg"] = getattr(sub, f"ang_{p}")
    return m


def _arbor_page(arbor: Arbor, form: IndexRunsForm | None = None, status: int = 200,
                loose: list[str] | None = None):  # type: ignore[no-untyped-def]
    sess = db_session()
    if form is None:
        form = IndexRunsForm(formdata=None)
        form.measured_on.data = dt.datetime.now(dt.UTC).date()
    return render_template("traceability/arbor.html", arbor=arbor, form=form,
                           disp=Display(get_settings(sess)), loose=loose or [],
                           history=list(reversed(arbor.measurements))), status


@bp.get("/arbors/<int:arbor_id>")
@requires("read")
def arbor(arbor_id: int):  # type: ignore[no-untyped-def]
    return _arbor_page(_get(db_session(), Arbor, arbor_id))


@bp.post("/arbors/<int:arbor_id>/measurements")
@requires("work_jobs")
def add_arbor_measurement(arbor_id: int):  # type: ignore[no-untyped-def]
    sess = db_session()
    a = _get(sess, Arbor, arbor_id)
    disp = Display(get_settings(sess))
    form = IndexRunsForm()
    planes = 2 if _blank(form.first.amp_2.data) is not None else 1
    if form.validate_on_submit():
        first, second = _runs_from(form, planes, disp)
        try:
            tr.record_arbor_error(sess, a, by=_user(), measured_on=form.measured_on.data,
                                  first_run=first, second_run=second, planes=planes,
                                  index_deg=form.index_deg.data,
                                  second_frame=form.second_frame.data,
                                  rotor_mass_kg=_blank(form.rotor_mass_kg.data),
                                  notes=form.notes.data or "")
            sess.commit()
            flash(f"Arbor error of {a.name} recorded.", "success")
            return redirect(url_for("traceability.arbor", arbor_id=a.id))
        except ValidationFailed as exc:
            sess.rollback()
            return _arbor_page(a, form, 422, _put_errors(form, exc, _index_mapping(form)))
    return _arbor_page(a, form, 422)


# --------------------------------------------------------------------------- key convention


@bp.route("/rotor-types/<int:rotor_type_id>/key", methods=["GET", "POST"])
@requires("read")
def key(rotor_type_id: int):  # type: ignore[no-untyped-def]
    sess = db_session()
    rt = _get(sess, RotorType, rotor_type_id)
    posted = request.method == "POST"
    if posted and not can(current_user, "edit_registry"):
        abort(403, description=f"Your role ({current_user.role}) may not do this.")
    form = KeyForm() if posted else KeyForm(formdata=None)
    fields = ("key_width_mm", "key_height_mm", "key_length_mm", "hub_length_mm",
              "key_radius_mm", "key_angle_deg")
    disp = Display(get_settings(sess))
    status = 200
    if not posted:
        form.key_convention.data = rt.key_convention
        for f in fields:
            v = getattr(rt, f)
            if f == "key_angle_deg" and v is not None:
                v = to_display_deg(v, sense=disp.sense, zero_deg=disp.zero)
            getattr(form, f).data = "" if v is None else f"{v:g}"
    elif form.validate_on_submit():
        dims = {f: _blank(getattr(form, f).data) for f in fields}
        if dims["key_angle_deg"] is not None:
            dims["key_angle_deg"] = disp.internal(dims["key_angle_deg"])
        try:
            tr.set_key_convention(sess, rt, by=_user(), convention=form.key_convention.data,
                                  **dims)
            sess.commit()
            flash(f"Key convention of {rt.part_number} saved.", "success")
            return redirect(url_for("traceability.key", rotor_type_id=rt.id))
        except ValidationFailed as exc:
            sess.rollback()
            _put_errors(form, exc)
            status = 422
    else:
        status = 422
    return render_template("traceability/key.html", rt=rt, form=form, info=tr.key_info(rt),
                           disp=disp), status


# --------------------------------------------------------------------------- job steps


def _job(sess: Session, job_id: int) -> Job:
    return _get(sess, Job, job_id)


def _back(job: Job):  # type: ignore[no-untyped-def]
    return redirect(url_for("jobs.detail", job_id=job.id) + "#traceability")


def _refused(job: Job, exc: ServiceError):  # type: ignore[no-untyped-def]
    db_session().rollback()
    flash(exc.message, "error")
    return _back(job)


@bp.post("/jobs/<int:job_id>/residual-required")
@requires("work_jobs")
def residual_required(job_id: int):  # type: ignore[no-untyped-def]
    sess = db_session()
    job = _job(sess, job_id)
    form = RequiredForm()
    if not form.validate_on_submit():
        abort(400, description="The form expired; reload the job page.")
    try:
        jt.set_residual_test_required(sess, job, by=_user(), required=form.required.data == "1")
        sess.commit()
    except ServiceError as exc:
        return _refused(job, exc)
    return _back(job)


@bp.route("/jobs/<int:job_id>/residual-test", methods=["GET", "POST"])
@requires("work_jobs")
def residual_test(job_id: int):  # type: ignore[no-untyped-def]
    sess = db_session()
    job = _job(sess, job_id)
    disp = Display(get_settings(sess))
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
        abort(404, description=f"The rotor has {planes} plane(s).")
    try:
        advice = jt.suggested_test_masses(job)[plane - 1]
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
        form.test_mass_g.data = f"{advice.suggested_g:.3g}"
        form.test_radius_mm.data = f"{advice.radius_mm:g}"
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
            angles_deg=[disp.internal(_blank(e.data)) for e in form.ang.entries],
            repeat_amplitude=form.repeat_amplitude.data,
            repeat_angle_deg=disp.internal(_blank(form.repeat_angle_deg.data)),
        )
        mapping: dict[str, Any] = {f"amplitude_{k}": e for k, e in enumerate(form.amp.entries, 1)}
        mapping.update({f"angle_{k}": e for k, e in enumerate(form.ang.entries, 1)})
        try:
            if form.save.data:
                row = jt.record_residual_test(sess, job, by=_user(), unit=form.unit.data, **kw)
                sess.commit()
                flash(f"Residual test of plane {plane} saved: "
                      + ("valid." if row.valid else row.invalid_reason),
                      "success" if row.valid else "error")
                return _back(job)
            outcome = jt.evaluate_residual_test(permissible_gmm=advice.limit_gmm, **kw)
            svg = to_svg(jt.outcome_figure(outcome, unit=form.unit.data, angle_sense=disp.sense,
                                           angle_zero_deg=disp.zero), css_class="chart polar")
        except ValidationFailed as exc:
            sess.rollback()
            loose = _put_errors(form, exc, mapping)
            status = 422
        except ServiceError as exc:
            return _refused(job, exc)
    elif posted:
        status = 422
    return render_template("traceability/residual_test.html", job=job, form=form, plane=plane,
                           advice=advice, outcome=outcome, svg=svg, disp=disp, loose=loose,
                           positions=tr.equally_spaced_deg(n), n=n), status


@bp.post("/jobs/<int:job_id>/arbor")
@requires("work_jobs")
def job_arbor(job_id: int):  # type: ignore[no-untyped-def]
    sess = db_session()
    job = _job(sess, job_id)
    form = JobArborForm()
    form.arbor_id.choices = options([(0, "none")] + [(a.id, a.name) for a in tr.arbors(sess)])
    if not form.validate_on_submit():
        flash("Choose an arbor from the list.", "error")
        return _back(job)
    arbor = sess.get(Arbor, form.arbor_id.data) if form.arbor_id.data else None
    try:
        jt.set_job_arbor(sess, job, by=_user(), arbor=arbor)
        sess.commit()
    except ServiceError as exc:
        return _refused(job, exc)
    return _back(job)


@bp.post("/jobs/<int:job_id>/index-runs")
@requires("work_jobs")
def job_index_runs(job_id: int):  # type: ignore[no-untyped-def]
    sess = db_session()
    job = _job(sess, job_id)
    disp = Display(get_settings(sess))
    form = IndexRunsForm(prefix="ix")
    if job.arbor_id is None:
        flash("Choose the job's arbor first.", "error")
        return _back(job)
    a = _get(sess, Arbor, job.arbor_id)
    planes = job.rotor.rotor_type.planes
    if not form.validate_on_submit():
        flash("Index runs: " + "; ".join(f"{k}: {' '.join(v) if isinstance(v, list) else v}"
                                         for k, v in form.errors.items()), "error")
        return _back(job)
    first, second = _runs_from(form, planes, disp)
    try:
        tr.record_arbor_error(sess, a, by=_user(), measured_on=form.measured_on.data,
                              first_run=first, second_run=second, planes=planes,
                              index_deg=form.index_deg.data, second_frame=form.second_frame.data,
                              rotor_mass_kg=_blank(form.rotor_mass_kg.data), job=job,
                              notes=form.notes.data or "")
        sess.commit()
        flash(f"Arbor error of {a.name} recorded from the index runs.", "success")
    except ServiceError as exc:
        return _refused(job, exc)
    return _back(job)


@bp.post("/jobs/<int:job_id>/arbor-subtraction")
@requires("work_jobs")
def job_subtraction(job_id: int):  # type: ignore[no-untyped-def]
    sess = db_session()
    job = _job(sess, job_id)
    form = SubtractForm()
    choices = [(0, "do not subtract")]
    if job.arbor_id is not None:
        a = _get(sess, Arbor, job.arbor_id)
        choices += [(m.id, f"{m.measured_on}") for m in a.measurements]
    form.measurement_id.choices = options(choices)
    if not form.validate_on_submit():
        flash("Choose one of the arbor's measured errors.", "error")
        return _back(job)
    m = sess.get(ArborErrorMeasurement, form.measurement_id.data) if form.measurement_id.data \
        else None
    try:
        jt.set_arbor_subtraction(sess, job, by=_user(), measurement=m)
        sess.commit()
    except ServiceError as exc:
        return _refused(job, exc)
    return _back(job)


@bp.route("/jobs/<int:job_id>/repeat-runs", methods=["GET", "POST"])
@requires("work_jobs")
def repeat_runs(job_id: int):  # type: ignore[no-untyped-def]
    sess = db_session()
    job = _job(sess, job_id)
    disp = Display(get_settings(sess))
    planes = job.rotor.rotor_type.planes
    posted = request.method == "POST"
    form = ErrorRunsForm() if posted else ErrorRunsForm(formdata=None)
    loose: list[str] = []
    status = 200
    systematic, notes = jt.systematic_errors(sess, job)
    if posted and form.validate_on_submit():
        rows = [r for r in form.runs.entries
                if any(_blank(getattr(r.form, f).data) is not None for f in ("amp_1", "ang_1"))]
        runs = []
        for r in rows:
            run = [(r.form.amp_1.data, disp.internal(r.form.ang_1.data))]
            if planes == 2:
                run.append((r.form.amp_2.data, disp.internal(r.form.ang_2.data)))
            runs.append(run)
        try:
            jt.record_error_estimate(sess, job, by=_user(), runs=runs,
                                     key_compensation_applied=form.key_compensation_applied.data,
                                     notes=form.notes.data or "")
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
    return render_template("traceability/repeat_runs.html", job=job, form=form, planes=planes,
                           systematic=systematic, notes=notes, disp=disp, loose=loose), status


# --------------------------------------------------------------------------- panels


@bp.app_context_processor
def _panels() -> dict[str, Any]:
    def traceability_home() -> list[tr.VerificationStatus] | None:
        if not current_user.is_authenticated or not can(current_user, "verify_machines"):
            return None
        return tr.machines_due_soon(db_session(), dt.datetime.now(dt.UTC).date())

    def traceability_panel(job: Job, calc: Any = None) -> dict[str, Any]:
        sess = db_session()
        settings = get_settings(sess)
        disp = Display(settings)
        data = jt.job_traceability(sess, job, calc)
        svgs = {t.id: to_svg(jt.residual_test_figure(t, angle_sense=disp.sense,
                                                     angle_zero_deg=disp.zero, size=220),
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
        ix_form.measured_on.data = dt.datetime.now(dt.UTC).date()
        ix_form.rotor_mass_kg.data = f"{job.rotor.rotor_type.mass_kg:g}"
        return {"data": data, "disp": disp, "svgs": svgs, "arbor_form": arbor_form,
                "sub_form": sub_form, "ix_form": ix_form, "req_form": RequiredForm(formdata=None),
                "can_work": can(current_user, "work_jobs"),
                "can_quality": can(current_user, "issue_certificates")}

    return {"traceability_home": traceability_home, "traceability_panel": traceability_panel}

"""Traceability pages: machine verification register and proving tests, arbors, and the
job-page steps (residual test, arbor and index runs, repeated runs, key convention).

Thin: parse the form, call :mod:`shopapp.traceability.services` or
:mod:`shopapp.jobs.evidence`, commit once, render. Angles are typed
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
from shopapp.core.errors import ValidationFailed
from shopapp.core.extensions import db_session
from shopapp.core.permissions import can
from shopapp.core.settings import get_settings
from shopapp.core.web import acting_user, requires
from shopapp.models import (
    Arbor,
    Machine,
    ProvingRotor,
    RotorType,
    ShopSettings,
)
from shopapp.traceability import services as tr
from shopapp.traceability.forms import (
    ArborForm,
    IndexRunsForm,
    KeyForm,
    ProvingRotorForm,
    ProvingTestForm,
    index_error_fields,
    index_runs_from,
    options,
    sized,
)

bp = Blueprint("traceability", __name__, url_prefix="/traceability", template_folder="templates")


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
                sess, by=acting_user(), name=form.name.data, mass_kg=form.mass_kg.data,
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
                row = tr.record_proving_test(sess, m, by=acting_user(),
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
            arbor = tr.create_arbor(sess, by=acting_user(), name=form.name.data,
                                    description=form.description.data or "",
                                    mass_kg=_blank(form.mass_kg.data), notes=form.notes.data or "")
            sess.commit()
            flash(f"Arbor {arbor.name} added.", "success")
            return redirect(url_for("traceability.arbor", arbor_id=arbor.id))
        except ValidationFailed as exc:
            sess.rollback()
            _put_errors(form, exc)
    return _arbors_page(form, 422)


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
        first, second = index_runs_from(form, planes, disp.internal)
        try:
            tr.record_arbor_error(sess, a, by=acting_user(), measured_on=form.measured_on.data,
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
            return _arbor_page(a, form, 422, _put_errors(form, exc, index_error_fields(form)))
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
            tr.set_key_convention(sess, rt, by=acting_user(), convention=form.key_convention.data,
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


# --------------------------------------------------------------------------- panels


@bp.app_context_processor
def _panels() -> dict[str, Any]:
    def traceability_home() -> list[tr.VerificationStatus] | None:
        if not current_user.is_authenticated or not can(current_user, "verify_machines"):
            return None
        return tr.machines_due_soon(db_session(), dt.datetime.now(dt.UTC).date())

    return {"traceability_home": traceability_home}

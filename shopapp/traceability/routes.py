"""Traceability pages: machine verification register and proving tests, arbors, the key
convention of rotor types, and the panels other pages include (quality manager's home,
a machine's verification list).

Thin: parse the form, call one use-case of :mod:`shopapp.traceability.verifications`,
:mod:`~shopapp.traceability.arbors` or :mod:`~shopapp.traceability.keys`, commit once,
render. Angles are typed and shown in the shop's display convention
(:class:`shopapp.core.display.ShopDisplay`).
"""

from __future__ import annotations

from functools import partial
from typing import Any

from flask import Blueprint, abort, flash, redirect, render_template, request, url_for
from flask_login import current_user

from shopapp.core.clock import shop_today
from shopapp.core.display import ShopDisplay, counted, plain
from shopapp.core.errors import ValidationFailed
from shopapp.core.extensions import db_session
from shopapp.core.forms import apply_errors
from shopapp.core.pagination import Page
from shopapp.core.permissions import can
from shopapp.core.settings import get_settings
from shopapp.core.web import acting_user, get_or_404, once, request_page, requires, submit_form
from shopapp.models import Arbor, Machine, RotorType
from shopapp.traceability import arbors as arbor_cases
from shopapp.traceability import keys, queries, verifications
from shopapp.traceability.forms import (
    ArborForm,
    IndexRunsForm,
    KeyForm,
    ProvingRotorForm,
    ProvingTestForm,
    blank_to_none,
    index_error_fields,
    index_runs_from,
    options,
    typed_angle,
)

bp = Blueprint("traceability", __name__, url_prefix="/traceability", template_folder="templates")


def _display() -> ShopDisplay:
    return ShopDisplay(get_settings(db_session()))


# --------------------------------------------------------------------------- register


def _register_page(rotor_form: ProvingRotorForm, status: int = 200):  # type: ignore[no-untyped-def]
    sess = db_session()
    day = shop_today()
    return render_template(
        "traceability/index.html", register=verifications.register(sess, day), day=day,
        rotors=verifications.proving_rotors(sess), rotor_form=rotor_form,
        settings=get_settings(sess),
    ), status


@bp.get("/")
@requires("read")
def index():  # type: ignore[no-untyped-def]
    return _register_page(ProvingRotorForm(formdata=None))


@bp.post("/proving-rotors")
@requires("edit_machines")
def add_proving_rotor():  # type: ignore[no-untyped-def]
    form = ProvingRotorForm()
    return submit_form(
        form, lambda status, _loose: _register_page(form, status),
        lambda sess: verifications.create_proving_rotor(
            sess, by=acting_user(), name=form.name.data, mass_kg=form.mass_kg.data,
            planes=form.planes.data, radius_1_mm=form.radius_1_mm.data,
            radius_2_mm=blank_to_none(form.radius_2_mm.data), positions=form.positions.data,
            notes=form.notes.data or ""),
        done=lambda rotor: (f"Proving rotor {rotor.name} added.", url_for("traceability.index")),
    )


@bp.get("/machines/<int:machine_id>")
@requires("read")
def machine(machine_id: int):  # type: ignore[no-untyped-def]
    sess = db_session()
    m = get_or_404(sess, Machine, machine_id)
    return render_template("traceability/machine.html", machine=m,
                           standing=verifications.machine_status(sess, m, shop_today()),
                           records=verifications.verifications_of(sess, m))


@bp.route("/machines/<int:machine_id>/proving-test", methods=["GET", "POST"])
@requires("verify_machines")
def proving_test(machine_id: int):  # type: ignore[no-untyped-def]
    sess = db_session()
    m = get_or_404(sess, Machine, machine_id)
    disp = _display()
    rotors = verifications.proving_rotors(sess)
    posted = request.method == "POST"
    form = ProvingTestForm() if posted else ProvingTestForm(formdata=None)
    form.proving_rotor_id.choices = options([
        (r.id, f"{r.name} ({plain(r.mass_kg)} kg, {counted(r.planes, 'plane')}, "
               f"{counted(r.positions, 'position')})")
        for r in rotors])
    pick = form.proving_rotor_id.data if posted else request.args.get("rotor", type=int)
    proposed = verifications.proposed_proving_rotor(m, rotors)
    rotor = next((r for r in rotors if r.id == pick), proposed)
    notices: list[str] = []
    if rotor is None and rotors:
        rotor = rotors[0]
        notices.append(f"No proving rotor in the register fits {m.name}'s mass range "
                       f"({plain(m.min_mass_kg)}–{plain(m.max_mass_kg)} kg); "
                       f"{rotor.name} is shown: choose the rotor you test with.")
    if not posted:
        form.performed_on.data = shop_today()
        if rotor is not None:
            form.proving_rotor_id.data = rotor.id
        form.propose(verifications.proving_test_defaults(m, rotor),
                     rotor.id if rotor is not None else None)
    form.size_for(rotor.positions if rotor is not None else 8)
    result = None
    loose: list[str] = []
    status = 200
    changed = posted and rotor is not None and form.rotor_changed(rotor.id)
    if changed:
        assert rotor is not None
        # The rotor was changed without the page's script: its own claimed figures replace
        # the other rotor's, and nothing is computed until they have been seen.
        form.propose(verifications.proving_test_defaults(m, rotor), rotor.id)
        notices.append(f"Figures proposed for {rotor.name}: check them and the positions, "
                       "then Compute again.")
    elif posted and rotor is not None:
        # Blank proposed figures are filled by the server as the script would have.
        form.propose(verifications.proving_test_defaults(m, rotor), rotor.id, blanks_only=True)
    if posted and rotor is not None and not changed and form.validate_on_submit():
        readings = form.readings(rotor.planes, disp)
        try:
            if form.save.data:
                spend = once(sess, form, lambda _spent: url_for("traceability.machine",
                                                                machine_id=m.id))
                row = verifications.record_proving_test(
                    sess, m, by=acting_user(), performed_on=form.performed_on.data,
                    proving_rotor=rotor, notes=form.notes.data or "", **readings)
                spend(row)
                sess.commit()
                flash(f"Proving test of {m.name} saved: "
                      f"{'passed' if row.passed else 'FAILED'}.",
                      "success" if row.passed else "error")
                return redirect(url_for("traceability.machine", machine_id=m.id))
            result = verifications.evaluate_proving_test(m, rotor, **readings)
        except ValidationFailed as exc:
            sess.rollback()
            loose = apply_errors(form, exc, form.error_fields())
            status = 422
    elif posted and not changed:
        status = 422
    return render_template(
        "traceability/proving_test.html", machine=m, rotor=rotor, form=form, result=result,
        disp=disp, loose=loose, notices=notices,
        figures={r.id: verifications.proving_test_defaults(m, r).as_form() for r in rotors},
        positions=verifications.equally_spaced_deg(rotor.positions) if rotor else (),
    ), status


# --------------------------------------------------------------------------- arbors


def _arbors_page(form: ArborForm, status: int = 200):  # type: ignore[no-untyped-def]
    return render_template("traceability/arbors.html",
                           arbors=arbor_cases.arbors(db_session(), include_archived=True),
                           form=form, disp=_display()), status


@bp.get("/arbors")
@requires("read")
def arbors():  # type: ignore[no-untyped-def]
    return _arbors_page(ArborForm(formdata=None))


@bp.post("/arbors")
@requires("edit_machines")
def add_arbor():  # type: ignore[no-untyped-def]
    form = ArborForm()
    return submit_form(
        form, lambda status, _loose: _arbors_page(form, status),
        lambda sess: arbor_cases.create_arbor(
            sess, by=acting_user(), name=form.name.data, description=form.description.data or "",
            mass_kg=blank_to_none(form.mass_kg.data), notes=form.notes.data or ""),
        done=lambda arbor: (f"Arbor {arbor.name} added.",
                            url_for("traceability.arbor", arbor_id=arbor.id)),
    )


def _arbor_page(arbor: Arbor, form: IndexRunsForm | None = None, status: int = 200,
                loose: list[str] | None = None):  # type: ignore[no-untyped-def]
    if form is None:
        form = IndexRunsForm(formdata=None)
        form.measured_on.data = shop_today()
    return render_template("traceability/arbor.html", arbor=arbor, form=form,
                           disp=_display(), loose=loose or [],
                           history=list(reversed(arbor.measurements))), status


@bp.get("/arbors/<int:arbor_id>")
@requires("read")
def arbor(arbor_id: int):  # type: ignore[no-untyped-def]
    return _arbor_page(get_or_404(db_session(), Arbor, arbor_id))


@bp.post("/arbors/<int:arbor_id>/measurements")
@requires("work_jobs")
def add_arbor_measurement(arbor_id: int):  # type: ignore[no-untyped-def]
    sess = db_session()
    a = get_or_404(sess, Arbor, arbor_id)
    form = IndexRunsForm()
    planes = 2 if blank_to_none(form.first.amp_2.data) is not None else 1
    spend = once(sess, form, lambda _spent: url_for("traceability.arbor", arbor_id=a.id))
    if not form.validate_on_submit():
        return _arbor_page(a, form, 422)
    first, second = index_runs_from(form, planes, partial(typed_angle, _display()))
    try:
        arbor_cases.record_arbor_error(
            sess, a, by=acting_user(), measured_on=form.measured_on.data, first_run=first,
            second_run=second, planes=planes, index_deg=form.index_deg.data,
            second_frame=form.second_frame.data,
            rotor_mass_kg=blank_to_none(form.rotor_mass_kg.data), notes=form.notes.data or "")
        spend(None)
        sess.commit()
    except ValidationFailed as exc:
        sess.rollback()
        return _arbor_page(a, form, 422, apply_errors(form, exc, index_error_fields(form)))
    flash(f"Arbor error of {a.name} recorded.", "success")
    return redirect(url_for("traceability.arbor", arbor_id=a.id))


# --------------------------------------------------------------------------- key convention


@bp.route("/rotor-types/<int:rotor_type_id>/key", methods=["GET", "POST"])
@requires("read")
def key(rotor_type_id: int):  # type: ignore[no-untyped-def]
    sess = db_session()
    rt = get_or_404(sess, RotorType, rotor_type_id)
    posted = request.method == "POST"
    if posted and not can(current_user, "edit_registry"):
        abort(403, description=f"Your role ({current_user.role}) may not do this.")
    form = KeyForm() if posted else KeyForm(formdata=None)
    disp = _display()
    status = 200
    if not posted:
        form.load(rt, disp)
    elif form.validate_on_submit():
        try:
            keys.set_key_convention(sess, rt, by=acting_user(),
                                    convention=form.key_convention.data,
                                    **form.dimensions(disp))
            sess.commit()
            flash(f"Key convention of {rt.part_number} saved.", "success")
            return redirect(url_for("traceability.key", rotor_type_id=rt.id))
        except ValidationFailed as exc:
            sess.rollback()
            apply_errors(form, exc)
            status = 422
    else:
        status = 422
    return render_template("traceability/key.html", rt=rt, form=form, info=keys.key_info(rt),
                           disp=disp), status


# --------------------------------------------------------------------------- panels


@bp.app_context_processor
def _panels() -> dict[str, Any]:
    """Helpers for the panels other areas include (start page, machine page)."""

    def traceability_home() -> list[verifications.VerificationStatus] | None:
        if not current_user.is_authenticated or not can(current_user, "verify_machines"):
            return None
        return verifications.machines_due_soon(db_session(), shop_today())

    def machine_verifications(machine: Machine) -> Page[Any]:
        """The machine's proving tests for ``traceability/_machine_panel.html``, one page of
        rows (test, tester's name), newest first."""
        return request_page(db_session(), queries.machine_verifications_stmt(machine.id),
                            {"machine_id": machine.id}, scalars=False)

    return {"traceability_home": traceability_home,
            "machine_verifications": machine_verifications}

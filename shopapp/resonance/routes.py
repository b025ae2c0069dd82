"""Resonance pages: log and view run-ups of a job or a machine, the shop's recent
run-ups, the loose-mass balancer calculator, and the panels the job and machine
pages include (``resonance/_job_panel.html``, ``resonance/_machine_panel.html``).

Thin: parse the form, call one use-case (:mod:`shopapp.resonance.runups`,
:mod:`shopapp.resonance.loose_mass_calc`), commit once, render.
"""

from __future__ import annotations

from typing import Any

from flask import (
    Blueprint,
    abort,
    current_app,
    flash,
    redirect,
    render_template,
    request,
    url_for,
)
from flask_login import current_user
from sqlalchemy.orm import Session

from shopapp.charts.svg import to_svg
from shopapp.core.clock import shop_today
from shopapp.core.display import ShopDisplay
from shopapp.core.errors import ValidationFailed
from shopapp.core.extensions import db_session
from shopapp.core.forms import apply_errors
from shopapp.core.permissions import can
from shopapp.core.settings import get_settings
from shopapp.core.web import acting_user, get_or_404, once, requires, saved_row
from shopapp.models import RUNUP_UNITS, Job, Machine, Rotor, RunUpRecord
from shopapp.resonance import queries, runups
from shopapp.resonance.figures import loose_mass_figures, run_up_figures
from shopapp.resonance.forms import TYRE_BEAD_EXAMPLE, LooseMassForm, RunUpForm
from shopapp.resonance.loose_mass_calc import check_loose_mass

bp = Blueprint("resonance", __name__, url_prefix="/resonance", template_folder="templates")


def _page_link(endpoint: str, **args: Any) -> str | None:
    """A link to another area's page, once that area is there."""
    return url_for(endpoint, **args) if endpoint in current_app.view_functions else None


def _rows(sess: Session, records: list[RunUpRecord]) -> list[tuple[RunUpRecord, Any]]:
    by = acting_user()
    return [(rec, runups.analyse_run_up(sess, rec, by=by)) for rec in records]


@bp.get("/")
@requires("read")
def index():  # type: ignore[no-untyped-def]
    sess = db_session()
    rows = _rows(sess, queries.recent_run_ups(sess))
    return render_template("resonance/index.html", rows=rows)


# --------------------------------------------------------------------------- log a run-up


def _new(job: Job | None, machine: Machine | None):  # type: ignore[no-untyped-def]
    sess = db_session()
    form = RunUpForm()
    loose: list[str] = []
    status = 200
    if request.method == "GET":
        form.recorded_on.data = shop_today()
        form.measured.data, form.unit.data = "displacement", RUNUP_UNITS["displacement"][0]
        if job is not None:
            form.operating_speed_rpm.data = job.service_speed_rpm
    else:
        spend = once(sess, form, _saved_run_up_page)
        valid = form.validate()
        points = form.readings()
        if valid and points is not None:
            try:
                done = runups.record_run_up(
                    sess, by=acting_user(), job=job, machine=machine,
                    recorded_on=form.recorded_on.data, sensor=form.sensor.data or "",
                    measured=form.measured.data, unit=form.unit.data, points=points,
                    slow_roll_amplitude=form.slow_roll_amplitude.data,
                    slow_roll_angle_deg=form.slow_roll_angle_deg.data,
                    operating_speed_rpm=form.operating_speed_rpm.data,
                    operating_lo_rpm=form.operating_lo_rpm.data,
                    operating_hi_rpm=form.operating_hi_rpm.data, notes=form.notes.data or "",
                )
                spend(done.record)
                sess.commit()
            except ValidationFailed as exc:
                sess.rollback()
                mapping = {k: form.points for k in exc.errors if k.startswith("points")}
                loose = apply_errors(form, exc, mapping)
            else:
                flash(f"Run-up recorded: {len(done.record.points)} readings, "
                      f"{runups.sweep_words(done.record)}.", "success")
                for note in done.notes:
                    flash(f"Note — {note}.", "note")
                return redirect(url_for("resonance.detail", run_up_id=done.record.id))
        status = 422
    settings = get_settings(sess)
    return render_template("resonance/new.html", form=form, job=job, machine=machine,
                           loose=loose, settings=settings,
                           limit_machine=machine or (job.machine if job else None)), status


def _saved_run_up_page(spent: Any) -> str:
    """Where a run-up form posted twice leads: the run-up the first post recorded."""
    rec = saved_row(db_session(), spent)
    return (url_for("resonance.detail", run_up_id=rec.id) if rec is not None
            else url_for("resonance.index"))


@bp.route("/jobs/<int:job_id>/run-ups/new", methods=["GET", "POST"])
@requires("work_jobs")
def new_for_job(job_id: int):  # type: ignore[no-untyped-def]
    return _new(get_or_404(db_session(), Job, job_id), None)


@bp.route("/machines/<int:machine_id>/run-ups/new", methods=["GET", "POST"])
@requires("work_jobs")
def new_for_machine(machine_id: int):  # type: ignore[no-untyped-def]
    return _new(None, get_or_404(db_session(), Machine, machine_id))


# --------------------------------------------------------------------------- one run-up


@bp.get("/run-ups/<int:run_up_id>")
@requires("read")
def detail(run_up_id: int):  # type: ignore[no-untyped-def]
    sess = db_session()
    rec = queries.run_up(sess, run_up_id) if 0 < run_up_id < 2**31 else None
    if rec is None:
        abort(404, description=f"No run-up with id {run_up_id}.")
    analysis = runups.analyse_run_up(sess, rec, by=acting_user())
    disp = ShopDisplay(get_settings(sess))
    plots = [to_svg(f) for f in run_up_figures(analysis, rec, disp)]
    return render_template(
        "resonance/detail.html", rec=rec, analysis=analysis, plots=plots, disp=disp,
        sweep=runups.sweep_words(rec),
        job_link=_page_link("jobs.detail", job_id=rec.job_id) if rec.job_id else None,
        machine_link=(_page_link("machines.detail", machine_id=rec.machine_id)
                      if rec.machine_id else None),
    )


# --------------------------------------------------------------------------- calculator


@bp.get("/loose-mass")
@requires("read")
def loose_mass():  # type: ignore[no-untyped-def]
    form = LooseMassForm(request.args)
    check = None
    loose: list[str] = []
    status = 200
    if request.args:
        if form.validate():
            try:
                check = check_loose_mass(by=acting_user(), **form.values())
            except ValidationFailed as exc:
                loose = apply_errors(form, exc)
                status = 422
        else:
            status = 422
    plots = [to_svg(f) for f in loose_mass_figures(check)] if check is not None else []
    from shopapp.balancing.loose_mass import LOOSE_MASS_CAUTIONS  # scipy: imported on use

    return render_template("resonance/loose_mass.html", form=form, check=check, plots=plots,
                           loose=loose, example=TYRE_BEAD_EXAMPLE,
                           cautions=LOOSE_MASS_CAUTIONS), status


# --------------------------------------------------------------------------- panels


@bp.app_context_processor
def _panels() -> dict[str, Any]:
    """The Resonance sections of the job, machine and rotor pages."""

    def job_panel(job: Job) -> dict[str, Any] | None:
        if not current_user.is_authenticated or not can(current_user, "read"):
            return None
        sess = db_session()
        return {"rows": _rows(sess, queries.job_run_ups(sess, job)),
                "may_record": can(current_user, "work_jobs"),
                "new_url": url_for("resonance.new_for_job", job_id=job.id)}

    def machine_panel(machine: Machine) -> dict[str, Any] | None:
        if not current_user.is_authenticated or not can(current_user, "read"):
            return None
        sess = db_session()
        return {"rows": _rows(sess, queries.machine_run_ups(sess, machine)),
                "may_record": can(current_user, "work_jobs"),
                "new_url": url_for("resonance.new_for_machine", machine_id=machine.id)}

    def rotor_panel(rotor: Rotor) -> dict[str, Any] | None:
        if not current_user.is_authenticated or not can(current_user, "read"):
            return None
        sess = db_session()
        return {"rows": _rows(sess, queries.rotor_run_ups(sess, rotor))}

    return {"resonance_job_panel": job_panel, "resonance_machine_panel": machine_panel,
            "resonance_rotor_panel": rotor_panel}

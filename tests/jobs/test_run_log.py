"""The run log (issue 11): the machine's reading unit, speed limits, angles, struck-out runs.

Each test names the defect it guards against; the values it checks come from outside
the code under test (numpy/scipy as an independent solver, the ISO 21940-11 formula,
or common shop practice, said beside the check).
"""

from __future__ import annotations

import cmath
import hashlib
import html
import math
import re
from typing import Any

import numpy as np
import pytest
from sqlalchemy import select, update
from sqlalchemy.exc import DBAPIError
from sqlalchemy.orm import Session

from shopapp.core.errors import PermissionDenied, TransitionRefused, ValidationFailed
from shopapp.jobs.calc import PAGE_CAUTION
from shopapp.jobs.intake import ToleranceSpec, book_in
from shopapp.jobs.queries import evaluate
from shopapp.jobs.runs import record_run, strike_run
from shopapp.jobs.states import mark_in_tolerance
from shopapp.models import AuditEvent, Certificate, Job, Run, utcnow


def _p(amplitude: float, angle_deg: float) -> complex:
    return cmath.rect(amplitude, math.radians(angle_deg))


def reads(v: np.ndarray, unit: str) -> list[tuple[int, float, float, str]]:
    return [(i + 1, abs(z), math.degrees(cmath.phase(z)), unit) for i, z in enumerate(v)]


def text(resp: Any) -> str:
    return html.unescape(resp.get_data(as_text=True))


@pytest.fixture()
def op(make_user):  # type: ignore[no-untyped-def]
    return make_user("operator")


@pytest.fixture()
def velocity(shop):  # type: ignore[no-untyped-def]
    """The issue's machine: hard-bearing, rated to 2500 rpm, reads pedestal velocity."""
    return shop.machine(min_speed_rpm=100.0, max_speed_rpm=2500.0, reading_unit="mm/s")


@pytest.fixture()
def calibrated(shop):  # type: ignore[no-untyped-def]
    return shop.machine(min_speed_rpm=100.0, max_speed_rpm=2500.0, reading_unit="g·mm")


def book(db: Session, op: Any, machine: Any, rt: Any, *, bal: float = 600.0,
         serial: str = "S-1") -> Job:
    """Book a job in and commit, so a refused run's rollback keeps the job."""
    job = book_in(db, by=op, customer=rt.customer_id, serial_number=serial,
                  rotor_type_id=rt.id, balancing_speed_rpm=bal, machine_id=machine.id,
                  tolerance=ToleranceSpec("grade", grade=6.3))
    db.commit()
    return job


def _rows(db: Session, job: Job) -> int:
    return len(db.scalars(select(Run).where(Run.job_id == job.id)).all())


# --------------------------------------------------------------------------- reading unit


def test_calibrated_reading_on_a_velocity_machine_is_refused(db, op, shop, velocity) -> None:
    """Defect: a g·mm reading on a velocity machine was judged against U_per (nonsense)."""
    job = book(db, op, velocity, shop.rotor_type())
    with pytest.raises(ValidationFailed) as exc:
        record_run(db, job, by=op, purpose="initial", speed_rpm=600,
                   readings=[(1, 300.0, 0.0, "g·mm"), (2, 0.0, 0.0, "g·mm")])
    assert exc.value.field == "unit" and "reads vibration in mm/s" in exc.value.message
    db.rollback()
    # Its own unit is logged, and (common shop practice: a vibration reading is not an
    # unbalance until influence coefficients turn it into one) it is not judged.
    job = db.get(Job, job.id)
    record_run(db, job, by=op, purpose="initial", speed_rpm=600,
               readings=[(1, 30.0, 0.0, "mm/s"), (2, 10.0, 0.0, "mm/s")])
    run = record_run(db, job, by=op, purpose="check", speed_rpm=600,
                     readings=[(1, 3.0, 0.0, "mm/s"), (2, 1.0, 0.0, "mm/s")])
    v = evaluate(db, job).verdicts[run.id]
    assert not v.judged and run.within_tolerance is None


def test_run_form_defaults_to_the_machines_reading_unit(client, login_as, db, shop,
                                                        velocity) -> None:
    """Defect: a velocity machine's run form defaulted to "g·mm (calibrated)"."""
    user = login_as("operator")
    job = book(db, user, velocity, shop.rotor_type())
    db.commit()
    body = text(client.get(f"/jobs/{job.id}"))
    selected = re.search(r'<select[^>]*name="run-unit".*?</select>', body, re.S)
    assert selected is not None
    assert re.search(r'<option selected value="mm/s">|<option value="mm/s" selected>',
                     selected.group(0))
    assert "this machine reads mm/s" in body


def test_two_plane_rotor_on_a_one_plane_machine_is_refused(db, op, shop) -> None:
    one = shop.machine(min_speed_rpm=100.0, reading_unit="g·mm", reading_planes=1)
    with pytest.raises(ValidationFailed) as exc:
        book(db, op, one, shop.rotor_type())
    assert exc.value.field == "machine_id" and "1 plane per run" in exc.value.message


# --------------------------------------------------------------------------- speed


def test_run_above_the_machines_rating_is_refused(db, op, shop, velocity) -> None:
    """Defect: 9000 rpm was accepted on a machine rated to 2500 rpm (service 1480 rpm)."""
    job = book(db, op, velocity, shop.rotor_type(service_speed_rpm=1480.0))
    for speed, says in ((9000, "outside that range"), (50, "outside that range"),
                        (1.5, "1.5 rpm is outside that range"),  # as typed, not "2 rpm"
                        (2000, "above the rotor's service speed")):
        with pytest.raises(ValidationFailed) as exc:
            record_run(db, job, by=op, purpose="initial", speed_rpm=speed,
                       readings=[(1, 3.0, 0.0, "mm/s"), (2, 1.0, 0.0, "mm/s")])
        assert exc.value.field == "speed_rpm" and says in exc.value.message
        # The safety caution goes with the refusal (over-speed, rotor burst; makers' limits).
        assert "burst" in exc.value.message and "local codes" in exc.value.message
        db.rollback()
        job = db.get(Job, job.id)
    assert _rows(db, job) == 0
    run = record_run(db, job, by=op, purpose="initial", speed_rpm=1480,
                     readings=[(1, 3.0, 0.0, "mm/s"), (2, 1.0, 0.0, "mm/s")])
    assert run.speed_rpm == 1480


def test_permitted_balancing_speed_limits_runs_and_book_in(db, op, shop, velocity) -> None:
    rt = shop.rotor_type(service_speed_rpm=1480.0, permitted_balancing_speed_rpm=1000.0)
    db.commit()  # the machine and rotor type outlive the refused booking's rollback
    # Book-in and runs share the rule (one home): 1200 rpm is below the service speed
    # but above what the rotor type permits.
    with pytest.raises(ValidationFailed) as exc:
        book(db, op, velocity, rt, bal=1200.0)
    assert exc.value.field == "balancing_speed_rpm"
    assert "permitted balancing speed" in exc.value.message
    db.rollback()
    job = book(db, op, velocity, rt, bal=900.0)
    with pytest.raises(ValidationFailed, match="permitted balancing speed, 1000 rpm"):
        record_run(db, job, by=op, purpose="initial", speed_rpm=1200,
                   readings=[(1, 3.0, 0.0, "mm/s"), (2, 1.0, 0.0, "mm/s")])


# --------------------------------------------------------------------------- angles


def test_angle_outside_a_turn_is_refused_not_wrapped(db, op, shop, calibrated) -> None:
    """Defect: 400° was stored as 40°."""
    job = book(db, op, calibrated, shop.rotor_type())
    with pytest.raises(ValidationFailed) as exc:
        record_run(db, job, by=op, purpose="initial", speed_rpm=600,
                   readings=[(1, 300.0, 400.0, "g·mm"), (2, 10.0, 0.0, "g·mm")])
    assert exc.value.field == "angle_1_deg"
    db.rollback()
    assert _rows(db, db.get(Job, job.id)) == 0


def test_typed_angle_of_400_is_refused_beside_its_field(client, login_as, db, shop,
                                                        calibrated) -> None:
    user = login_as("operator")
    job = book(db, user, calibrated, shop.rotor_type())
    db.commit()
    resp = client.post(f"/jobs/{job.id}/runs", data={
        "run-purpose": "initial", "run-speed_rpm": "600", "run-unit": "g·mm",
        "run-amplitude_1": "300", "run-angle_1_deg": "400",
        "run-amplitude_2": "10", "run-angle_2_deg": "1,5"})
    body = text(resp)
    assert resp.status_code == 422
    assert "400° is outside 0–360°" in body and "not wrapped to 40°" in body
    assert _rows(db, job) == 0


def test_decimal_comma_in_the_run_form_keeps_its_magnitude(client, login_as, db, shop,
                                                           calibrated) -> None:
    """Defect guard: "1,5" must be 1.5 (or refused), never 15."""
    user = login_as("operator")
    job = book(db, user, calibrated, shop.rotor_type())
    db.commit()
    resp = client.post(f"/jobs/{job.id}/runs", data={
        "run-purpose": "initial", "run-speed_rpm": "600", "run-unit": "g·mm",
        "run-amplitude_1": "300,5", "run-angle_1_deg": "12,5",
        "run-amplitude_2": "10", "run-angle_2_deg": "0"})
    assert resp.status_code == 302
    run = db.scalars(select(Run).where(Run.job_id == job.id)).one()
    assert run.readings[0].amplitude == pytest.approx(300.5)
    assert run.readings[0].angle_deg == pytest.approx(12.5)


# --------------------------------------------------------------------------- strike out


A = np.array([[_p(0.05, -30), _p(0.018, 40)], [_p(0.015, 60), _p(0.045, -20)]])
U = np.array([_p(20.0, 70), _p(12.0, 200)])  # hidden unbalance, grams at R = 300 mm


def test_struck_trial_run_is_left_out_of_coefficients_and_advice(db, op, shop, velocity) -> None:
    """A mistaken trial run (readings of another rotor typed in) struck out: the advice
    must be what the good runs give, checked with scipy's solver on the same system."""
    job = book(db, op, velocity, shop.rotor_type())
    t1, t2 = np.array([_p(30.0, 0), 0]), np.array([0, _p(30.0, 90)])
    record_run(db, job, by=op, purpose="initial", speed_rpm=600, readings=reads(A @ U, "mm/s"))
    wrong = record_run(db, job, by=op, purpose="trial", speed_rpm=600,
                       readings=[(1, 9.0, 5.0, "mm/s"), (2, 7.0, 300.0, "mm/s")],
                       trial=(1, 30.0, 0.0, 300.0))
    record_run(db, job, by=op, purpose="trial", speed_rpm=600,
               readings=reads(A @ (U + t2), "mm/s"), trial=(2, 30.0, 90.0, 300.0))
    before = evaluate(db, job).advice
    assert before is not None
    strike_run(db, job, wrong, by=op, reason="typed the readings of the next rotor")
    record_run(db, job, by=op, purpose="trial", speed_rpm=600,
               readings=reads(A @ (U + t1), "mm/s"), trial=(1, 30.0, 0.0, 300.0))
    calc = evaluate(db, job)
    assert calc.coefficients is not None and wrong.id not in calc.coefficients.trial_run_ids
    np.testing.assert_allclose(calc.coefficients.matrix, A, rtol=1e-9)
    w = np.array([_p(a.mass_g, a.add_angle_deg) for a in calc.advice.planes])  # type: ignore[union-attr]
    from scipy import linalg

    np.testing.assert_allclose(w, linalg.solve(A, -(A @ U)), rtol=1e-9)  # W = −A⁻¹·V0
    assert not np.allclose([_p(a.mass_g, a.add_angle_deg) for a in before.planes], w)
    assert wrong.id not in calc.verdicts


def test_struck_check_run_no_longer_decides_the_verdict(db, op, shop, calibrated) -> None:
    """A check run typed wrong (in tolerance by a slip) is struck: the real check decides.

    ISO 21940-11: U_per = 9549·G·m/n = 9549 · 6.3 · 120 / 1480 ≈ 4878 g·mm, about
    2439 g·mm per bearing for this symmetric rotor: 4000 g·mm in both planes is out,
    a few g·mm is in.
    """
    job = book(db, op, calibrated, shop.rotor_type())
    record_run(db, job, by=op, purpose="initial", speed_rpm=600,
               readings=[(1, 5000.0, 10.0, "g·mm"), (2, 4000.0, 200.0, "g·mm")])
    real = record_run(db, job, by=op, purpose="check", speed_rpm=600,
                      readings=[(1, 4000.0, 10.0, "g·mm"), (2, 4000.0, 10.0, "g·mm")])
    slip = record_run(db, job, by=op, purpose="check", speed_rpm=600,
                      readings=[(1, 4.0, 10.0, "g·mm"), (2, 4.0, 100.0, "g·mm")])
    assert real.within_tolerance is False and slip.within_tolerance is True
    assert evaluate(db, job).in_tolerance
    strike_run(db, job, slip, by=op, reason="decimal point slipped")
    calc = evaluate(db, job)
    assert calc.last_check is not None and calc.last_check.run_id == real.id
    assert not calc.in_tolerance and slip.id not in calc.verdicts
    assert slip.within_tolerance is None  # the shop measures read this column
    with pytest.raises(TransitionRefused):
        mark_in_tolerance(db, job, by=op)


def test_strike_needs_a_reason_is_audited_and_keeps_the_run(db, op, shop, calibrated,
                                                           make_user) -> None:
    job = book(db, op, calibrated, shop.rotor_type())
    run = record_run(db, job, by=op, purpose="initial", speed_rpm=600,
                     readings=[(1, 5000.0, 10.0, "g·mm"), (2, 4000.0, 200.0, "g·mm")])
    with pytest.raises(ValidationFailed) as exc:
        strike_run(db, job, run, by=op, reason="   ")
    assert exc.value.field == "reason"
    for role in ("owner", "admin"):
        with pytest.raises(PermissionDenied):
            strike_run(db, job, run, by=make_user(role), reason="mistake")
    strike_run(db, job, run, by=op, reason="wrong rotor on the machine")
    assert run.struck_by_id == op.id and run.struck_reason == "wrong rotor on the machine"
    assert run in job.run_log and run not in job.runs  # kept in the log, never deleted
    event = db.scalars(select(AuditEvent).where(AuditEvent.entity == "run",
                                                AuditEvent.action == "strike_run")).one()
    assert event.entity_id == run.id and event.after["reason"] == "wrong rotor on the machine"
    with pytest.raises(TransitionRefused, match="already struck"):
        strike_run(db, job, run, by=op, reason="again")


def test_runs_of_a_job_in_tolerance_cannot_be_struck(db, op, shop, calibrated) -> None:
    job = book(db, op, calibrated, shop.rotor_type())
    run = record_run(db, job, by=op, purpose="initial", speed_rpm=600,
                     readings=[(1, 5000.0, 10.0, "g·mm"), (2, 4000.0, 200.0, "g·mm")])
    record_run(db, job, by=op, purpose="check", speed_rpm=600,
               readings=[(1, 40.0, 10.0, "g·mm"), (2, 30.0, 100.0, "g·mm")])
    mark_in_tolerance(db, job, by=op)
    with pytest.raises(TransitionRefused, match="reopen it first"):
        strike_run(db, job, run, by=op, reason="late regret")


def test_database_refuses_striking_a_certified_jobs_run(db, shop, make_user) -> None:
    """The certificate guard triggers (migration 0003) cover the new run columns too."""
    quality = make_user("quality")
    job = shop.job()
    run = Run(job_id=job.id, seq=1, purpose="initial", speed_rpm=600)
    db.add(run)
    pdf = b"%PDF-1.4 test"
    db.add(Certificate(number="C-9001", revision=1, job_id=job.id, state="issued",
                       issued_by_id=quality.id, pdf=pdf,
                       pdf_sha256=hashlib.sha256(pdf).hexdigest(), data_json="{}",
                       data_sha256=hashlib.sha256(b"{}").hexdigest()))
    db.flush()
    with pytest.raises(DBAPIError):
        db.execute(update(Run).where(Run.id == run.id).values(
            struck_at=utcnow(), struck_by_id=quality.id, struck_reason="after the fact"))
    db.rollback()


def test_job_page_shows_a_struck_run_struck_through_with_who_when_why(
        client, login_as, db, shop, calibrated) -> None:
    user = login_as("operator", full_name="Otto Test")
    job = book(db, user, calibrated, shop.rotor_type())
    run = record_run(db, job, by=user, purpose="initial", speed_rpm=600,
                     readings=[(1, 5000.0, 10.0, "g·mm"), (2, 4000.0, 200.0, "g·mm")])
    db.commit()
    resp = client.post(f"/jobs/{job.id}/runs/{run.id}/strike",
                       data={f"strike-{run.id}-reason": ""})
    assert resp.status_code == 422 and "Give the reason" in text(resp)
    assert db.get(Run, run.id).struck_at is None
    resp = client.post(f"/jobs/{job.id}/runs/{run.id}/strike",
                       data={f"strike-{run.id}-reason": "serial mixed up"})
    assert resp.status_code == 302
    body = text(client.get(f"/jobs/{job.id}"))
    row = re.search(r'<tr class="struck" id="run-1">.*?</tr>', body, re.S)
    assert row is not None and "<del>" in row.group(0)
    assert "by Otto Test: serial mixed up" in row.group(0)
    assert re.search(r"struck out \d{4}-\d\d-\d\d \d\d:\d\d", row.group(0))
    # Not judged and no advice from it: the page asks for an initial run again.
    assert "Log an initial run to start." in body


# --------------------------------------------------------------------------- the form


def test_run_form_focus_one_form_for_both_planes_and_one_caution_block(
        client, login_as, db, shop, velocity) -> None:
    user = login_as("operator")
    job = book(db, user, velocity, shop.rotor_type())
    db.commit()
    body = text(client.get(f"/jobs/{job.id}"))
    assert re.search(r'<input[^>]*autofocus[^>]*name="run-amplitude_1"|'
                     r'<input[^>]*name="run-amplitude_1"[^>]*autofocus', body)
    form = re.search(r'<form[^>]*action="/jobs/\d+/runs".*?</form>', body, re.S)
    assert form is not None
    assert all(f'name="run-{n}"' in form.group(0)
               for n in ("amplitude_1", "angle_1_deg", "amplitude_2", "angle_2_deg"))
    # One safety block (was: the speed caution and five trial-mass cautions, then the
    # run form's own); the trial-mass specifics stay beside the suggested trial mass.
    assert body.count(PAGE_CAUTION) == 1
    assert "Never exceed the permitted speed of the rotor" not in body
    assert body.count("a thrown mass is a projectile") == 1
    advice = re.search(r'<div id="trial-advice">.*?</div>', body, re.S)
    assert advice is not None and "projectile" in advice.group(0)


def test_a_correction_cannot_answer_a_struck_run(db, op, shop, calibrated) -> None:
    from shopapp.jobs.corrections import record_correction

    job = book(db, op, calibrated, shop.rotor_type())
    run = record_run(db, job, by=op, purpose="initial", speed_rpm=600,
                     readings=[(1, 5000.0, 10.0, "g·mm"), (2, 4000.0, 200.0, "g·mm")])
    strike_run(db, job, run, by=op, reason="wrong job")
    with pytest.raises(ValidationFailed) as exc:
        record_correction(db, job, by=op, run_id=run.id, plane=1, action="add", mass_g=10.0,
                          angle_deg=190.0, radius_mm=300.0)
    assert exc.value.field == "run_id" and "struck out" in exc.value.message


def test_shop_measures_judge_first_pass_without_the_struck_check(db, op, shop, calibrated,
                                                                 make_user) -> None:
    """README, "Shop measures": first pass is the first check after the first correction.
    A struck check (a slip that read in tolerance) must not be that check: the real one,
    out of tolerance, is — 1 job judged, 0 first-pass (counted by hand)."""
    from shopapp.jobs.corrections import record_correction
    from shopapp.measures.periods import Period
    from shopapp.measures.services import period_figures

    job = book(db, op, calibrated, shop.rotor_type())
    initial = record_run(db, job, by=op, purpose="initial", speed_rpm=600,
                         readings=[(1, 5000.0, 10.0, "g·mm"), (2, 4000.0, 200.0, "g·mm")])
    record_correction(db, job, by=op, run_id=initial.id, plane=1, action="add", mass_g=16.7,
                      angle_deg=190.0, radius_mm=300.0)
    slip = record_run(db, job, by=op, purpose="check", speed_rpm=600,
                      readings=[(1, 4.0, 10.0, "g·mm"), (2, 4.0, 100.0, "g·mm")])
    strike_run(db, job, slip, by=op, reason="readings of another rotor")
    record_run(db, job, by=op, purpose="check", speed_rpm=600,
               readings=[(1, 4000.0, 10.0, "g·mm"), (2, 4000.0, 10.0, "g·mm")])
    record_run(db, job, by=op, purpose="check", speed_rpm=600,
               readings=[(1, 4.0, 10.0, "g·mm"), (2, 4.0, 100.0, "g·mm")])
    mark_in_tolerance(db, job, by=op)
    db.commit()
    today = utcnow().date()
    f = period_figures(db, Period(today, today), by=make_user("owner"), today=today)
    assert f.reached_in_tolerance == 1  # type: ignore[union-attr]
    assert (f.first_pass_judged, f.first_pass_jobs) == (1, 0)  # type: ignore[union-attr]


def test_a_use_case_refusal_goes_beside_the_prefixed_field(client, login_as, db, shop,
                                                           calibrated) -> None:
    """Walk finding: the run form's fields are prefixed ("run-speed_rpm"), the use-case
    names "speed_rpm"; the refusal was shown above the page as "speed rpm: …"."""
    import re

    user = login_as("operator")
    job = book(db, user, calibrated, shop.rotor_type())
    db.commit()
    resp = client.post(f"/jobs/{job.id}/runs", data={
        "run-purpose": "initial", "run-speed_rpm": "-5", "run-unit": "g·mm",
        "run-amplitude_1": "300", "run-angle_1_deg": "10",
        "run-amplitude_2": "10", "run-angle_2_deg": "0"})
    body = resp.get_data(as_text=True)
    assert resp.status_code == 422
    assert "speed rpm:" not in body
    beside = re.search(r'<div class="field has-error">\s*<label for="run-speed_rpm".*?</div>',
                       body, re.S)
    assert beside is not None and 'class="error"' in beside.group(0)
    assert _rows(db, job) == 0


def test_a_trial_mass_far_past_the_usual_force_is_cautioned(client, login_as, db, shop,
                                                             calibrated) -> None:
    """A walk logged 50 000 g on a small rotor with only "Run 2 (trial) logged"."""
    user = login_as("operator")
    rt = shop.rotor_type()
    job = book(db, user, calibrated, rt)
    db.commit()
    base = {"run-speed_rpm": "600", "run-unit": "g·mm", "run-amplitude_1": "300",
            "run-angle_1_deg": "10", "run-amplitude_2": "10", "run-angle_2_deg": "0"}
    assert client.post(f"/jobs/{job.id}/runs",
                       data={**base, "run-purpose": "initial"}).status_code == 302
    # By hand (common practice, no source: a trial mass pulls about 10 % of the static load
    # per plane): F = m·r·Ω², Ω = 2π·600/60; load = M/planes · 9.80665 N.
    omega = 2 * math.pi * 600 / 60
    load_n = rt.mass_kg / rt.planes * 9.80665
    usual_g = 0.10 * load_n / (0.100 * omega**2) * 1000  # at 100 mm
    for mass_g, cautioned in ((usual_g, False), (usual_g * 50, True)):
        resp = client.post(f"/jobs/{job.id}/runs", data={
            **base, "run-purpose": "trial", "run-trial_plane": "1",
            "run-trial_mass_g": f"{mass_g:.4f}", "run-trial_angle_deg": "0",
            "run-trial_radius_mm": "100"}, follow_redirects=True)
        body = text(resp)
        assert resp.status_code == 200 and "(trial) logged" in body
        assert ("Check the trial mass of run" in body) is cautioned
        if cautioned:
            assert "a thrown mass is a projectile" in body and "static load per plane" in body
            # both forces in one unit, the figures from the formulas above
            force_n = mass_g / 1000 * 0.100 * omega**2
            unit, scale = ("kN", 1000) if max(force_n, load_n) >= 1000 else ("N", 1)
            shown = re.search(r"pulls ([\d.]+) (k?N), \d+ % of the ([\d.]+) (k?N) static", body)
            assert shown and shown.group(2) == shown.group(4) == unit
            assert float(shown.group(1)) == pytest.approx(force_n / scale, rel=5e-3)
            assert float(shown.group(3)) == pytest.approx(load_n / scale, rel=5e-3)


# --------------------------------------------------------------------------- first run


@pytest.mark.parametrize("purpose", ["trial", "check", "final"])
def test_a_job_starts_with_its_initial_run(db, op, shop, calibrated, purpose) -> None:
    """Walk finding: a check (or trial) run was accepted as a job's first run. A trial run's
    effect and a correction's result are measured against the reading as received
    (common practice, no source), so the initial run comes first; the refusal names the
    purpose field and nothing is written (the job stays booked in)."""
    job = book(db, op, calibrated, shop.rotor_type())
    trial = (1, 10.0, 0.0, 100.0) if purpose == "trial" else None
    with pytest.raises(ValidationFailed) as exc:
        record_run(db, job, by=op, purpose=purpose, speed_rpm=600,
                   readings=[(1, 30.0, 10.0, "g·mm"), (2, 10.0, 0.0, "g·mm")], trial=trial)
    assert exc.value.field == "purpose" and "initial run" in str(exc.value)
    db.rollback()
    job = db.get(Job, job.id)
    assert _rows(db, job) == 0 and job.state == "booked_in"


def test_a_struck_initial_run_does_not_count_as_the_first(db, op, shop, calibrated) -> None:
    """A struck-out initial run counts for nothing: a check run still needs a live one."""
    job = book(db, op, calibrated, shop.rotor_type())
    first = record_run(db, job, by=op, purpose="initial", speed_rpm=600,
                       readings=[(1, 300.0, 10.0, "g·mm"), (2, 100.0, 0.0, "g·mm")])
    strike_run(db, job, first, by=op, reason="typed on the wrong job")
    db.commit()
    with pytest.raises(ValidationFailed) as exc:
        record_run(db, job, by=op, purpose="check", speed_rpm=600,
                   readings=[(1, 3.0, 10.0, "g·mm"), (2, 1.0, 0.0, "g·mm")])
    assert exc.value.field == "purpose"
    db.rollback()
    job = db.get(Job, job.id)
    record_run(db, job, by=op, purpose="initial", speed_rpm=600,
               readings=[(1, 300.0, 10.0, "g·mm"), (2, 100.0, 0.0, "g·mm")])
    run = record_run(db, job, by=op, purpose="check", speed_rpm=600,
                     readings=[(1, 3.0, 10.0, "g·mm"), (2, 1.0, 0.0, "g·mm")])
    assert run.seq == 3


def test_a_check_run_first_is_refused_beside_the_purpose_field(client, login_as, db, shop,
                                                               calibrated) -> None:
    user = login_as("operator")
    job = book(db, user, calibrated, shop.rotor_type())
    resp = client.post(f"/jobs/{job.id}/runs", data={
        "run-purpose": "check", "run-speed_rpm": "600", "run-unit": "g·mm",
        "run-amplitude_1": "30", "run-angle_1_deg": "10",
        "run-amplitude_2": "10", "run-angle_2_deg": "0"})
    body = resp.get_data(as_text=True)
    assert resp.status_code == 422
    beside = re.search(r'<div class="field has-error">\s*<label for="run-purpose".*?</div>',
                       body, re.S)
    assert beside is not None
    assert "Purpose cannot be check before the job's initial run" in html.unescape(
        beside.group(0))
    assert _rows(db, job) == 0

"""job_calc: tolerances per plane, unit conversion by coefficients, advice, warnings.

Each check names its outside source; the core's own functions are called only
to compare against what the bridge shows, never as the expected value of a formula.
"""

from __future__ import annotations

import cmath
import math
from typing import Any

import numpy as np
import pytest

from shopapp.balancing import influence
from shopapp.jobs import calc as job_calc
from shopapp.jobs.advice import prediction_error_pct
from shopapp.jobs.intake import ToleranceSpec, book_in
from shopapp.jobs.queries import evaluate
from shopapp.jobs.runs import record_run


def _p(amplitude: float, angle_deg: float) -> complex:
    return cmath.rect(amplitude, math.radians(angle_deg))


@pytest.fixture()
def op(make_user):  # type: ignore[no-untyped-def]
    return make_user("operator")


@pytest.fixture()
def machine(shop):  # type: ignore[no-untyped-def]
    """A calibrated machine: its readings are g·mm of unbalance."""
    return shop.machine(min_speed_rpm=100.0, max_speed_rpm=4000.0)


@pytest.fixture()
def um_machine(shop):  # type: ignore[no-untyped-def]
    """A machine reading vibration displacement in µm."""
    return shop.machine(min_speed_rpm=100.0, max_speed_rpm=4000.0, reading_unit="um")


@pytest.fixture()
def mms_machine(shop):  # type: ignore[no-untyped-def]
    """A machine reading vibration velocity in mm/s."""
    return shop.machine(min_speed_rpm=100.0, max_speed_rpm=4000.0, reading_unit="mm/s")


def book(db: Any, op: Any, rt: Any, machine: Any, spec: ToleranceSpec, **kw: Any) -> Any:
    return book_in(db, by=op, customer=rt.customer_id, serial_number=kw.pop("serial", "S-1"),
                   rotor_type_id=rt.id, balancing_speed_rpm=kw.pop("bal", 600.0),
                   machine_id=machine.id, tolerance=spec, **kw)


def single_plane_type(shop: Any, **kw: Any) -> Any:
    values = {"mass_kg": 40.0, "service_speed_rpm": 1500.0, "bearing_a_mm": 0.0,
              "bearing_b_mm": 400.0, "centre_of_mass_mm": 200.0, "plane_1_mm": 200.0,
              "plane_2_mm": None, "radius_2_mm": None, "method_2": None, "radius_1_mm": 250.0}
    values.update(kw)
    return shop.rotor_type(**values)


# --------------------------------------------------------------------------- tolerance


def test_iso_grade_single_plane_is_the_whole_u_per(db, op, shop, machine) -> None:
    rt = single_plane_type(shop)
    job = book(db, op, rt, machine, ToleranceSpec("grade", grade=6.3))
    tol = job_calc.job_tolerance(job, rt)
    # ISO 21940-11: U_per ≈ 9549·G·m/n = 9549.3 · 6.3 · 40 / 1500 = 1604.3 g·mm.
    assert tol.plane_limits_gmm[0] == pytest.approx(9549.297 * 6.3 * 40 / 1500, rel=1e-6)
    assert tol.plane_limits_gmm[0] == pytest.approx(1604.3, abs=0.1)


def test_iso_grade_two_plane_is_allocated_by_the_centre_of_mass(db, op, shop, machine) -> None:
    # Centre of mass at 300 mm between bearings at 0 and 800: A gets L_B/L = 500/800.
    rt = shop.rotor_type(centre_of_mass_mm=300.0, plane_1_mm=0.0, plane_2_mm=800.0)
    job = book(db, op, rt, machine, ToleranceSpec("grade", grade=2.5))
    tol = job_calc.job_tolerance(job, rt)
    u_per = 1000 * 2.5 * 120 / (2 * math.pi * 1480 / 60)  # ISO 21940-11, exact Ω
    assert tol.u_per_gmm == pytest.approx(u_per)
    assert tol.bearing_limits_gmm == pytest.approx((u_per * 500 / 800, u_per * 300 / 800))
    # Correction planes at the bearings: the same limits (no transfer needed).
    assert tol.plane_limits_gmm == pytest.approx(tol.bearing_limits_gmm)
    assert tol.reference == "bearing_planes"


def test_four_w_over_n_per_plane(db, op, shop, machine) -> None:
    rt = shop.rotor_type(service_speed_rpm=3000.0)
    job = book(db, op, rt, machine, ToleranceSpec("4w/n", journal_load_a_kg=60.0,
                                                  journal_load_b_kg=45.0),
          service_speed_rpm=3000.0)
    tol = job_calc.job_tolerance(job, rt)
    # API-style 4W/N oz·in with W in lb: 60 kg = 132.277 lb → 4·132.277/3000 = 0.176370 oz·in
    # = 127.0 g·mm (1 oz·in = 720.078 g·mm, 1959 yard and pound agreement).
    assert tol.plane_limits_gmm[0] == pytest.approx(4 * (60 / 0.45359237) / 3000 * 720.077887375)
    assert tol.plane_limits_gmm[0] == pytest.approx(127.0, abs=0.05)
    assert tol.plane_limits_gmm[1] == pytest.approx(6350 * 45 / 3000, rel=1e-4)


def test_explicit_limits_per_plane(db, op, shop, machine) -> None:
    rt = shop.rotor_type()
    job = book(db, op, rt, machine, ToleranceSpec("explicit", plane_1_gmm=400.0,
                                                  plane_2_gmm=250.0))
    tol = job_calc.job_tolerance(job, rt)
    assert tol.plane_limits_gmm == (400.0, 250.0) and tol.reference == "correction_planes"


# --------------------------------------------------------------------------- single plane


def test_single_plane_with_trial_at_another_radius(db, op, shop, um_machine) -> None:
    rt = single_plane_type(shop)
    job = book(db, op, rt, um_machine, ToleranceSpec("grade", grade=6.3))
    h = _p(0.08, -40)  # µm per gram at R = 250 mm (hidden)
    u = _p(15.0, 130)  # hidden unbalance, grams at R
    v0 = h * u
    # Trial 20 g at 125 mm = 10 g at 250 mm (U = m·r).
    v1 = h * (u + _p(10.0, 0.0))
    record_run(db, job, by=op, purpose="initial", speed_rpm=600,
               readings=[(1, abs(v0), math.degrees(cmath.phase(v0)), "um")])
    record_run(db, job, by=op, purpose="trial", speed_rpm=600,
               readings=[(1, abs(v1), math.degrees(cmath.phase(v1)), "um")],
               trial=(1, 20.0, 0.0, 125.0))
    calc = evaluate(db, job)
    assert calc.advice is not None
    a = calc.advice.planes[0]
    # Textbook single-plane method: W = −V0 / ((V1 − V0)/T) with T = 10 g at R.
    w = -v0 / ((v1 - v0) / 10.0)
    assert a.mass_g == pytest.approx(abs(w)) and a.mass_g == pytest.approx(15.0)
    assert a.angle_deg == pytest.approx((130 + 180) % 360)
    # The core's own single-plane routine gives the same for the same data.
    core = influence.single_plane(v0, 10.0, 0.0, v1)
    assert a.mass_g == pytest.approx(core.correction_mass_g)
    # µm readings are turned into unbalance: U = V/H, 15 g · 250 mm = 3750 g·mm.
    initial = calc.verdicts[job.runs[0].id]
    assert initial.judged and initial.rows[0].residual_gmm == pytest.approx(3750.0)


def test_removal_advice_is_opposite_and_gives_a_drill_depth(db, op, shop, machine) -> None:
    rt = single_plane_type(shop, method_1="remove", density_g_cm3=7.85)
    job = book(db, op, rt, machine, ToleranceSpec("grade", grade=6.3))
    # Calibrated machine: the reading is the unbalance, 2000 g·mm at 40°.
    record_run(db, job, by=op, purpose="initial", speed_rpm=600,
               readings=[(1, 2000.0, 40.0, "g·mm")])
    calc = evaluate(db, job, drill_diameter_mm=10.0)
    assert calc.advice is not None and calc.advice.source == "calibrated"
    a = calc.advice.planes[0]
    # Add 8 g at 220°, i.e. remove 8 g at the heavy spot 40° (removal = addition + 180°).
    assert a.action == "remove" and a.mass_g == pytest.approx(2000 / 250)
    assert a.angle_deg == pytest.approx(40.0) and a.add_angle_deg == pytest.approx(220.0)
    # Elementary geometry: cylinder + 118° cone point (c = (d/2)/tan 59°), steel 7.85 g/cm³.
    c = 5.0 / math.tan(math.radians(59.0))
    volume = 8.0 / 7.85 * 1000.0
    depth = (volume - math.pi * 100 / 4 * c / 3) / (math.pi * 100 / 4) + c
    assert a.drill[0].depth_to_tip_mm == pytest.approx(depth)
    assert any("stress raiser" in x for x in calc.advice.cautions)


def test_fixed_positions_split_by_the_law_of_sines(db, op, shop, machine) -> None:
    rt = single_plane_type(shop, positions_1=6, first_position_1_deg=0.0)
    job = book(db, op, rt, machine, ToleranceSpec("grade", grade=6.3))
    record_run(db, job, by=op, purpose="initial", speed_rpm=600,
               readings=[(1, 2500.0, 200.0, "g·mm")])  # correction 10 g at 20°
    a = evaluate(db, job).advice.planes[0]  # type: ignore[union-attr]
    assert [p.position for p in a.split] == [1, 2]
    # Between blades at 0° and 60°: m0 = m·sin(40°)/sin(60°), m60 = m·sin(20°)/sin(60°).
    s60 = math.sin(math.radians(60))
    assert a.split[0].mass_g == pytest.approx(10 * math.sin(math.radians(40)) / s60)
    assert a.split[1].mass_g == pytest.approx(10 * math.sin(math.radians(20)) / s60)
    total = sum(_p(p.mass_g, p.angle_deg) for p in a.split)
    assert total == pytest.approx(_p(10.0, 20.0))


# --------------------------------------------------------------------------- two planes


A = np.array([[_p(0.05, -30), _p(0.018, 40)], [_p(0.015, 60), _p(0.045, -20)]])
U = np.array([_p(20.0, 70), _p(12.0, 200)])


def reads(v: np.ndarray, unit: str = "mm/s") -> list[tuple[int, float, float, str]]:
    return [(i + 1, abs(z), math.degrees(cmath.phase(z)), unit) for i, z in enumerate(v)]


def test_two_plane_trial_masses_left_on(db, op, shop, mms_machine) -> None:
    rt = shop.rotor_type()
    job = book(db, op, rt, mms_machine, ToleranceSpec("grade", grade=6.3))
    t1, t2 = np.array([_p(25.0, 45), 0]), np.array([0, _p(25.0, 300)])
    record_run(db, job, by=op, purpose="initial", speed_rpm=600, readings=reads(A @ U))
    record_run(db, job, by=op, purpose="trial", speed_rpm=600, readings=reads(A @ (U + t1)),
               trial=(1, 25.0, 45.0, 300.0))
    record_run(db, job, by=op, purpose="trial", speed_rpm=600,
               readings=reads(A @ (U + t1 + t2)), trial=(2, 25.0, 300.0, 300.0),
               earlier_trial_left_on=True)
    calc = evaluate(db, job)
    assert calc.coefficients is not None and calc.coefficients.procedure == "left_on"
    np.testing.assert_allclose(calc.coefficients.matrix, A, rtol=1e-9)
    w = np.array([_p(a.mass_g, a.add_angle_deg) for a in calc.advice.planes])  # type: ignore[union-attr]
    np.testing.assert_allclose(w, -U, rtol=1e-9)  # W = −A⁻¹·V0 = −U
    # Cross-check: scipy's independent linear solver on the same system.
    from scipy import linalg

    np.testing.assert_allclose(w, linalg.solve(A, -(A @ U)), rtol=1e-9)


def test_check_run_in_mm_s_is_judged_through_the_coefficients(db, op, shop, mms_machine) -> None:
    rt = shop.rotor_type(centre_of_mass_mm=400.0, plane_1_mm=0.0, plane_2_mm=800.0)
    job = book(db, op, rt, mms_machine, ToleranceSpec("explicit", plane_1_gmm=600.0,
                                                  plane_2_gmm=600.0))
    record_run(db, job, by=op, purpose="initial", speed_rpm=600, readings=reads(A @ U))
    record_run(db, job, by=op, purpose="trial", speed_rpm=600,
               readings=reads(A @ (U + np.array([30, 0]))), trial=(1, 30, 0, 300))
    record_run(db, job, by=op, purpose="trial", speed_rpm=600,
               readings=reads(A @ (U + np.array([0, 30]))), trial=(2, 30, 0, 300))
    left = np.array([_p(1.5, 10), _p(2.5, 100)])  # grams at 300 mm: 450 and 750 g·mm
    run = record_run(db, job, by=op, purpose="check", speed_rpm=600, readings=reads(A @ left))
    v = evaluate(db, job).verdicts[run.id]
    assert [r.residual_gmm for r in v.rows] == pytest.approx([450.0, 750.0])
    assert [r.pct for r in v.rows] == pytest.approx([75.0, 125.0])
    assert [r.passed for r in v.rows] == [True, False] and v.passed is False
    assert run.within_tolerance is False


def test_readings_in_um_without_coefficients_are_not_judged(db, op, shop, um_machine) -> None:
    rt = shop.rotor_type()
    job = book(db, op, rt, um_machine, ToleranceSpec("grade", grade=6.3))
    record_run(db, job, by=op, purpose="initial", speed_rpm=600,
               readings=[(1, 20.0, 0.0, "um"), (2, 10.0, 0.0, "um")])
    run = record_run(db, job, by=op, purpose="check", speed_rpm=600,
                     readings=[(1, 2.0, 0.0, "um"), (2, 1.0, 0.0, "um")])
    calc = evaluate(db, job)
    assert not calc.verdicts[run.id].judged and "influence coefficients" in calc.verdicts[
        run.id].message
    assert run.within_tolerance is None and not calc.in_tolerance
    assert "trial run" in calc.advice_note
    # Trial-mass advice with its safety cautions (force ≈ 10 % of the static load, common
    # practice): m = 0.1 · (120/2) kg · 9.80665 / (0.3 m · Ω²) at 600 rpm.
    omega = 2 * math.pi * 600 / 60
    assert calc.trial_advice[0].mass_g == pytest.approx(0.1 * 60 * 9.80665 / (0.3 * omega**2)
                                                        * 1000)
    assert any("projectile" in c for c in calc.trial_cautions)


def test_small_trial_effect_is_warned(db, op, shop, um_machine) -> None:
    rt = single_plane_type(shop)
    job = book(db, op, rt, um_machine, ToleranceSpec("grade", grade=6.3))
    record_run(db, job, by=op, purpose="initial", speed_rpm=600,
               readings=[(1, 10.0, 0.0, "um")])
    record_run(db, job, by=op, purpose="trial", speed_rpm=600,
               readings=[(1, 10.5, 3.0, "um")], trial=(1, 1.0, 0.0, 250.0))
    calc = evaluate(db, job)
    assert calc.advice is not None
    assert any("30 %" in w for w in calc.advice.warnings)


# --------------------------------------------------------------------------- warnings


def test_flexible_rotor_and_soft_bearing_speed_are_warned(db, op, shop) -> None:
    soft = shop.machine(bearing_kind="soft", suspension_resonance_rpm=300.0, min_speed_rpm=100.0)
    rt = shop.rotor_type(first_critical_rpm=1800.0)  # service 1480 rpm = 82 % of critical
    job = book(db, op, rt, soft, ToleranceSpec("grade", grade=6.3), bal=450.0)
    calc = evaluate(db, job)
    text = " ".join(calc.warnings)
    assert "not rigid" in text  # above 70 % of the first critical (common practice)
    assert "1.50× the suspension resonance" in text  # soft-bearing needs ≥ 2× (common practice)


def test_prediction_error_definition() -> None:
    a = np.eye(2, dtype=complex)
    v0 = np.array([3 + 4j, 0j])  # |V0| = 5
    err = prediction_error_pct(a, v0, [-(3 + 4j), 0j], [1 + 0j, 0j])
    assert err == pytest.approx(20.0)  # predicted 0, measured 1: 1/5 = 20 %

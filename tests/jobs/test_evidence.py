"""Residual-unbalance test, arbor, key and balance errors on a job."""

from __future__ import annotations

import cmath
import datetime as dt
import math

import numpy as np
import pytest
from sqlalchemy import select

from shopapp.balancing.tolerance import api_limit_gmm
from shopapp.core.errors import TransitionRefused, ValidationFailed
from shopapp.jobs import evidence as jt
from shopapp.jobs import residual_tests
from shopapp.models import MachineVerification, ResidualTest
from shopapp.traceability import services as tr

LOAD_KG = 60.0
SPEED_RPM = 1480.0
# 4W/N per plane (API-style, 6350·W/N g·mm; docs/architecture.md, "Computations")
# for the factory's rotor.
LIMIT = 6350.0 * LOAD_KG / SPEED_RPM


@pytest.fixture()
def operator(make_user):  # type: ignore[no-untyped-def]
    return make_user("operator")


@pytest.fixture()
def quality(make_user):  # type: ignore[no-untyped-def]
    return make_user("quality")


@pytest.fixture()
def job(shop):  # type: ignore[no-untyped-def]
    m = shop.machine()
    return shop.job(state="on_machine", machine=m, tolerance_method="4w/n",
                    tolerance_grade=None, journal_load_a_kg=LOAD_KG, journal_load_b_kg=LOAD_KG,
                    residual_test_required=True, service_speed_rpm=SPEED_RPM)


def test_the_limit_used_is_the_api_style_one() -> None:
    assert api_limit_gmm(LOAD_KG, SPEED_RPM) == pytest.approx(LIMIT)


def test_residual_test_default_at_intake(shop) -> None:  # type: ignore[no-untyped-def]
    plain = shop.customer()
    asks = shop.customer(requires_residual_test=True)
    assert residual_tests.default_residual_test_required(plain, "grade") is False
    assert residual_tests.default_residual_test_required(plain, "4w/n") is True
    assert residual_tests.default_residual_test_required(asks, "grade") is True


def test_suggested_test_mass_is_one_to_two_limits(job) -> None:  # type: ignore[no-untyped-def]
    adv = residual_tests.suggested_test_masses(job)[0]
    # m = k·U/r, r = 300 mm (factory rotor type); common practice 1–2 × the limit.
    assert adv.low_g == pytest.approx(LIMIT / 300.0)
    assert adv.high_g == pytest.approx(2 * LIMIT / 300.0)
    assert adv.suggested_g == pytest.approx(adv.high_g)


# Simulation (marked as such): a linear machine reading µm, S = 0.004 µm per g·mm at −30°,
# residual 100 g·mm at 40° in the plane, test mass 2 × the limit at 300 mm.
S = 0.004 * cmath.exp(-1j * math.radians(30.0))
T_MASS_G = 2 * LIMIT / 300.0


def _readings(n: int, residual=100.0, angle=40.0, noise=0.0, seed=1):  # type: ignore[no-untyped-def]
    theta = np.radians(np.arange(n) * 360.0 / n)
    z = S * (cmath.rect(residual, math.radians(angle)) + T_MASS_G * 300.0 * np.exp(1j * theta))
    if noise:
        rng = np.random.default_rng(seed)
        z = z + noise * abs(S) * T_MASS_G * 300.0 * (rng.normal(size=n) + 1j * rng.normal(size=n))
    return [float(a) for a in np.abs(z)], [float(g) % 360 for g in np.degrees(np.angle(z))]


def _record(db, job, by, amps, angs, rep_amp=None, rep_ang=None, n=8, plane=1):  # type: ignore[no-untyped-def]
    return residual_tests.record_residual_test(
        db, job, by=by, plane=plane, test_mass_g=T_MASS_G, positions=n, amplitudes=amps,
        angles_deg=angs, repeat_amplitude=amps[0] if rep_amp is None else rep_amp,
        repeat_angle_deg=(angs[0] if angs else None) if rep_ang is None else rep_ang, unit="um")


@pytest.mark.parametrize("n", [6, 8, 12])
def test_clean_readings_give_the_simulated_residual(db, job, operator, n) -> None:  # type: ignore[no-untyped-def]
    amps, angs = _readings(n)
    t = _record(db, job, operator, amps, angs, n=n)
    assert t.valid and t.invalid_reason == ""
    assert t.method == "phase"
    assert t.residual_gmm == pytest.approx(100.0, rel=1e-9)
    assert t.residual_angle_deg == pytest.approx(40.0, abs=1e-7)
    assert t.permissible_gmm == pytest.approx(LIMIT)
    assert t.within_tolerance is True


def test_amplitude_only_readings_give_the_simulated_residual(db, job, operator) -> None:  # type: ignore[no-untyped-def]
    amps, _ = _readings(12)
    t = _record(db, job, operator, amps, None, n=12)
    assert t.valid and t.method == "amplitude"
    assert t.residual_gmm == pytest.approx(100.0, rel=1e-8)


def test_noisy_readings_land_near_the_residual(db, job, operator) -> None:  # type: ignore[no-untyped-def]
    # 2 % noise (of the circle radius) per component: the fit stays valid and close.
    amps, angs = _readings(12, noise=0.02, seed=7)
    t = _record(db, job, operator, amps, angs, n=12)
    assert t.valid
    assert t.residual_gmm == pytest.approx(100.0, abs=0.05 * T_MASS_G * 300.0)
    assert 0.0 < t.fit_rms_relative < 0.1


def test_non_circular_points_make_the_test_invalid(db, job, operator) -> None:  # type: ignore[no-untyped-def]
    amps, angs = _readings(8)
    amps = [a * (1.0 + (0.6 if k % 2 else -0.5)) for k, a in enumerate(amps)]
    t = _record(db, job, operator, amps, angs)
    assert t.valid is False
    assert "do not describe a circle" in t.invalid_reason
    assert t.residual_gmm is None


def test_a_repeat_of_position_one_that_disagrees_makes_the_test_invalid(db, job, operator) -> None:  # type: ignore[no-untyped-def]
    amps, angs = _readings(8)
    radius = abs(S) * T_MASS_G * 300.0
    t = _record(db, job, operator, amps, angs, rep_amp=amps[0] + 0.15 * radius)
    assert t.valid is False
    assert "repeat of position 1" in t.invalid_reason and "limit 10 %" in t.invalid_reason
    ok = _record(db, job, operator, amps, angs, rep_amp=amps[0] + 0.05 * radius)
    assert ok.valid


def test_bad_input_saves_nothing(db, job, operator) -> None:  # type: ignore[no-untyped-def]
    amps, angs = _readings(8)
    with pytest.raises(ValidationFailed) as exc:
        _record(db, job, operator, amps[:-1], angs[:-1], n=8)
    assert exc.value.field == "readings"
    with pytest.raises(ValidationFailed) as exc:
        _record(db, job, operator, amps, [*angs[:-1], None], n=8)
    assert exc.value.field == "angles"
    with pytest.raises(ValidationFailed) as exc:
        _record(db, job, operator, amps, angs, n=7)
    assert exc.value.field == "positions"
    assert db.scalar(select(ResidualTest).where(ResidualTest.job_id == job.id)) is None


def test_certification_needs_a_valid_test_in_every_plane(db, job, operator) -> None:  # type: ignore[no-untyped-def]
    with pytest.raises(TransitionRefused) as exc:
        residual_tests.require_residual_test_ok(db, job)
    assert "plane 1 has no residual-unbalance test" in exc.value.message
    amps, angs = _readings(8)
    _record(db, job, operator, amps, angs)
    bad = [a * (1.0 + (0.6 if k % 2 else -0.5)) for k, a in enumerate(amps)]
    _record(db, job, operator, bad, angs, plane=2)
    with pytest.raises(TransitionRefused) as exc:
        residual_tests.require_residual_test_ok(db, job)
    assert "plane 2's latest residual test is invalid" in exc.value.message
    _record(db, job, operator, amps, angs, plane=2)
    assert residual_tests.require_residual_test_ok(db, job).ok


def test_a_test_over_the_limit_blocks_too(db, job, operator) -> None:  # type: ignore[no-untyped-def]
    for plane in (1, 2):
        amps, angs = _readings(8, residual=1.2 * LIMIT)
        _record(db, job, operator, amps, angs, plane=plane)
    with pytest.raises(TransitionRefused) as exc:
        residual_tests.require_residual_test_ok(db, job)
    assert "above the limit" in exc.value.message


def test_only_quality_may_drop_a_required_test(db, job, operator, quality) -> None:  # type: ignore[no-untyped-def]
    with pytest.raises(ValidationFailed):
        residual_tests.set_residual_test_required(db, job, by=operator, required=False)
    residual_tests.set_residual_test_required(db, job, by=quality, required=False)
    assert job.residual_test_required is False
    assert residual_tests.require_residual_test_ok(db, job).ok


def test_residual_test_plot_has_the_points_and_the_circle(db, job, operator) -> None:  # type: ignore[no-untyped-def]
    amps, angs = _readings(8)
    fig = residual_tests.residual_test_figure(_record(db, job, operator, amps, angs))
    titles = [getattr(i, "title", None) for i in fig.items]
    assert "fitted circle" in titles
    assert sum(1 for t in titles if t and t.startswith("position ")) == 8


# --------------------------------------------------------------------------- arbor on a job


def test_job_subtracts_its_arbors_error(db, job, quality, operator) -> None:  # type: ignore[no-untyped-def]
    arbor = tr.create_arbor(db, by=quality, name="Arbor J")
    jt.set_job_arbor(db, job, by=operator, arbor=arbor)
    m = tr.record_arbor_error(db, arbor, by=operator, measured_on=dt.date(2026, 11, 2),
                              first_run=[(20.0, 0.0), (10.0, 90.0)],
                              second_run=[(10.0, 0.0), (4.0, 90.0)], job=job)
    # Hand computation: U_a = (V1 + V2)/2 = 15∠0 and 7∠90.
    assert m.error_1_gmm == pytest.approx(15.0) and m.error_2_gmm == pytest.approx(7.0)
    assert jt.arbor_error_gmm(db, job) is None
    jt.set_arbor_subtraction(db, job, by=operator, measurement=m)
    err = jt.arbor_error_gmm(db, job)
    assert err is not None
    fixed = jt.corrected_readings((20 + 0j, 10j), "g·mm", err)
    assert fixed[0] == pytest.approx(5 + 0j) and fixed[1] == pytest.approx(3j)
    assert jt.corrected_readings((20 + 0j, 10j), "um", err) == (20 + 0j, 10j)
    # Another arbor drops the subtraction.
    other = tr.create_arbor(db, by=quality, name="Arbor K")
    jt.set_job_arbor(db, job, by=operator, arbor=other)
    assert jt.arbor_error_gmm(db, job) is None
    with pytest.raises(ValidationFailed):
        jt.set_arbor_subtraction(db, job, by=operator, measurement=m)


# --------------------------------------------------------------------------- balance errors


def test_balance_errors_on_a_job(db, shop, job, quality, operator) -> None:  # type: ignore[no-untyped-def]
    arbor = tr.create_arbor(db, by=quality, name="Arbor E")
    jt.set_job_arbor(db, job, by=operator, arbor=arbor)
    tr.record_arbor_error(db, arbor, by=operator, measured_on=dt.date(2026, 11, 2),
                          first_run=[(52.0, 0.0), (6.0, 0.0)], second_run=[(48.0, 0.0), (2.0, 0.0)])
    # Hand computation: arbor error (52 + 48)/2 = 50 and (6 + 2)/2 = 4 g·mm (not subtracted).
    runs = [[(30.0, 0.0), (20.0, 90.0)], [(32.0, 0.0), (20.0, 90.0)],
            [(31.0, 0.0), (23.0, 90.0)]]
    est = jt.record_error_estimate(db, job, by=operator, runs=runs)
    # Plane 1 readings 30, 32, 31 → mean 31, scatter radius 1; plane 2: 20i, 20i, 23i →
    # mean 21i, radius 2. ΔU = 1 + 50 and 2 + 4.
    assert est.random_1_gmm == pytest.approx(1.0)
    assert est.random_2_gmm == pytest.approx(2.0)
    assert est.delta_u_1_gmm == pytest.approx(51.0)
    assert est.delta_u_2_gmm == pytest.approx(6.0)
    j = jt.judge_errors(job, est, ((LIMIT - 40.0, 50.0), "run 4"))
    assert j is not None
    assert j.verdicts[0].passed is False  # 51 > 10 %: within the limit, not limit − ΔU
    assert j.verdicts[0].effective_limit_gmm == pytest.approx(LIMIT - 51.0)
    assert j.verdicts[1].passed and j.verdicts[1].negligible  # 6 g·mm < 10 % of ~257
    with pytest.raises(ValidationFailed) as exc:
        jt.record_error_estimate(db, job, by=operator, runs=runs[:2])
    assert exc.value.field == "runs"


def test_certificate_gate_refuses_an_overdue_machine(db, shop, job, operator) -> None:  # type: ignore[no-untyped-def]
    job.machine.verification_interval_days = 30
    db.add(MachineVerification(machine_id=job.machine.id, performed_on=dt.date(2026, 9, 1),
                               proving_rotor="PR", passed=True, readings={}))
    db.flush()
    with pytest.raises(tr.MachineNotCurrent) as exc:
        jt.check_certifiable(db, job, dt.date(2026, 10, 5))
    assert "overdue for its proving test since 2026-10-02" in exc.value.message


def test_the_jobs_calculation_uses_the_subtracted_arbor_error(db, job, quality, operator) -> None:  # type: ignore[no-untyped-def]
    from shopapp.jobs.queries import evaluate
    from shopapp.jobs.runs import record_run

    arbor = tr.create_arbor(db, by=quality, name="Arbor C")
    jt.set_job_arbor(db, job, by=operator, arbor=arbor)
    m = tr.record_arbor_error(db, arbor, by=operator, measured_on=dt.date(2026, 11, 2),
                              first_run=[(20.0, 0.0), (10.0, 90.0)],
                              second_run=[(10.0, 0.0), (4.0, 90.0)])
    record_run(db, job, by=operator, purpose="initial", speed_rpm=600.0,
               readings=[(1, 40.0, 0.0, "g·mm"), (2, 30.0, 90.0, "g·mm")])
    before = evaluate(db, job).verdicts
    jt.set_arbor_subtraction(db, job, by=operator, measurement=m)
    after = evaluate(db, job).verdicts
    (v0,), (v1,) = before.values(), after.values()
    # Hand computation: arbor 15∠0 and 7∠90 off 40∠0 and 30∠90 → 25∠0 and 23∠90.
    assert v0.residual_gmm[0] == pytest.approx(40 + 0j)
    assert v1.residual_gmm[0] == pytest.approx(25 + 0j)
    assert v1.residual_gmm[1] == pytest.approx(23j)


def test_the_rotor_history_uses_the_subtracted_arbor_error_too(db, job, quality, operator) -> None:  # type: ignore[no-untyped-def]
    """The rotor's trend history shows the same initial unbalance as the job page."""
    from shopapp.jobs import rotor_history
    from shopapp.jobs.runs import record_run

    arbor = tr.create_arbor(db, by=quality, name="Arbor H")
    jt.set_job_arbor(db, job, by=operator, arbor=arbor)
    m = tr.record_arbor_error(db, arbor, by=operator, measured_on=dt.date(2026, 11, 2),
                              first_run=[(20.0, 0.0), (10.0, 90.0)],
                              second_run=[(10.0, 0.0), (4.0, 90.0)])
    record_run(db, job, by=operator, purpose="initial", speed_rpm=600.0,
               readings=[(1, 40.0, 0.0, "g·mm"), (2, 30.0, 90.0, "g·mm")])
    jt.set_arbor_subtraction(db, job, by=operator, measurement=m)
    (visit,) = rotor_history.build(db, job.rotor).visits
    # Hand computation: arbor 15∠0 and 7∠90 off 40∠0 and 30∠90 → 25 and 23 g·mm.
    assert visit.initial_gmm[0] == pytest.approx(25.0)
    assert visit.initial_gmm[1] == pytest.approx(23.0)

"""Traceability pages: register, proving test (compute then save), arbors, the job panel and
its steps, the quality manager's home panel, and the overdue-machine refusals."""

from __future__ import annotations

import cmath
import datetime as dt
import html
import math
import re

import numpy as np
import pytest
from sqlalchemy import func, select

from shopapp.core.errors import ValidationFailed
from shopapp.jobs.intake import ToleranceSpec, book_in
from shopapp.jobs.states import mark_in_tolerance
from shopapp.models import (
    Arbor,
    ArborErrorMeasurement,
    BalanceErrorEstimate,
    Job,
    MachineVerification,
    ResidualTest,
)
from shopapp.traceability import arbors, keys, verifications

TODAY = dt.datetime.now(dt.UTC).date()


def _text(resp) -> str:  # type: ignore[no-untyped-def]
    return html.unescape(resp.get_data(as_text=True))


def _plain(resp) -> str:  # type: ignore[no-untyped-def]
    """The page's text without tags, whitespace collapsed."""
    return " ".join(re.sub(r"<[^>]+>", " ", _text(resp)).split())


def _verified(db, machine, day, passed=True):  # type: ignore[no-untyped-def]
    db.add(MachineVerification(machine_id=machine.id, performed_on=day, proving_rotor="PR",
                               passed=passed, readings={}))
    db.commit()


@pytest.fixture()
def proving_rotor(db, make_user):  # type: ignore[no-untyped-def]
    r = verifications.create_proving_rotor(db, by=make_user("quality"), name="PR-web", mass_kg=10.0,
                                           planes=1, radius_1_mm=100.0, positions=8)
    db.commit()
    return r


def test_register_lists_every_machine_with_its_standing(client, login_as, shop, db) -> None:  # type: ignore[no-untyped-def]
    late = shop.machine(name="Late one", verification_interval_days=30)
    _verified(db, late, TODAY - dt.timedelta(days=40))
    login_as("operator")
    page = _text(client.get("/traceability/"))
    assert "Late one" in page
    assert f"overdue since {TODAY - dt.timedelta(days=9)}" in page
    assert "run a proving test" not in page  # operators do not verify machines


def test_proving_rotor_choice_counts_planes_in_words(client, login_as, shop, db,
                                                    proving_rotor) -> None:  # type: ignore[no-untyped-def]
    # Before: "PR-web (10 kg, 1 plane(s), 8 positions)".
    m = shop.machine(name="Bay W")
    db.commit()
    login_as("quality")
    page = _plain(client.get(f"/traceability/machines/{m.id}/proving-test"))
    assert "PR-web (10 kg, 1 plane, 8 positions)" in page
    assert "plane(s)" not in page


def test_proving_test_computes_before_it_saves(client, login_as, shop, db, proving_rotor) -> None:  # type: ignore[no-untyped-def]
    m = shop.machine(name="Bay P", claimed_emar_gmm_per_kg=0.5)  # claim 5 g·mm on 10 kg
    db.commit()
    login_as("quality")
    url = f"/traceability/machines/{m.id}/proving-test"
    assert client.get(url).status_code == 200
    # Simulation (marked as such): a machine reading true with a 1.5 g·mm residual at 90°,
    # test mass 0.6 g at 100 mm moved round 8 positions.
    theta = np.radians(np.arange(8) * 45.0)
    z = cmath.rect(1.5, math.radians(90.0)) + 60.0 * np.exp(1j * theta)
    data = {"performed_on": TODAY.isoformat(), "proving_rotor_id": str(proving_rotor.id),
            "test_mass_g": "0.6", "test_radius_mm": "100", "first_position_deg": "0",
            "claimed_umar": "5"}
    for k, v in enumerate(z):
        data[f"p1_amp-{k}"] = f"{abs(v):.9f}"
        data[f"p1_ang-{k}"] = f"{math.degrees(cmath.phase(v)) % 360:.9f}"
    resp = client.post(url, data={**data, "compute": "Compute"})
    page = _text(resp)
    assert resp.status_code == 200
    assert "PASSED" in page and "1.5" in page
    assert db.scalar(select(func.count()).select_from(MachineVerification)
                     .where(MachineVerification.machine_id == m.id)) == 0
    resp = client.post(url, data={**data, "save": "Save the test"})
    assert resp.status_code == 302
    row = db.scalar(select(MachineVerification).where(MachineVerification.machine_id == m.id))
    assert row is not None and row.passed
    assert row.measured_umar_gmm == pytest.approx(1.5, rel=1e-6)


def _proving_data(rotor_id: int, *, comma: bool = False) -> dict[str, str]:
    """The simulated test above (1.5 g·mm at 90°, 60 g·mm test unbalance round 8 positions),
    typed with a decimal point or, as a person with a comma keyboard types, a comma."""
    theta = np.radians(np.arange(8) * 45.0)
    z = cmath.rect(1.5, math.radians(90.0)) + 60.0 * np.exp(1j * theta)
    data = {"performed_on": TODAY.isoformat(), "proving_rotor_id": str(rotor_id),
            "test_mass_g": "0.6", "test_radius_mm": "100", "first_position_deg": "0",
            "claimed_umar": "5", "compute": "Compute"}
    for k, v in enumerate(z):
        data[f"p1_amp-{k}"] = f"{abs(v):.6f}"
        data[f"p1_ang-{k}"] = f"{math.degrees(cmath.phase(v)) % 360:.6f}"
    if comma:
        data = {k: v.replace(".", ",") if k.startswith(("p1_", "test_")) else v
                for k, v in data.items()}
    return data


def test_proving_test_reads_a_decimal_comma_as_the_other_forms_do(client, login_as, shop, db,  # type: ignore[no-untyped-def]
                                                                  proving_rotor) -> None:
    # Before: "0,6" and "60,01…" were refused ("must be a number") while the run and
    # correction forms read them as 0.6 and 60.01.
    m = shop.machine(claimed_emar_gmm_per_kg=0.5)
    db.commit()
    login_as("quality")
    url = f"/traceability/machines/{m.id}/proving-test"
    data = _proving_data(proving_rotor.id, comma=True)
    assert data["test_mass_g"] == "0,6"
    resp = client.post(url, data=data)
    page = _plain(resp)
    assert resp.status_code == 200, page[:2000]
    assert "PASSED" in page and "must be a number" not in page
    # The same result as typed with a point (the simulation's residual: 1.5 g·mm).
    with_point = _plain(client.post(url, data=_proving_data(proving_rotor.id)))
    assert page[page.index("Computed figures"):] == \
        with_point[with_point.index("Computed figures"):]
    assert "Test unbalance 60.0 g·mm" in page  # 0,6 g × 100 mm, by hand
    assert "1 1.50 5.00 1.00" in page  # U_mar 1.50 g·mm of the 5.00 g·mm claim


@pytest.mark.parametrize(("angle", "wrapped"), [("400", "40"), ("370", "10"), ("-10", "350")])
def test_proving_test_refuses_an_angle_outside_0_to_360(client, login_as, shop, db,  # type: ignore[no-untyped-def]
                                                        proving_rotor, angle, wrapped) -> None:
    # Before: 400 gave a circle-fit message and 370 was wrapped to 10° without a word. The
    # app's angle fields (run, correction) refuse, never wrap: the same here.
    m = shop.machine(claimed_emar_gmm_per_kg=0.5)
    db.commit()
    login_as("quality")
    data = _proving_data(proving_rotor.id)
    data["p1_ang-1"] = angle
    resp = client.post(f"/traceability/machines/{m.id}/proving-test", data=data)
    page = _plain(resp)
    assert resp.status_code == 422
    assert (f"Plane 1, position 2 angle: {angle}° is outside 0–360°: type the angle as shown "
            f"(it is not wrapped to {wrapped}° for you).") in page
    assert page.count("is outside 0–360°") == 1
    assert "PASSED" not in page and "FAILED" not in page


def test_proving_test_bad_reading_is_shown_beside_it(client, login_as, shop, db,  # type: ignore[no-untyped-def]
                                                     proving_rotor) -> None:
    m = shop.machine(claimed_emar_gmm_per_kg=0.5)
    db.commit()
    login_as("quality")
    data = {"performed_on": TODAY.isoformat(), "proving_rotor_id": str(proving_rotor.id),
            "test_mass_g": "0.6", "claimed_umar": "5", "save": "Save"}
    for k in range(8):
        data[f"p1_amp-{k}"] = "60"
    data["p1_amp-3"] = "lots"
    resp = client.post(f"/traceability/machines/{m.id}/proving-test", data=data)
    assert resp.status_code == 422
    assert "Plane 1, position 4 reading: Not a number: 'lots'." in _text(resp)
    assert db.scalar(select(func.count()).select_from(MachineVerification)
                     .where(MachineVerification.machine_id == m.id)) == 0


def test_proving_test_needs_the_quality_role(client, login_as, shop, db) -> None:  # type: ignore[no-untyped-def]
    m = shop.machine()
    db.commit()
    login_as("operator")
    assert client.get(f"/traceability/machines/{m.id}/proving-test").status_code == 403


def test_proving_test_without_csrf_token_is_refused(client, login_as, shop, db,  # type: ignore[no-untyped-def]
                                                    proving_rotor) -> None:
    m = shop.machine()
    db.commit()
    login_as("quality")
    resp = client.post(f"/traceability/machines/{m.id}/proving-test",
                       data={"save": "Save"}, csrf=False)
    assert resp.status_code == 400
    assert db.scalar(select(func.count()).select_from(MachineVerification)
                     .where(MachineVerification.machine_id == m.id)) == 0


def test_quality_home_lists_machines_due_soon(client, login_as, shop, db) -> None:  # type: ignore[no-untyped-def]
    soon = shop.machine(name="Soon machine", verification_interval_days=30)
    _verified(db, soon, TODAY - dt.timedelta(days=25))
    login_as("quality")
    page = _plain(client.get("/"))
    assert "Machine verification" in page
    assert f"Soon machine · due soon · due {TODAY + dt.timedelta(days=5)} (5 days)" in page


def test_arbor_pages_and_index_runs(client, login_as, db) -> None:  # type: ignore[no-untyped-def]
    login_as("quality")
    resp = client.post("/traceability/arbors", data={"name": "Arbor 25", "mass_kg": "4"})
    assert resp.status_code == 302
    arbor = db.scalar(select(Arbor).where(Arbor.name == "Arbor 25"))
    # Hand computation: runs 10∠0 and 6∠0 (turned 180°) → arbor (10 + 6)/2 = 8 g·mm.
    resp = client.post(f"/traceability/arbors/{arbor.id}/measurements", data={
        "measured_on": TODAY.isoformat(), "index_deg": "180", "second_frame": "arbor",
        "first-amp_1": "10", "first-ang_1": "0", "second-amp_1": "6", "second-ang_1": "0"})
    assert resp.status_code == 302
    m = db.scalar(select(ArborErrorMeasurement).where(ArborErrorMeasurement.arbor_id == arbor.id))
    assert m.error_1_gmm == pytest.approx(8.0) and m.planes == 1
    page = _text(client.get(f"/traceability/arbors/{arbor.id}"))
    assert "8.00 g·mm" in page  # g·mm is shown with 3 significant figures (core.display)
    resp = client.post(f"/traceability/arbors/{arbor.id}/measurements", data={
        "measured_on": TODAY.isoformat(), "index_deg": "10", "second_frame": "arbor",
        "first-amp_1": "10", "first-ang_1": "0", "second-amp_1": "6", "second-ang_1": "0"})
    assert resp.status_code == 422
    assert "at least 30°" in _text(resp)


def test_large_figures_are_plain_digits_not_scientific_notation(client, login_as, shop,  # type: ignore[no-untyped-def]
                                                                 db) -> None:
    # docs/architecture.md, "Numbers shown": never scientific notation. A 12 345 g·mm figure
    # printed with "%.4g" or ":.3g" would read "1.234e+04" / "1.23e+04".
    m = shop.machine(name="Big bay", claimed_emar_gmm_per_kg=0.5)
    db.add(MachineVerification(machine_id=m.id, performed_on=TODAY, proving_rotor="PR big",
                               measured_umar_gmm=12345.0, claimed_umar_gmm=23456.0,
                               passed=True, readings={}))
    arbor = Arbor(name="Arbor big")
    db.add(arbor)
    db.flush()
    db.add(ArborErrorMeasurement(arbor_id=arbor.id, measured_on=TODAY, planes=1,
                                 error_1_gmm=12345.0, error_1_angle_deg=0.0, readings={}))
    db.commit()
    login_as("quality")
    pages = [_plain(client.get(url)) for url in (
        f"/traceability/machines/{m.id}", f"/traceability/arbors/{arbor.id}",
        "/traceability/arbors", f"/machines/{m.id}")]
    assert "12345" in pages[0] and "23456" in pages[0]
    assert "12345 g·mm" in pages[1] and "12345 g·mm" in pages[2]
    assert "12345" in pages[3]  # the machine page's verification panel
    for page in pages:
        assert "e+0" not in page and "1.23e" not in page


def test_proving_test_proposes_15_times_the_plane_claim(client, login_as, shop, db,  # type: ignore[no-untyped-def]
                                                        proving_rotor) -> None:
    # Claimed e_mar 0.5 g·mm/kg × 10 kg = 5 g·mm for the one-plane proving rotor; the usual
    # test unbalance is 10–20 × the claim (from memory of the ISO 21940-21 idea), its middle
    # 15 × 5 = 75 g·mm, i.e. 0.75 g at the 100 mm radius (hand calculation).
    m = shop.machine(name="Bay D", claimed_emar_gmm_per_kg=0.5, claimed_urr_pct=90.0)
    db.commit()
    login_as("quality")
    page = _text(client.get(f"/traceability/machines/{m.id}/proving-test"))
    assert 'name="test_mass_g" type="text" value="0.75"' in page
    assert 'name="claimed_umar" type="text" value="5"' in page
    assert 'name="test_radius_mm" type="text" value="100"' in page
    assert 'name="claimed_urr_pct" type="text" value="90"' in page


# --------------------------------------------------------------------------- job panel


@pytest.fixture()
def wn_job(shop, db):  # type: ignore[no-untyped-def]
    m = shop.machine(name="Bay J")
    job = shop.job(state="on_machine", machine=m, tolerance_method="4w/n", tolerance_grade=None,
                   journal_load_a_kg=60.0, journal_load_b_kg=60.0, residual_test_required=True,
                   service_speed_rpm=1480.0, received_on=TODAY)
    db.commit()
    return job


def test_job_page_shows_the_panel(client, login_as, wn_job) -> None:  # type: ignore[no-untyped-def]
    login_as("operator")
    resp = client.get(f"/jobs/{wn_job.id}")
    assert resp.status_code == 200
    page = _text(resp)
    assert 'id="traceability"' in page
    assert "Required" in page and "run the test for plane 1" in page


def test_residual_test_walk_compute_then_save(client, login_as, wn_job, db) -> None:  # type: ignore[no-untyped-def]
    login_as("operator")
    url = f"/traceability/jobs/{wn_job.id}/residual-test?plane=1&positions=8"
    page = _text(client.get(url))
    # API-style 4W/N per plane in g·mm (docs/architecture.md, "Computations")
    limit = 6350.0 * 60.0 / 1480.0
    assert f"{2 * limit / 300.0:.3g} g" in page
    # Simulation: a machine reading g·mm exactly; residual 80 g·mm at 0°, T = 514.9 g·mm.
    t = 2 * limit
    theta = np.radians(np.arange(8) * 45.0)
    z = 80.0 + t * np.exp(1j * theta)
    data = {"plane": "1", "positions": "8", "test_mass_g": f"{t / 300.0:.9f}",
            "test_radius_mm": "300", "unit": "g·mm",
            "repeat_amplitude": f"{abs(z[0]):.9f}",
            "repeat_angle_deg": f"{math.degrees(cmath.phase(z[0])) % 360:.9f}"}
    for k, v in enumerate(z):
        data[f"amp-{k}"] = f"{abs(v):.9f}"
        data[f"ang-{k}"] = f"{math.degrees(cmath.phase(v)) % 360:.9f}"
    resp = client.post(f"/traceability/jobs/{wn_job.id}/residual-test",
                       data={**data, "compute": "Compute"})
    page = _text(resp)
    assert resp.status_code == 200
    assert "<svg" in page and "fitted circle" in page and "within tolerance" in page
    assert db.scalar(select(func.count()).select_from(ResidualTest)) == 0
    resp = client.post(f"/traceability/jobs/{wn_job.id}/residual-test",
                       data={**data, "save": "Save"})
    assert resp.status_code == 302
    row = db.scalar(select(ResidualTest).where(ResidualTest.job_id == wn_job.id))
    assert row.valid and row.residual_gmm == pytest.approx(80.0, rel=1e-6)
    page = _text(client.get(f"/jobs/{wn_job.id}"))
    # Shown with three significant figures (shopapp.core.display, the one formatter).
    assert "Residual 80.0 g·mm" in page


def test_job_arbor_subtraction_and_repeat_runs(client, login_as, wn_job, db) -> None:  # type: ignore[no-untyped-def]
    user = login_as("quality")
    arbor = arbors.create_arbor(db, by=user, name="Arbor W")
    db.commit()
    assert client.post(f"/traceability/jobs/{wn_job.id}/arbor",
                       data={"arbor_id": str(arbor.id)}).status_code == 302
    resp = client.post(f"/traceability/jobs/{wn_job.id}/index-runs", data={
        "ix-measured_on": TODAY.isoformat(), "ix-index_deg": "180", "ix-second_frame": "arbor",
        "ix-first-amp_1": "20", "ix-first-ang_1": "0", "ix-first-amp_2": "10",
        "ix-first-ang_2": "90", "ix-second-amp_1": "10", "ix-second-ang_1": "0",
        "ix-second-amp_2": "4", "ix-second-ang_2": "90"})
    assert resp.status_code == 302
    m = db.scalar(select(ArborErrorMeasurement).where(ArborErrorMeasurement.job_id == wn_job.id))
    assert m.error_1_gmm == pytest.approx(15.0) and m.error_2_gmm == pytest.approx(7.0)
    assert client.post(f"/traceability/jobs/{wn_job.id}/arbor-subtraction",
                       data={"measurement_id": str(m.id)}).status_code == 302
    page = _text(client.get(f"/jobs/{wn_job.id}"))
    assert "Subtracted error of" in page
    runs = {}
    for k, (a1, a2) in enumerate([(30, 20), (32, 20), (31, 23)]):
        runs.update({f"runs-{k}-amp_1": str(a1), f"runs-{k}-ang_1": "0",
                     f"runs-{k}-amp_2": str(a2), f"runs-{k}-ang_2": "90"})
    assert client.post(f"/traceability/jobs/{wn_job.id}/repeat-runs", data=runs
                       ).status_code == 302
    est = db.scalar(select(BalanceErrorEstimate).where(BalanceErrorEstimate.job_id == wn_job.id))
    # Arbor error subtracted → not counted: ΔU is the scatter radius alone (1 and 2 g·mm).
    assert est.delta_u_1_gmm == pytest.approx(1.0) and est.delta_u_2_gmm == pytest.approx(2.0)
    short = {k: v for k, v in runs.items() if k.startswith(("runs-0", "runs-1"))}
    resp = client.post(f"/traceability/jobs/{wn_job.id}/repeat-runs", data=short)
    assert resp.status_code == 422 and "at least 3" in _text(resp)


# A half key 8 × 7 × 50 mm in a 40 mm hub, its centre at 20 mm (the key page's fields).
HALF_KEY_FORM = {"key_convention": "half_key", "key_width_mm": "8", "key_height_mm": "7",
                 "key_length_mm": "50", "hub_length_mm": "40", "key_radius_mm": "20"}


def test_key_page_saves_the_convention(client, login_as, shop, db) -> None:  # type: ignore[no-untyped-def]
    rt = shop.rotor_type(radius_1_mm=100.0, radius_2_mm=100.0)
    db.commit()
    login_as("operator")
    resp = client.post(f"/traceability/rotor-types/{rt.id}/key",
                       data={**HALF_KEY_FORM, "key_angle_deg": "30"})
    assert resp.status_code == 302
    page = _text(client.get(f"/traceability/rotor-types/{rt.id}/key"))
    # Hand computation (first principles): 0.4396 g at 100 mm, at 30° + 180°.
    # Masses with 3 significant figures, typed lengths as typed (core.display).
    assert "add 0.440 g at 100 mm, 210°" in page


# --------------------------------------------------------------------------- refusals


def test_booking_in_on_an_overdue_machine_is_refused(db, shop, make_user) -> None:  # type: ignore[no-untyped-def]
    m = shop.machine(name="Old bay", verification_interval_days=30)
    last = TODAY - dt.timedelta(days=45)
    _verified(db, m, last)
    rt = shop.rotor_type()
    with pytest.raises(ValidationFailed) as exc:
        book_in(db, by=make_user("operator"), customer=rt.customer_id, serial_number="X-1",
                rotor_type_id=rt.id, balancing_speed_rpm=600.0, machine_id=m.id)
    due = last + dt.timedelta(days=30)
    assert exc.value.field == "machine_id"
    assert exc.value.errors["machine_id"] == (
        f'Machine "Old bay" is overdue for its proving test since {due + dt.timedelta(days=1)} '
        f"(due {due}, last passed test {last}; checked for {TODAY}). Only a quality manager can "
        "clear it, by recording a passed proving test of the machine in the verification "
        "register."
    )
    assert db.scalar(select(func.count()).select_from(Job).where(Job.machine_id == m.id)) == 0


def test_booking_in_sets_the_residual_test_for_4wn(db, shop, make_user) -> None:  # type: ignore[no-untyped-def]
    m = shop.machine()
    rt = shop.rotor_type()
    job = book_in(db, by=make_user("operator"), customer=rt.customer_id, serial_number="X-2",
                  rotor_type_id=rt.id, balancing_speed_rpm=600.0, machine_id=m.id,
                  tolerance=ToleranceSpec("4w/n", journal_load_a_kg=60.0))
    assert job.residual_test_required is True


def test_certificate_refused_on_a_machine_never_tested_past_its_interval(db, shop,  # type: ignore[no-untyped-def]
                                                                        make_user) -> None:
    from shopapp.certificates import issue as certificates
    from tests.reports.samples import job_ready_for_certificate

    entered = dt.datetime(2025, 1, 1, tzinfo=dt.UTC)
    m = shop.machine(name="Never tested", verification_interval_days=30, created_at=entered)
    job = job_ready_for_certificate(db, shop, make_user("operator"), machine=m)
    with pytest.raises(certificates.TransitionRefused) as exc:
        certificates.issue(db, job, by=make_user("quality"))
    assert exc.value.message == (
        f'Job {job.number}: Machine "Never tested" is overdue for its proving test since '
        f"2025-02-01 (due 2025-01-31, no passed test on record; checked for {TODAY}). Only a "
        "quality manager can clear it, by recording a passed proving test of the machine in "
        "the verification register."
    )


def test_certificate_refused_without_a_required_residual_test(db, shop, make_user) -> None:  # type: ignore[no-untyped-def]
    from shopapp.certificates import issue as certificates
    from tests.reports.samples import job_ready_for_certificate

    job = job_ready_for_certificate(db, shop, make_user("operator"), residual_test_required=True)
    with pytest.raises(certificates.TransitionRefused) as exc:
        certificates.issue(db, job, by=make_user("quality"))
    assert "requires a residual-unbalance verification test" in exc.value.message
    assert "plane 1 has no residual-unbalance test" in exc.value.message


def test_certificate_states_key_residual_test_and_balance_errors(db, shop, make_user) -> None:  # type: ignore[no-untyped-def]
    import io

    import pypdf

    from shopapp.certificates import issue as certificates
    from shopapp.jobs import evidence as jt
    from shopapp.jobs import residual_tests
    from tests.reports.samples import job_ready_for_certificate

    operator, quality = make_user("operator"), make_user("quality")
    job = job_ready_for_certificate(db, shop, operator, mark=False, residual_test_required=True)
    keys.set_key_convention(db, job.rotor.rotor_type, by=operator, convention="half_key",
                            key_width_mm=8, key_height_mm=7, key_length_mm=50, hub_length_mm=40,
                            key_radius_mm=20, key_angle_deg=0)
    for adv in residual_tests.suggested_test_masses(job):
        # Simulation: a calibrated machine (g·mm), residual 5 % of the limit at 60°.
        t = adv.suggested_g * adv.radius_mm
        z = cmath.rect(0.05 * adv.limit_gmm, math.radians(60)) + t * np.exp(
            1j * np.radians(np.arange(8) * 45.0))
        amps = [abs(v) for v in z]
        angs = [math.degrees(cmath.phase(v)) % 360 for v in z]
        residual_tests.record_residual_test(db, job, by=operator, plane=adv.plane,
                                            test_mass_g=adv.suggested_g, positions=8,
                                            amplitudes=amps, angles_deg=angs,
                                            repeat_amplitude=amps[0], repeat_angle_deg=angs[0])
    jt.record_error_estimate(db, job, by=operator, runs=[[(4.0, 0.0), (3.0, 0.0)]] * 2
                             + [[(4.2, 0.0), (3.0, 0.0)]])
    mark_in_tolerance(db, job, by=operator)
    cert = certificates.issue(db, job, by=quality)
    text = " ".join("\n".join(p.extract_text() for p in
                              pypdf.PdfReader(io.BytesIO(cert.pdf)).pages).split())
    assert "half-key convention (ISO 21940-32)" in text
    assert "Residual-unbalance verification test" in text
    assert "Verdict rule: U_res <= U_per" in text and "dU" in text
    # Issue 15: the stored file is the reproducible rendering followed by one incremental
    # update (attached data, signature), so the rendering is its exact first part.
    unsigned = certificates.rerender(cert)
    assert cert.pdf[:len(unsigned)] == unsigned
    data = certificates.report.CertificateData.from_json(cert.data_json)
    assert len(data.residual_tests) == 2 and data.residual_tests[0].passed
    assert data.key_compensation.startswith("Key 22 g")


def test_every_traceability_page_renders(client, login_as, shop, db, wn_job) -> None:  # type: ignore[no-untyped-def]
    m = shop.machine(name="Plain bay")
    _verified(db, m, TODAY - dt.timedelta(days=3), passed=False)
    login_as("quality")
    for url in ("/traceability/", f"/traceability/machines/{m.id}",
                f"/traceability/machines/{m.id}/proving-test", "/traceability/arbors",
                f"/traceability/rotor-types/{wn_job.rotor.rotor_type_id}/key",
                f"/traceability/jobs/{wn_job.id}/repeat-runs",
                f"/traceability/jobs/{wn_job.id}/residual-test?plane=2&positions=12"):
        resp = client.get(url)
        assert resp.status_code == 200, url
    page = _plain(client.get(f"/traceability/machines/{m.id}"))
    assert f'failed its proving test on {TODAY - dt.timedelta(days=3)}' in page
    assert "No proving rotor in the register yet" in _text(
        client.get(f"/traceability/machines/{m.id}/proving-test"))


# --------------------------------------------------------------------------- proving rotor choice


def _two_proving_rotors(db, make_user):  # type: ignore[no-untyped-def]
    q = make_user("quality")
    small = verifications.create_proving_rotor(db, by=q, name="PR-small", mass_kg=3.0,
                                               planes=1, radius_1_mm=60.0, positions=6)
    big = verifications.create_proving_rotor(db, by=q, name="PR-big", mass_kg=400.0, planes=2,
                                             radius_1_mm=250.0, radius_2_mm=250.0, positions=8)
    db.commit()
    return small, big


def test_proving_test_proposes_the_rotor_that_fits_the_mass_range(client, login_as, shop, db,  # type: ignore[no-untyped-def]
                                                                  make_user) -> None:
    small, big = _two_proving_rotors(db, make_user)
    # A heavy machine (100–5000 kg): only the 400 kg rotor lies in its range. Common practice,
    # no source: a machine is proved with a rotor within the range it is built for.
    m = shop.machine(name="Bay H", min_mass_kg=100.0, max_mass_kg=5000.0,
                     claimed_emar_gmm_per_kg=0.2)
    db.commit()
    assert verifications.proposed_proving_rotor(m, [small, big]) is big
    login_as("quality")
    page = _text(client.get(f"/traceability/machines/{m.id}/proving-test"))
    assert f'<option selected value="{big.id}">' in page
    # Claim for the whole rotor: 0.2 g·mm/kg × 400 kg = 80 g·mm; half per plane, × 15 at
    # 250 mm = 2.4 g (hand calculation).
    assert 'name="claimed_umar" type="text" value="80"' in page
    assert 'name="test_mass_g" type="text" value="2.4"' in page
    assert f'name="figures_for" type="hidden" value="{big.id}"' in page
    assert "whole rotor" in page and "each plane" in page
    # The page's script carries every rotor's figures (data attribute read by proving_test.js).
    assert '"claimed_umar": "0.6"' in page  # 0.2 × 3 kg for the small rotor
    assert "proving_test.js" in page
    js = client.get("/static/proving_test.js")
    assert js.status_code == 200 and b"figures_for" in js.data
    js.close()


def test_no_fitting_rotor_is_said_not_hidden(client, login_as, shop, db, make_user) -> None:  # type: ignore[no-untyped-def]
    small, big = _two_proving_rotors(db, make_user)
    m = shop.machine(name="Bay M", min_mass_kg=20.0, max_mass_kg=200.0)
    db.commit()
    assert verifications.proposed_proving_rotor(m, [small, big]) is None
    login_as("quality")
    page = _plain(client.get(f"/traceability/machines/{m.id}/proving-test"))
    assert "No proving rotor in the register fits Bay M's mass range (0–200 kg)" not in page
    assert "fits Bay M's mass range (20–200 kg)" in page


def test_changing_the_rotor_without_script_replaces_its_figures(client, login_as, shop, db,  # type: ignore[no-untyped-def]
                                                                make_user) -> None:
    small, big = _two_proving_rotors(db, make_user)
    m = shop.machine(name="Bay W", min_mass_kg=0.0, max_mass_kg=5000.0,
                     claimed_emar_gmm_per_kg=0.2)
    db.commit()
    login_as("quality")
    url = f"/traceability/machines/{m.id}/proving-test"
    # The figures on the form were proposed for the big rotor; the small one is chosen.
    data = {"performed_on": TODAY.isoformat(), "proving_rotor_id": str(small.id),
            "figures_for": str(big.id), "test_mass_g": "2.4", "test_radius_mm": "250",
            "claimed_umar": "80", "compute": "Compute"}
    resp = client.post(url, data=data)
    page = _text(resp)
    assert resp.status_code == 200
    # 0.2 × 3 kg = 0.6 g·mm; one plane takes it all; 15 × 0.6 / 60 mm = 0.15 g.
    assert 'name="claimed_umar" type="text" value="0.6"' in page
    assert 'name="test_mass_g" type="text" value="0.15"' in page
    assert 'name="test_radius_mm" type="text" value="60"' in page
    assert f'name="figures_for" type="hidden" value="{small.id}"' in page
    assert "Figures proposed for PR-small" in page and 'id="result"' not in page


def test_blank_figures_are_filled_by_the_server(client, login_as, shop, db,  # type: ignore[no-untyped-def]
                                                proving_rotor) -> None:
    m = shop.machine(name="Bay B", claimed_emar_gmm_per_kg=0.5)  # 5 g·mm on the 10 kg rotor
    db.commit()
    login_as("quality")
    theta = np.radians(np.arange(8) * 45.0)
    z = cmath.rect(1.5, math.radians(90.0)) + 75.0 * np.exp(1j * theta)
    data = {"performed_on": TODAY.isoformat(), "proving_rotor_id": str(proving_rotor.id),
            "figures_for": str(proving_rotor.id), "test_mass_g": "", "test_radius_mm": "",
            "claimed_umar": "", "first_position_deg": "0", "compute": "Compute"}
    for k, v in enumerate(z):
        data[f"p1_amp-{k}"] = f"{abs(v):.9f}"
        data[f"p1_ang-{k}"] = f"{math.degrees(cmath.phase(v)) % 360:.9f}"
    resp = client.post(f"/traceability/machines/{m.id}/proving-test", data=data)
    page = _text(resp)
    assert resp.status_code == 200, page[:2000]
    assert 'name="test_mass_g" type="text" value="0.75"' in page
    assert "PASSED" in page


def test_no_from_memory_remark_on_pages_or_reports_an_auditor_sees() -> None:
    # Docstrings may say what is from memory; page text and PDF wording may not.
    from pathlib import Path

    root = Path(__file__).resolve().parents[2] / "shopapp"
    hits = [str(p.relative_to(root)) for p in root.rglob("*.html")
            if "from memory" in p.read_text(encoding="utf-8")]
    assert hits == []
    for p in (root / "reports").rglob("*.py"):
        src = p.read_text(encoding="utf-8")
        strings = re.findall(r'"[^"\n]*from memory[^"\n]*"', src)
        assert strings == [], (p, strings)
    # Texts the certificate and the run-up page print.
    from shopapp.balancing.balance_errors import RULE_WITH_ERRORS
    from shopapp.balancing.runup import RUNUP_CAUTIONS

    assert all("from memory" not in t for t in (RULE_WITH_ERRORS, *RUNUP_CAUTIONS))


# --------------------------------------------------------------------------- angles not wrapped


def test_arbor_index_run_angle_outside_0_to_360_is_refused_not_wrapped(client, login_as,  # type: ignore[no-untyped-def]
                                                                      db) -> None:
    """Walk finding: 400° in an index run was taken as 40° without a word; the app's other
    angle fields refuse it (a wrapped angle puts a mass in the wrong place)."""
    user = login_as("quality")
    arbor = arbors.create_arbor(db, by=user, name="Arbor 400")
    db.commit()
    resp = client.post(f"/traceability/arbors/{arbor.id}/measurements", data={
        "measured_on": TODAY.isoformat(), "index_deg": "180", "second_frame": "arbor",
        "first-amp_1": "10", "first-ang_1": "400", "second-amp_1": "6", "second-ang_1": "0"})
    assert resp.status_code == 422
    assert ("Run 1, plane 1 angle: 400° is outside 0–360°: type the angle as shown (it is "
            "not wrapped to 40° for you).") in _plain(resp)
    assert db.scalar(select(func.count()).select_from(ArborErrorMeasurement)) == 0


def test_job_index_run_angle_outside_0_to_360_is_refused_not_wrapped(client, login_as,  # type: ignore[no-untyped-def]
                                                                    wn_job, db) -> None:
    user = login_as("quality")
    arbor = arbors.create_arbor(db, by=user, name="Arbor W400")
    db.commit()
    client.post(f"/traceability/jobs/{wn_job.id}/arbor", data={"arbor_id": str(arbor.id)})
    resp = client.post(f"/traceability/jobs/{wn_job.id}/index-runs", data={
        "ix-measured_on": TODAY.isoformat(), "ix-index_deg": "180", "ix-second_frame": "arbor",
        "ix-first-amp_1": "20", "ix-first-ang_1": "0", "ix-first-amp_2": "10",
        "ix-first-ang_2": "-90", "ix-second-amp_1": "10", "ix-second-ang_1": "0",
        "ix-second-amp_2": "4", "ix-second-ang_2": "90"}, follow_redirects=True)
    assert "Run 1, plane 2 angle: -90° is outside 0–360°" in _plain(resp)
    assert db.scalar(select(func.count()).select_from(ArborErrorMeasurement)) == 0


def test_keyway_angle_outside_0_to_360_is_refused_not_wrapped(client, login_as, shop,  # type: ignore[no-untyped-def]
                                                             db) -> None:
    rt = shop.rotor_type(radius_1_mm=100.0, radius_2_mm=100.0)
    db.commit()
    login_as("operator")
    resp = client.post(f"/traceability/rotor-types/{rt.id}/key",
                       data={**HALF_KEY_FORM, "key_angle_deg": "390"})
    assert resp.status_code == 422
    assert "390° is outside 0–360°" in _plain(resp)
    db.expire_all()
    assert rt.key_angle_deg is None


def test_residual_test_and_repeat_run_phases_outside_0_to_360_are_refused(client, login_as,  # type: ignore[no-untyped-def]
                                                                         wn_job, db) -> None:
    login_as("operator")
    data = {"plane": "1", "positions": "8", "test_mass_g": "2", "test_radius_mm": "300",
            "unit": "g·mm", "repeat_amplitude": "600", "repeat_angle_deg": "0",
            "compute": "Compute"}
    for k in range(8):
        data[f"amp-{k}"] = "600"
        data[f"ang-{k}"] = str(45 * k)
    data["ang-3"] = "495"  # 135° plus a turn
    resp = client.post(f"/traceability/jobs/{wn_job.id}/residual-test", data=data)
    assert resp.status_code == 422
    assert "Position 4 phase: 495° is outside 0–360°" in _plain(resp)
    runs = {}
    for k in range(3):
        runs.update({f"runs-{k}-amp_1": "30", f"runs-{k}-ang_1": "0",
                     f"runs-{k}-amp_2": "20", f"runs-{k}-ang_2": "90"})
    runs["runs-2-ang_1"] = "720"
    resp = client.post(f"/traceability/jobs/{wn_job.id}/repeat-runs", data=runs)
    assert resp.status_code == 422
    assert "Run 3, plane 1 angle: 720° is outside 0–360°" in _plain(resp)
    assert db.scalar(select(func.count()).select_from(BalanceErrorEstimate)) == 0


def test_a_proving_test_exactly_on_a_circle_shows_u_mar_as_0(client, login_as, shop, db,  # type: ignore[no-untyped-def]
                                                             proving_rotor) -> None:
    """Walk finding: "U_mar less than 0.000000001 g·mm" on the page; the readings lie on a
    circle round the origin, so U_mar is 0 (geometry), shown through the one formatter."""
    m = shop.machine(claimed_emar_gmm_per_kg=0.5)
    db.commit()
    login_as("quality")
    data = {"performed_on": TODAY.isoformat(), "proving_rotor_id": str(proving_rotor.id),
            "test_mass_g": "0.6", "test_radius_mm": "100", "first_position_deg": "0",
            "claimed_umar": "5", "compute": "Compute"}
    for k in range(8):
        data[f"p1_amp-{k}"] = "60"
        data[f"p1_ang-{k}"] = str(45 * k)
    resp = client.post(f"/traceability/machines/{m.id}/proving-test", data=data)
    page = _plain(resp)
    assert resp.status_code == 200 and "PASSED" in page
    assert "less than 0.0" not in page
    assert re.search(r"\b1 0 5\.00 1\.0+ 0\.0 % within claim", page)  # single-plane rotor
    assert "Specific, whole rotor: 0 g·mm/kg" in page

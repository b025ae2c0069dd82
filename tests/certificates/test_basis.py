"""The certificate states one basis (issue 11, "States and certificates").

ISO 21940-11 allocates U_per to the bearing planes, so an ISO certificate judges
there; the correction-plane residuals are printed as residuals only, with no
limit or verdict beside them. Overhung and narrow rotors are judged for static
and couple as well, and the tolerance method's notes are printed.
"""

from __future__ import annotations

import io
import math

import numpy as np
import pypdf
import pytest

from shopapp.certificates import issue as certificates
from shopapp.reports import certificate as report
from tests.reports.samples import job_ready_for_certificate


@pytest.fixture()
def people(make_user):  # type: ignore[no-untyped-def]
    return make_user("operator", full_name="Ola Operator"), make_user("quality",
                                                                       full_name="Quinn Quality")


def _pdf_text(pdf: bytes) -> str:
    return "\n".join(p.extract_text() for p in pypdf.PdfReader(io.BytesIO(pdf)).pages)


def _bearing_loads(r1: complex, r2: complex, za: float, zb: float, z1: float, z2: float
                   ) -> np.ndarray:
    """Rigid-rotor statics solved by numpy: forces and moments about bearing A balance."""
    a = np.array([[1.0, 1.0], [0.0, zb - za]], dtype=complex)
    b = np.array([r1 + r2, r1 * (z1 - za) + r2 * (z2 - za)])
    return np.abs(np.linalg.solve(a, b))


def _u_per(grade: float, mass_kg: float, rpm: float) -> float:
    # ISO 21940-11: U_per = 1000·G·m/Ω, Ω = 2πn/60.
    return 1000.0 * grade * mass_kg / (2.0 * math.pi * rpm / 60.0)


def test_correction_plane_over_its_share_with_bearings_inside_is_within(db, shop,
                                                                         people) -> None:
    operator, quality = people
    # Default invented fan: 120 kg, G 6.3 at 1480 rpm, bearings 0/800, centre of mass 400,
    # planes 150/650. A couple residual of 3000 g·mm per plane: each correction plane is over
    # its share of the bearing limits, each bearing plane inside.
    job = job_ready_for_certificate(db, shop, operator, residual=((3000.0, 0.0), (3000.0, 180.0)))
    assert job.state == "in_tolerance"
    cert = certificates.issue(db, job, by=quality)
    text = _pdf_text(cert.pdf)
    loads = _bearing_loads(3000.0, -3000.0, 0.0, 800.0, 150.0, 650.0)
    half = _u_per(6.3, 120.0, 1480.0) / 2  # symmetric rotor: half of U_per per bearing plane
    assert loads.max() < half < 3000.0  # the construction is what the test says
    assert "WITHIN\nTOLERANCE\nin both bearing planes" in text  # the verdict box, page one
    assert ("Result", "within tolerance in both bearing planes") in report.first_lines(
        certificates.certificate_data(cert))  # the same words on /verify
    assert "OUT" not in text and "information" not in text
    assert f"{loads[0]:.0f}" in text and f"{half:.0f}" in text  # bearing residual and limit
    data = certificates.certificate_data(cert)
    assert [lim.name for lim in data.limits] == ["bearing A", "bearing B"]
    assert all(lim.passed for lim in data.limits)
    # The correction-plane residuals are still stated (as measured), without a limit.
    assert [round(v.unbalance_gmm) for v in data.residual] == [3000, 3000]


def test_overhung_rotor_prints_and_judges_static_and_couple(db, shop, people) -> None:
    operator, quality = people
    geo = {"bearing_a_mm": 0.0, "bearing_b_mm": 600.0, "centre_of_mass_mm": 900.0,
           "plane_1_mm": 780.0, "plane_2_mm": 1020.0}
    rt = shop.rotor_type(**geo)
    rotor = shop.rotor(rt)
    machine = shop.machine()
    job = shop.job(rotor, machine_id=machine.id)
    from shopapp.jobs.runs import record_run
    from shopapp.jobs.states import mark_in_tolerance
    r1, r2 = 300.0, 200.0 * complex(math.cos(math.radians(40)), math.sin(math.radians(40)))
    for purpose, readings in (("initial", ((9000.0, 30.0), (7000.0, 200.0))),
                              ("check", ((300.0, 0.0), (200.0, 40.0)))):
        record_run(db, job, by=operator, purpose=purpose, speed_rpm=600.0,
                   readings=[(p + 1, a, g, "g·mm") for p, (a, g) in enumerate(readings)])
    mark_in_tolerance(db, job, by=operator)
    cert = certificates.issue(db, job, by=quality)
    data = certificates.certificate_data(cert)
    text = _pdf_text(cert.pdf)
    names = [lim.name for lim in data.limits]
    assert names == ["bearing A", "bearing B", "static (at the centre of mass)",
                     "couple (pair in planes 1 and 2)"]
    lims = {lim.name: lim for lim in data.limits}
    # Static residual = resultant of the two plane residuals (statics, computed here).
    assert lims["static (at the centre of mass)"].residual_gmm == pytest.approx(abs(r1 + r2),
                                                                               rel=1e-4)
    # Couple as a pair in the planes: moment about the centre of mass over the plane distance.
    moment = abs(r1 * (780.0 - 900.0) + r2 * (1020.0 - 900.0))
    assert lims["couple (pair in planes 1 and 2)"].residual_gmm == pytest.approx(moment / 240.0,
                                                                                rel=1e-4)
    # Bearing-plane residuals equal numpy's statics solution.
    loads = _bearing_loads(r1, r2, 0.0, 600.0, 780.0, 1020.0)
    assert [lims["bearing A"].residual_gmm, lims["bearing B"].residual_gmm] == pytest.approx(
        list(loads), rel=1e-4)
    assert "in both bearing planes and for static and couple unbalance" in " ".join(text.split())
    assert "static (at the centre of mass)" in text and "couple (pair in planes 1 and 2)" in text
    # The method's note is printed, not only the grade.
    assert "overhung rotor: bearing shares from the lever rule" in text
    assert "OUT" not in text and "information" not in text


def test_job_page_shows_correction_plane_residuals_without_a_limit(client, login_as, db, shop,
                                                                    make_user) -> None:
    operator = make_user("operator", full_name="Ola Operator")
    job = job_ready_for_certificate(db, shop, operator, residual=((3000.0, 0.0), (3000.0, 180.0)))
    db.commit()
    login_as("operator")
    page = client.get(f"/jobs/{job.id}").get_data(as_text=True)
    table = page[page.index('id="verdict-2"'):]
    table = table[:table.index("</table>")]
    assert "plane 1 (residual only)" in table and "judged in the bearing planes" in table
    assert "verdict-out" not in table and ">out<" not in table  # 123 % of a share is no verdict

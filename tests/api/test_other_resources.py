"""Calc, certificates, shop measures and the registry's rotor types and rotors over the API."""

from __future__ import annotations

import hashlib
import json
import math

import pytest
from sqlalchemy import func, select

from shopapp.certificates import issue as certificates
from shopapp.models import AuditEvent, Rotor, RotorType
from tests.reports.samples import job_ready_for_certificate


def test_calc_tolerance_is_iso_21940_11(api_as) -> None:
    api = api_as("owner")
    resp = api.post("/calc/tolerance", json={"grade": 6.3, "mass_kg": 120,
                                             "service_speed_rpm": 1480})
    assert resp.status_code == 200, resp.get_json()
    body = resp.get_json()
    # ISO 21940-11: U_per = 1000·G·m/Ω, Ω = 2π·n/60 (g·mm, G in mm/s, m in kg).
    expected = 1000 * 6.3 * 120 / (2 * math.pi * 1480 / 60)
    assert body["u_per_gmm"] == pytest.approx(expected, rel=1e-9)


def test_calc_answers_as_the_cli(api_as, runner) -> None:
    api = api_as("operator")
    request = {"mass_g": 7.5, "angle_deg": 100.0, "positions": 8}
    via_api = api.post("/calc/split", json=request)
    via_cli = runner.invoke(args=["calc", "split", "--json"], input=json.dumps(request))
    assert via_cli.exit_code == 0, via_cli.output
    assert via_api.status_code == 200
    assert via_api.get_json() == json.loads(via_cli.output)


def test_calc_bad_input_names_the_field(api_as) -> None:
    api = api_as("operator")
    resp = api.post("/calc/tolerance", json={"grade": "six", "mass_kg": 120,
                                             "service_speed_rpm": 1480})
    assert resp.status_code == 422
    assert "grade" in resp.get_json()["error"]["fields"]
    not_object = api.post("/calc/tolerance", json=[1, 2])
    assert not_object.status_code == 422


def test_certificate_metadata_pdf_and_public_verify(api_as, db, shop, make_user) -> None:
    cert = certificates.issue(db, job_ready_for_certificate(db, shop, make_user("operator")),
                              by=make_user("quality"))
    db.commit()
    api = api_as("owner")
    listed = api.get("/certificates").get_json()
    assert listed["total"] == 1 and listed["items"][0]["number"] == cert.number
    meta = api.get(f"/certificates/{cert.id}").get_json()
    pdf = api.get(f"/certificates/{cert.id}/pdf")
    assert pdf.status_code == 200 and pdf.mimetype == "application/pdf"
    # hashlib over the downloaded bytes is the reference for "byte for byte".
    assert hashlib.sha256(pdf.data).hexdigest() == meta["pdf_sha256"] == cert.pdf_sha256
    anonymous = api.client.get("/api/v1/certificates/verify",
                               query_string={"q": meta["pdf_sha256"]})
    assert anonymous.status_code == 200
    answer = anonymous.get_json()
    assert (answer["status"], answer["number"], answer["matched_by"]) == (
        "valid", cert.number, "PDF hash")
    unknown = api.client.get("/api/v1/certificates/verify", query_string={"q": "BC-1999-9"})
    assert unknown.get_json()["status"] == "unknown"


def test_shop_measures_are_the_cli_json(api_as, runner, db, shop, make_user) -> None:
    certificates.issue(db, job_ready_for_certificate(db, shop, make_user("operator")),
                       by=make_user("quality"))
    db.commit()
    api = api_as("owner")
    resp = api.get("/measures/shop", query_string={"month": "2026-10", "as_of": "2026-11-15"})
    assert resp.status_code == 200, resp.get_json()
    cli = runner.invoke(args=["report", "shop", "--month", "2026-10", "--json",
                              "--as-of", "2026-11-15"])
    assert cli.exit_code == 0, cli.output
    assert resp.get_json() == json.loads(cli.output)
    bad = api.get("/measures/shop", query_string={"month": "2026-13"})
    assert bad.status_code == 422 and "month" in bad.get_json()["error"]["fields"]
    assert api_as("operator").get("/measures/shop",
                                  query_string={"month": "2026-10"}).status_code == 403


def test_rotor_type_and_rotor_create_and_edit(api_as, db, shop) -> None:
    customer = shop.customer(name="Weir Lane Mills")
    db.commit()
    api = api_as("operator")
    geometry = {"customer_id": customer.id, "part_number": "IMP-400", "mass_kg": 40.0,
                "service_speed_rpm": 2950.0, "bearing_a_mm": 0.0, "bearing_b_mm": 500.0,
                "centre_of_mass_mm": 250.0, "plane_1_mm": 100.0, "plane_2_mm": 400.0,
                "radius_1_mm": 200.0, "radius_2_mm": 200.0, "tolerance_grade": 6.3}
    made = api.post("/rotor-types", json=geometry)
    assert made.status_code == 201, made.get_json()
    rt_id = made.get_json()["id"]
    assert made.get_json()["planes"] == 2
    events = db.scalar(select(func.count()).select_from(AuditEvent))
    # The centre of mass far outside the bearings is the registry's refusal, by field.
    bad = api.patch(f"/rotor-types/{rt_id}", json={"centre_of_mass_mm": 90_000.0})
    assert bad.status_code == 422 and "centre_of_mass_mm" in bad.get_json()["error"]["fields"]
    assert db.scalar(select(func.count()).select_from(AuditEvent)) == events
    rotor = api.post("/rotors", json={"rotor_type_id": rt_id, "serial_number": "WL-0007"})
    assert rotor.status_code == 201
    again = api.post("/rotors", json={"rotor_type_id": rt_id, "serial_number": "wl-0007"})
    assert again.status_code == 422 and "serial_number" in again.get_json()["error"]["fields"]
    renamed = api.patch(f"/rotors/{rotor.get_json()['id']}", json={"notes": "cracked key"})
    assert renamed.get_json()["notes"] == "cracked key"
    assert db.scalar(select(func.count()).select_from(Rotor)) == 1
    assert db.scalar(select(func.count()).select_from(RotorType)) == 1

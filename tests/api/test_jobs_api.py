"""Jobs over the API: book in, list with the page's filters, log runs (with
Idempotency-Key), advice equal to the numerical core's, corrections, state changes;
refusals in the one JSON error shape with nothing saved."""

from __future__ import annotations

import cmath
import datetime as dt
import math
from typing import Any

import numpy as np
import pytest
from sqlalchemy import func, select
from sqlalchemy.orm import Session

from shopapp.balancing import influence
from shopapp.models import AuditEvent, Correction, Job, Run

# The same invented two-plane rotor as the job page tests: readings V = A·U (µm).
A_TRUE = np.array([[0.050 * cmath.exp(-0.5j), 0.018 * cmath.exp(0.7j)],
                   [0.015 * cmath.exp(1.0j), 0.045 * cmath.exp(-0.35j)]])
U_TRUE_G = np.array([cmath.rect(20.0, math.radians(70)), cmath.rect(12.0, math.radians(200))])


def count(db: Session, model: Any) -> int:
    db.expire_all()
    return db.scalar(select(func.count()).select_from(model)) or 0


def readings(u_g: np.ndarray) -> list[dict[str, float]]:
    return [{"plane": i + 1, "amplitude": abs(complex(z)),
             "angle_deg": math.degrees(cmath.phase(complex(z))) % 360.0}
            for i, z in enumerate(A_TRUE @ u_g)]


@pytest.fixture()
def machine(shop):  # type: ignore[no-untyped-def]
    return shop.machine(min_speed_rpm=100.0, reading_unit="um")


@pytest.fixture()
def rtype(shop):  # type: ignore[no-untyped-def]
    return shop.rotor_type()


def book(api: Any, rtype: Any, machine: Any, serial: str = "FAN-9", **kw: Any) -> Any:
    body = {"customer_id": rtype.customer_id, "serial_number": serial,
            "rotor_type_id": rtype.id, "balancing_speed_rpm": 600.0,
            "machine_id": machine.id, "tolerance": {"method": "grade", "grade": 6.3},
            "received_on": "2026-03-02", **kw}
    return api.post("/jobs", json=body)


def test_book_in_creates_the_job_and_answers_201_with_it(api_as, db, rtype, machine) -> None:
    api = api_as("operator")
    resp = book(api, rtype, machine)
    assert resp.status_code == 201, resp.get_json()
    body = resp.get_json()
    job = db.get(Job, body["id"])
    assert job is not None and job.state == "booked_in" and body["number"] == job.number
    assert resp.headers["Location"].endswith(f"/api/v1/jobs/{job.id}")
    assert body["allowed_actions"] == ["start", "reject"]


def test_book_in_refusal_names_the_field_and_saves_nothing(api_as, db, rtype, machine) -> None:
    api = api_as("operator")
    before = count(db, Job), count(db, AuditEvent)
    resp = book(api, rtype, machine, balancing_speed_rpm=-5)
    assert resp.status_code == 422
    err = resp.get_json()["error"]
    assert err["code"] == "invalid" and "balancing_speed_rpm" in err["fields"]
    over = book(api, rtype, machine, balancing_speed_rpm=5000.0)  # above the service speed
    assert over.status_code == 422
    assert "balancing_speed_rpm" in over.get_json()["error"]["fields"]
    assert (count(db, Job), count(db, AuditEvent)) == before


def test_list_filters_like_the_page_and_pages_with_a_total(api_as, db, rtype, machine) -> None:
    api = api_as("operator")
    ids = [book(api, rtype, machine, serial=f"S-{n}").get_json()["id"] for n in range(5)]
    db.get(Job, ids[0]).state = "rejected"
    db.commit()
    page = api.get("/jobs", query_string={"size": 2, "page": 2}).get_json()
    assert (page["total"], page["pages"], page["page"], len(page["items"])) == (5, 3, 2, 2)
    last = api.get("/jobs", query_string={"size": 2, "page": 3}).get_json()
    past = api.get("/jobs", query_string={"size": 2, "page": 4}).get_json()
    assert len(last["items"]) == 1 and (past["page"], past["items"]) == (4, [])
    every = [j["id"] for p in (1, 2, 3)
             for j in api.get("/jobs", query_string={"size": 2, "page": p}).get_json()["items"]]
    assert sorted(every) == sorted(ids)
    rejected = api.get("/jobs", query_string={"state": "rejected"}).get_json()
    assert [j["id"] for j in rejected["items"]] == [ids[0]]
    found = api.get("/jobs", query_string={"q": "s-3"}).get_json()
    assert [j["rotor"]["serial_number"] for j in found["items"]] == ["S-3"]
    bad = api.get("/jobs", query_string={"state": "lost", "received_from": "yesterday"})
    assert bad.status_code == 422
    assert set(bad.get_json()["error"]["fields"]) == {"state", "received_from"}
    # The rework filter keeps its true/false and takes the page's "window" too: a new job
    # was neither reopened nor returned, and none has reached tolerance yet.
    for value, want in (("true", []), ("false", ids), ("window", [])):
        got = api.get("/jobs", query_string={"reworked": value, "size": 10}).get_json()
        assert sorted(j["id"] for j in got["items"]) == sorted(want), value
    assert api.get("/jobs", query_string={"reworked": "maybe"}).status_code == 422
    today = dt.date.today().isoformat()
    reached = api.get("/jobs", query_string={"reached_from": today}).get_json()
    assert reached["items"] == []


def test_log_run_stores_the_readings_and_moves_the_job_on(api_as, db, rtype, machine) -> None:
    api = api_as("operator")
    job_id = book(api, rtype, machine).get_json()["id"]
    sent = readings(U_TRUE_G)
    resp = api.post(f"/jobs/{job_id}/runs", json={"purpose": "initial", "speed_rpm": 600,
                                                  "unit": "um", "readings": sent})
    assert resp.status_code == 201, resp.get_json()
    run = db.get(Run, resp.get_json()["id"])
    assert [(r.plane, r.amplitude, r.angle_deg, r.unit) for r in run.readings] == [
        (s["plane"], pytest.approx(s["amplitude"]), pytest.approx(s["angle_deg"]), "um")
        for s in sent]
    assert db.get(Job, job_id).state == "on_machine"


def test_idempotency_key_replays_and_never_logs_twice(api_as, db, rtype, machine) -> None:
    api = api_as("operator")
    job_id = book(api, rtype, machine).get_json()["id"]
    body = {"purpose": "initial", "speed_rpm": 600, "unit": "um", "readings": readings(U_TRUE_G)}
    key = {"Idempotency-Key": "run-2026-11-03-0001"}
    first = api.post(f"/jobs/{job_id}/runs", json=body, headers=key)
    again = api.post(f"/jobs/{job_id}/runs", json=body, headers=key)
    assert first.status_code == again.status_code == 201
    assert again.get_json() == first.get_json()
    assert again.headers["Idempotent-Replayed"] == "true"
    assert count(db, Run) == 1
    other = api.post(f"/jobs/{job_id}/runs", json={**body, "speed_rpm": 601}, headers=key)
    assert other.status_code == 409
    assert other.get_json()["error"]["code"] == "conflict"
    assert count(db, Run) == 1
    # Keys are per user: another operator's same key is a new request.
    api2 = api_as("operator")
    assert api2.post(f"/jobs/{job_id}/runs", json=body, headers=key).status_code == 201
    assert count(db, Run) == 2


def test_refused_run_names_the_api_field_and_saves_nothing(api_as, db, rtype, machine) -> None:
    api = api_as("operator")
    job_id = book(api, rtype, machine).get_json()["id"]
    before = count(db, Run), count(db, AuditEvent)
    one_plane = api.post(f"/jobs/{job_id}/runs", json={
        "purpose": "initial", "speed_rpm": 600, "unit": "um", "readings": readings(U_TRUE_G)[:1]})
    assert one_plane.status_code == 422
    assert "readings[plane=2].amplitude" in one_plane.get_json()["error"]["fields"]
    not_json = api.client.post(f"/api/v1/jobs/{job_id}/runs", data="purpose=initial",
                               headers=api.headers())
    assert not_json.status_code == 400 and not_json.is_json
    nan = api.client.post(f"/api/v1/jobs/{job_id}/runs", headers=api.headers(
        {"Content-Type": "application/json"}), data='{"purpose": "initial", "speed_rpm": NaN}')
    assert nan.status_code == 400 and "NaN" in nan.get_json()["error"]["message"]
    nul = api.post(f"/jobs/{job_id}/runs", json={
        "purpose": "initial", "speed_rpm": 600, "readings": readings(U_TRUE_G), "notes": "a\x00b"})
    assert nul.status_code == 422 and "notes" in nul.get_json()["error"]["fields"]
    bidi = api.post(f"/jobs/{job_id}/runs", json={  # U+202E, as the forms refuse it
        "purpose": "initial", "speed_rpm": 600, "readings": readings(U_TRUE_G),
        "notes": "a\u202eb"})
    assert bidi.status_code == 422 and "notes" in bidi.get_json()["error"]["fields"]
    extra = api.post(f"/jobs/{job_id}/runs", json={
        "purpose": "initial", "speed_rpm": 600, "readings": readings(U_TRUE_G), "colour": 1})
    assert extra.status_code == 422 and "colour" in extra.get_json()["error"]["fields"]
    assert (count(db, Run), count(db, AuditEvent)) == before


def test_advice_is_the_cores_two_plane_correction(api_as, db, rtype, machine) -> None:
    api = api_as("operator")
    job_id = book(api, rtype, machine).get_json()["id"]
    runs = [
        {"purpose": "initial", "readings": readings(U_TRUE_G)},
        {"purpose": "trial", "readings": readings(U_TRUE_G + np.array([30.0, 0])),
         "trial": {"plane": 1, "mass_g": 30.0, "angle_deg": 0.0, "radius_mm": 300.0}},
        {"purpose": "trial", "readings": readings(U_TRUE_G + np.array([0, 30.0j])),
         "trial": {"plane": 2, "mass_g": 30.0, "angle_deg": 90.0, "radius_mm": 300.0}},
    ]
    for r in runs:
        assert api.post(f"/jobs/{job_id}/runs", json={"speed_rpm": 600, "unit": "um", **r}
                        ).status_code == 201
    advice = api.get(f"/jobs/{job_id}/advice").get_json()
    # Independently: the core's two-plane solution for the same readings.
    v0 = A_TRUE @ U_TRUE_G
    trials = [influence.TrialRun(1, 30.0, 0.0, tuple(A_TRUE @ (U_TRUE_G + np.array([30.0, 0])))),
              influence.TrialRun(2, 30.0, 90.0,
                                 tuple(A_TRUE @ (U_TRUE_G + np.array([0, 30.0j]))))]
    sol = influence.two_plane(tuple(v0), trials)
    got = [(p["mass_g"], p["add_angle_deg"]) for p in advice["planes"]]
    assert got == [(pytest.approx(c.mass_g, rel=1e-9), pytest.approx(c.angle_deg % 360, abs=1e-6))
                   for c in sol.corrections]
    # Textbook check: the correction cancels the hidden unbalance (W = −U), 20 g in plane 1.
    assert got[0][0] == pytest.approx(20.0, abs=0.01)

    # Record plane 1 as fitted: stored as sent.
    fit = api.post(f"/jobs/{job_id}/corrections", json={
        "run_id": advice["run_id"], "plane": 1, "action": "add",
        "mass_g": round(got[0][0], 1), "angle_deg": round(got[0][1], 0), "radius_mm": 300.0})
    assert fit.status_code == 201, fit.get_json()
    assert fit.get_json()["mass_g"] == round(got[0][0], 1)
    assert count(db, Correction) == 1


def test_state_change_needs_a_reason_to_reject(api_as, db, rtype, machine) -> None:
    api = api_as("operator")
    job_id = book(api, rtype, machine).get_json()["id"]
    no_reason = api.post(f"/jobs/{job_id}/state", json={"action": "reject"})
    assert no_reason.status_code == 422 and "reason" in no_reason.get_json()["error"]["fields"]
    assert db.get(Job, job_id).state == "booked_in"
    wrong = api.post(f"/jobs/{job_id}/state", json={"action": "dispatch"})
    assert wrong.status_code == 409
    done = api.post(f"/jobs/{job_id}/state", json={"action": "reject",
                                                   "reason": "cracked hub at the keyway"})
    assert done.status_code == 200 and done.get_json()["state"] == "rejected"


def test_unknown_paths_and_methods_answer_json(api_as) -> None:
    api = api_as("owner")
    missing = api.get("/jobs/2147483647")
    assert missing.status_code == 404 and missing.get_json()["error"]["code"] == "not_found"
    nowhere = api.get("/no-such-thing")
    assert nowhere.status_code == 404 and nowhere.is_json
    method = api.client.delete("/api/v1/jobs", headers=api.headers())
    assert method.status_code == 405 and method.get_json()["error"]["code"] == "method_not_allowed"
    too_big = api.get("/jobs/99999999999")
    assert too_big.status_code == 404 and too_big.is_json


def test_customer_create_and_edit(api_as, db) -> None:
    api = api_as("quality")
    made = api.post("/customers", json={"name": "Millrace Blowers", "email": "desk@example.org"})
    assert made.status_code == 201
    cid = made.get_json()["id"]
    dup = api.post("/customers", json={"name": "millrace blowers"})
    assert dup.status_code == 422 and "name" in dup.get_json()["error"]["fields"]
    edited = api.patch(f"/customers/{cid}", json={"contact": "Night shift"})
    assert edited.status_code == 200
    assert edited.get_json()["contact"] == "Night shift"
    assert edited.get_json()["name"] == "Millrace Blowers"



@pytest.mark.parametrize("text", ["1", "9", "10", "2147483647", "2147483646", "999999999",
                                  "2147483648", "9999999999", "59322893347", "0", "01", "-1"])
def test_ids_out_of_range_are_404_for_every_method(api_as, text) -> None:
    """Python's own comparison with 2³¹−1 is the reference for which ids exist at all."""
    api = api_as("operator")
    in_range = text.isdigit() and not text.startswith("0") and 1 <= int(text) <= 2**31 - 1
    for method in ("GET", "PATCH"):
        resp = api.client.open(f"/api/v1/customers/{text}", method=method, json={},
                               headers=api.headers())
        assert resp.status_code == 404, (text, method)
        assert resp.is_json
        if in_range:
            assert "No customer with id" in resp.get_json()["error"]["message"]


def test_return_of_a_dispatched_job_only(api_as, db, rtype, machine) -> None:
    api = api_as("operator")
    job_id = book(api, rtype, machine).get_json()["id"]
    early = api.post(f"/jobs/{job_id}/return", json={"notes": "vibrates again"})
    assert early.status_code == 409
    job = db.get(Job, job_id)
    job.state, job.dispatched_on = "dispatched", job.received_on
    db.commit()
    back = api.post(f"/jobs/{job_id}/return", json={"notes": "vibrates again"})
    assert back.status_code == 201, back.get_json()
    body = back.get_json()
    assert (body["kind"], body["return_of_job_id"], body["rotor"]["id"]) == (
        "return", job_id, job.rotor_id)
    assert count(db, Job) == 2

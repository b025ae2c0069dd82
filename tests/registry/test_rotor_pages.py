"""Rotor-type and rotor pages: forms with garbage, roles, archive, history and query counts."""

from __future__ import annotations

import datetime as dt
from typing import Any

import pytest
from sqlalchemy import func, select
from sqlalchemy.orm import Session

from shopapp.models import AuditEvent, InfluenceSet, Rotor, RotorType, Run, RunReading

ROLES = ("operator", "quality", "owner", "admin")

# Form data of a good two-plane rotor type (invented fan), as a browser sends it.
TYPE_FORM: dict[str, str] = {
    "part_number": "IMP-450",
    "description": "pump impeller",
    "kind": "pump_impeller",
    "mass_kg": "42.5",
    "service_speed_rpm": "2950",
    "first_critical_rpm": "",
    "bearing_a_mm": "0",
    "bearing_b_mm": "600",
    "centre_of_mass_mm": "300",
    "plane_1_mm": "120",
    "radius_1_mm": "180",
    "method_1": "add",
    "positions_1": "",
    "first_position_1_deg": "",
    "plane_2_mm": "480",
    "radius_2_mm": "180",
    "method_2": "",
    "positions_2": "",
    "first_position_2_deg": "",
    "density_g_cm3": "",
    "tolerance_grade": "6.3",
    "tolerance_gmm": "",
    "rotation": "cw",
    "key_convention": "none",
    "notes": "",
}


def _count(db: Session, model: type) -> int:
    return db.scalar(select(func.count()).select_from(model)) or 0


def _counts(db: Session) -> tuple[int, int, int]:
    return _count(db, RotorType), _count(db, Rotor), _count(db, AuditEvent)


# --------------------------------------------------------------------------- rotor types


@pytest.mark.parametrize("role", ROLES)
def test_rotor_type_pages_render_for_every_role(client, login_as, shop, db, role):
    rt = shop.rotor_type(part_number="PT-RENDER", first_critical_rpm=1600.0)
    shop.rotor(rt, serial_number="SN-RENDER")
    machine = shop.machine(name="Bay R")
    db.add(InfluenceSet(rotor_type_id=rt.id, machine_id=machine.id, speed_rpm=600.0, planes=2,
                        coefficients=[[1.0, 0.0]] * 4, last_prediction_error_pct=12.0))
    db.commit()
    login_as(role)
    listing = client.get("/rotor-types/")
    assert listing.status_code == 200 and "PT-RENDER" in listing.get_data(as_text=True)
    detail = client.get(f"/rotor-types/{rt.id}")
    text = detail.get_data(as_text=True)
    assert detail.status_code == 200
    assert "SN-RENDER" in text and "Bay R" in text and "12 %" in text
    # 1480 rpm is 92.5 % of 1600 rpm: above the ~70 % rule of thumb, so not rigid.
    assert "does not behave as a rigid rotor" in text


def test_rotor_type_detail_shows_u_per_in_shop_units(client, login_as, shop, db):
    # ISO 21940-11: U_per = 1000·G·m/Ω; G 6.3, m 120 kg, n 1480 rpm (Ω = 154.99 rad/s)
    # gives 1000·6.3·120/154.99 = 4878 g·mm (hand calculation from the standard's formula).
    rt = shop.rotor_type(mass_kg=120.0, service_speed_rpm=1480.0, tolerance_grade=6.3)
    db.commit()
    login_as("operator")
    text = client.get(f"/rotor-types/{rt.id}").get_data(as_text=True)
    assert "4878 g·mm" in text


def test_create_rotor_type_through_the_form(client, login_as, shop, db):
    customer = shop.customer(name="Fir Pumps")
    db.commit()
    login_as("operator")
    page = client.get(f"/rotor-types/new?customer_id={customer.id}")
    assert page.status_code == 200
    resp = client.post("/rotor-types/new", data=TYPE_FORM | {"customer": str(customer.id)})
    assert resp.status_code == 302, resp.get_data(as_text=True)[:2000]
    rt = db.scalars(select(RotorType).where(RotorType.part_number == "IMP-450")).one()
    assert rt.customer_id == customer.id and rt.method_2 == "add" and rt.tolerance_grade == 6.3
    assert rt.plane_2_mm == 480.0


GARBAGE: list[tuple[str, str, str]] = [
    ("mass_kg", "heavy", "Not a number"),
    ("mass_kg", "nan", "finite number"),
    ("mass_kg", "NaN", "finite number"),
    ("mass_kg", "inf", "finite number"),
    ("mass_kg", "-inf", "finite number"),
    ("mass_kg", "1e999", "finite number"),
    ("mass_kg", "1e300", "at most"),
    ("mass_kg", "-5", "greater than 0"),
    ("mass_kg", "0", "greater than 0"),
    ("mass_kg", "", "Required"),
    ("mass_kg", "12,500", "could be 12.500 or 12500"),  # never guessed: 12.5 or 12 500 kg
    ("mass_kg", "9" * 50, "at most 40 characters"),
    ("service_speed_rpm", "fast", "Not a number"),
    # The walk: "Bearing B position (mm) bearings A and B must be at least 1 mm apart" (the
    # label before a clause with its own subject).
    ("bearing_b_mm", "0", "Bearing B position (mm) must be at least 1 mm from bearing A "
                          "(A = 0 mm, B = 0 mm)"),
    ("radius_1_mm", "0", "greater than 0"),
    ("centre_of_mass_mm", "99999", "too far"),
    ("plane_2_mm", "", "both its position and its radius"),
    ("positions_1", "1", "at least 2"),
    ("positions_1", "2.5", "whole number"),
    ("positions_1", "99999999999999", "at most 9 digits"),
    ("positions_1", "100000", "at most 360 fixed positions (one per degree), got 100000"),
    ("positions_1", "eight", "whole number"),
    ("method_1", "glue", "Not one of the choices"),
    ("method_1", "remove", "required when mass may be removed"),
    ("tolerance_grade", "5", "Not one of the choices"),
    ("tolerance_gmm", "100", "not both"),
    ("kind", "x" * 300, "Not one of the choices"),
    ("part_number", "", "Give the part number"),
    ("part_number", "P" * 101, "100"),
    ("description", "d" * 201, "200"),
    ("notes", "n" * 5001, "5000"),
    # The walk: WTForms' "Invalid Choice: could not coerce." named neither field nor choices.
    ("customer", "abc", "Customer: not one of the choices; choose one of:"),
    ("customer", "999999", "Not one of the choices"),
]


@pytest.mark.parametrize(("field", "value", "message"), GARBAGE)
def test_rotor_type_garbage_is_422_with_message_and_nothing_saved(
    client, login_as, shop, db, field, value, message
):
    customer = shop.customer()
    db.commit()
    login_as("operator")
    before = _counts(db)
    data = TYPE_FORM | {"customer": str(customer.id), field: value}
    resp = client.post("/rotor-types/new", data=data)
    assert resp.status_code == 422
    assert message in resp.get_data(as_text=True)
    assert _counts(db) == before


def test_duplicate_part_number_is_422(client, login_as, shop, db):
    rt = shop.rotor_type(part_number="DUP-1")
    db.commit()
    login_as("operator")
    before = _counts(db)
    data = TYPE_FORM | {"customer": str(rt.customer_id), "part_number": "dup-1"}
    resp = client.post("/rotor-types/new", data=data)
    assert resp.status_code == 422 and "already has a rotor type" in resp.get_data(as_text=True)
    assert _counts(db) == before


def test_edit_rotor_type_prefills_and_refuses_bad_geometry(client, login_as, shop, db):
    rt = shop.rotor_type(part_number="EDIT-1")
    db.commit()
    login_as("quality")
    page = client.get(f"/rotor-types/{rt.id}/edit").get_data(as_text=True)
    assert 'value="EDIT-1"' in page and 'value="800"' in page
    data = TYPE_FORM | {"part_number": "EDIT-1", "bearing_b_mm": "0"}
    resp = client.post(f"/rotor-types/{rt.id}/edit", data=data)
    assert resp.status_code == 422 and "apart" in resp.get_data(as_text=True)
    db.refresh(rt)
    assert rt.bearing_b_mm == 800.0
    resp = client.post(f"/rotor-types/{rt.id}/edit", data=TYPE_FORM | {"part_number": "EDIT-2"})
    assert resp.status_code == 302
    db.refresh(rt)
    assert rt.part_number == "EDIT-2" and rt.mass_kg == 42.5


def test_owner_cannot_create_edit_or_archive_rotor_types(client, login_as, shop, db):
    rt = shop.rotor_type()
    db.commit()
    login_as("owner")
    before = _counts(db)
    assert client.get("/rotor-types/new").status_code == 403
    assert client.post("/rotor-types/new", data=TYPE_FORM).status_code == 403
    assert client.get(f"/rotor-types/{rt.id}/edit").status_code == 403
    assert client.post(f"/rotor-types/{rt.id}/archive").status_code == 403
    assert client.get("/rotors/new").status_code == 403
    assert client.get("/rotors/new-one-off").status_code == 403
    assert _counts(db) == before


def test_rotor_type_filters_and_archive(client, login_as, shop, db):
    a = shop.customer(name="Filter A")
    shop.rotor_type(a, part_number="FAN-A", kind="fan")
    roll = shop.rotor_type(a, part_number="ROLL-A", kind="roll")
    shop.rotor_type(shop.customer(), part_number="FAN-B", kind="fan")
    db.commit()
    login_as("operator")
    text = client.get(f"/rotor-types/?customer_id={a.id}&kind=fan").get_data(as_text=True)
    assert "FAN-A" in text and "ROLL-A" not in text and "FAN-B" not in text
    # Junk filters are ignored, not errors.
    assert client.get("/rotor-types/?customer_id=abc&kind=zzz&page=-3").status_code == 200
    assert client.post(f"/rotor-types/{roll.id}/archive").status_code == 302
    assert "ROLL-A</a>" not in client.get("/rotor-types/").get_data(as_text=True)
    assert "ROLL-A</a>" in client.get("/rotor-types/?archived=1").get_data(as_text=True)


# --------------------------------------------------------------------------- rotors


@pytest.mark.parametrize("role", ROLES)
def test_rotor_pages_render_for_every_role(client, login_as, shop, db, role):
    rotor = shop.rotor(serial_number="SN-ANY")
    shop.job(rotor)
    db.commit()
    login_as(role)
    assert "SN-ANY" in client.get("/rotors/").get_data(as_text=True)
    detail = client.get(f"/rotors/{rotor.id}")
    assert detail.status_code == 200 and "SN-ANY" in detail.get_data(as_text=True)


def test_create_rotor_and_duplicate_serial(client, login_as, shop, db):
    rt = shop.rotor_type()
    db.commit()
    login_as("operator")
    assert client.get(f"/rotors/new?customer_id={rt.customer_id}").status_code == 200
    data = {"rotor_type": str(rt.id), "serial_number": "NEW-1"}
    assert client.post("/rotors/new", data=data).status_code == 302
    before = _counts(db)
    resp = client.post("/rotors/new", data=data | {"serial_number": " new-1 "})
    assert resp.status_code == 422
    assert "already has a rotor with serial" in resp.get_data(as_text=True)
    assert _counts(db) == before


@pytest.mark.parametrize(
    ("data", "message"),
    [
        ({"serial_number": ""}, "Give the serial number"),
        ({"serial_number": "S" * 101}, "100"),
        ({"rotor_type": "abc"}, "Rotor type (customer · part number): not one of the choices"),
        ({"rotor_type": "0"}, "Not one of the choices"),
    ],
)
def test_bad_rotor_input(client, login_as, shop, db, data, message):
    rt = shop.rotor_type()
    db.commit()
    login_as("operator")
    before = _counts(db)
    resp = client.post("/rotors/new", data={"rotor_type": str(rt.id), "serial_number": "X"} | data)
    assert resp.status_code == 422 and message in resp.get_data(as_text=True)
    assert _counts(db) == before


def test_one_off_rotor_creates_type_and_rotor_together(client, login_as, shop, db):
    customer = shop.customer()
    db.commit()
    login_as("operator")
    geometry = {k: v for k, v in TYPE_FORM.items() if k != "part_number"}
    data = geometry | {"customer": str(customer.id), "serial_number": "ONE-9"}
    before = _counts(db)
    resp = client.post("/rotors/new-one-off", data=data | {"radius_1_mm": "nan"})
    assert resp.status_code == 422 and "finite number" in resp.get_data(as_text=True)
    assert _counts(db) == before
    resp = client.post("/rotors/new-one-off", data=data)
    assert resp.status_code == 302
    rotor = db.scalars(select(Rotor).where(Rotor.serial_number == "ONE-9")).one()
    assert rotor.rotor_type.one_off and rotor.rotor_type.part_number == "one-off ONE-9"
    # The same serial again: refused before any rotor type is made.
    before = _counts(db)
    resp = client.post("/rotors/new-one-off", data=data)
    assert resp.status_code == 422 and "already has a rotor" in resp.get_data(as_text=True)
    assert _counts(db) == before


def test_edit_and_archive_rotor(client, login_as, shop, db):
    rotor = shop.rotor(serial_number="ED-1")
    shop.rotor(rotor.rotor_type, serial_number="ED-2")
    db.commit()
    login_as("quality")
    assert 'value="ED-1"' in client.get(f"/rotors/{rotor.id}/edit").get_data(as_text=True)
    data = {"rotor_type": str(rotor.rotor_type_id), "serial_number": "ED-2"}
    assert client.post(f"/rotors/{rotor.id}/edit", data=data).status_code == 422
    data["serial_number"] = "ED-1A"
    assert client.post(f"/rotors/{rotor.id}/edit", data=data).status_code == 302
    assert client.post(f"/rotors/{rotor.id}/archive").status_code == 302
    assert "ED-1A</a>" not in client.get("/rotors/").get_data(as_text=True)
    assert "ED-1A</a>" in client.get("/rotors/?archived=1").get_data(as_text=True)


def test_rotor_list_search_and_pagination(client, login_as, shop, db):
    rt = shop.rotor_type()
    for n in range(27):
        shop.rotor(rt, serial_number=f"PG-{n:03d}")
    db.commit()
    login_as("operator")
    first = client.get("/rotors/?q=pg-").get_data(as_text=True)
    assert "page 1 of 2" in first and "PG-000" in first and "PG-026" not in first
    assert "PG-026" in client.get("/rotors/?q=pg-&page=2").get_data(as_text=True)


def _history(shop: Any, db: Session, n_jobs: int) -> Rotor:
    rotor = shop.rotor()
    machine = shop.machine()
    for i in range(n_jobs):
        job = shop.job(rotor, received_on=dt.date(2025, 1, 1) + dt.timedelta(days=10 * i),
                       state="dispatched", machine_id=machine.id,
                       number=f"H{n_jobs}-{i:03d}-{rotor.id}")
        for seq, purpose, amplitude in ((1, "initial", 80.0 + i), (2, "check", 3.0)):
            db.add(Run(job_id=job.id, seq=seq, purpose=purpose, speed_rpm=600.0,
                       readings=[RunReading(plane=1, amplitude=amplitude, angle_deg=30.0),
                                 RunReading(plane=2, amplitude=amplitude / 2, angle_deg=200.0)]))
    db.flush()
    return rotor


def test_rotor_history_lists_jobs_in_order_with_readings(client, login_as, shop, db):
    rotor = _history(shop, db, 3)
    db.commit()
    login_as("owner")
    text = client.get(f"/rotors/{rotor.id}").get_data(as_text=True)
    positions = [text.index(f"H3-{i:03d}-{rotor.id}") for i in range(3)]
    assert positions == sorted(positions)  # oldest first
    # Readings with 3 significant figures (core.display): 80 → "80.0", 3 → "3.00".
    assert "P1 80.0 g·mm" in text and "P1 3.00 g·mm" in text


def test_rotor_history_query_count_is_bounded(client, login_as, shop, db, count_queries):
    few = _history(shop, db, 3)
    many = _history(shop, db, 30)
    db.commit()
    login_as("operator")
    counts = []
    for rotor in (few, many):
        with count_queries() as q:
            assert client.get(f"/rotors/{rotor.id}").status_code == 200
        counts.append(q.count)
    assert counts[0] == counts[1]


def test_rotor_list_query_count_is_bounded(client, login_as, shop, db, count_queries):
    login_as("operator")
    shop.rotor()
    db.commit()
    with count_queries() as q_few:
        client.get("/rotors/")
    for _ in range(30):
        shop.rotor()  # each with its own rotor type and customer
    db.commit()
    with count_queries() as q_many:
        client.get("/rotors/")
    assert q_few.count == q_many.count


def test_rotor_types_list_query_count_is_bounded(client, login_as, shop, db, count_queries):
    login_as("operator")
    shop.rotor_type()
    db.commit()
    with count_queries() as q_few:
        client.get("/rotor-types/")
    for _ in range(30):
        shop.rotor_type()
    db.commit()
    with count_queries() as q_many:
        client.get("/rotor-types/")
    assert q_few.count == q_many.count


def test_two_people_editing_one_rotor_type_lose_nothing(client, login_as, make_user, shop, db):
    # The walk (customers; rotor types are edited by the same kind of form).
    from shopapp.registry import rotor_types
    from tests.registry.edits import drawn_stamp

    rt = shop.rotor_type()
    db.commit()
    part_number = rt.part_number
    login_as("operator")
    drawn = drawn_stamp(client.get(f"/rotor-types/{rt.id}/edit").get_data(as_text=True))
    rotor_types.update_rotor_type(db, rt, by=make_user("operator"), description="new drawing")
    db.commit()
    resp = client.post(f"/rotor-types/{rt.id}/edit", data=TYPE_FORM | {
        "customer": str(rt.customer_id), "drawn": drawn})
    assert resp.status_code == 422
    assert ("rotor type: saved by someone else since you opened this form (description "
            "changed)") in resp.get_data(as_text=True)
    db.refresh(rt)
    assert (rt.description, rt.part_number) == ("new drawing", part_number)  # not IMP-450


def test_two_people_editing_one_rotor_lose_nothing(client, login_as, make_user, shop, db):
    # The walk (customers; a rotor is edited by the same kind of form).
    from shopapp.registry import rotors
    from tests.registry.edits import drawn_stamp

    rotor = shop.rotor(serial_number="ED-7")
    db.commit()
    login_as("operator")
    drawn = drawn_stamp(client.get(f"/rotors/{rotor.id}/edit").get_data(as_text=True))
    rotors.update_rotor(db, rotor, by=make_user("operator"), notes="keyway worn")
    db.commit()
    resp = client.post(f"/rotors/{rotor.id}/edit", data={
        "rotor_type": str(rotor.rotor_type_id), "serial_number": "ED-7B", "drawn": drawn})
    assert resp.status_code == 422
    assert ("rotor: saved by someone else since you opened this form (notes changed)"
            in resp.get_data(as_text=True))
    db.refresh(rotor)
    assert (rotor.serial_number, rotor.notes) == ("ED-7", "keyway worn")

"""Registry services: validation per field, duplicates, audit events, permissions, lists."""

from __future__ import annotations

from typing import Any

import pytest
from sqlalchemy import func, select
from sqlalchemy.orm import Session

from shopapp.core.errors import PermissionDenied, ValidationFailed
from shopapp.models import AuditEvent, Customer, Machine, Rotor, RotorType
from shopapp.registry import customers, machines, queries, rotor_types, rotors

# A plausible two-plane fan (invented): 120 kg, bearings 800 mm apart, planes inboard.
GOOD: dict[str, Any] = {
    "part_number": "FAN-800",
    "mass_kg": 120.0,
    "service_speed_rpm": 1480.0,
    "bearing_a_mm": 0.0,
    "bearing_b_mm": 800.0,
    "centre_of_mass_mm": 400.0,
    "plane_1_mm": 150.0,
    "plane_2_mm": 650.0,
    "radius_1_mm": 300.0,
    "radius_2_mm": 300.0,
    "tolerance_grade": 6.3,
}


def _count(db: Session, model: type) -> int:
    return db.scalar(select(func.count()).select_from(model)) or 0


def _events(db: Session, entity: str, entity_id: int) -> list[AuditEvent]:
    return list(
        db.scalars(
            select(AuditEvent)
            .where(AuditEvent.entity == entity, AuditEvent.entity_id == entity_id)
            .order_by(AuditEvent.id)
        )
    )


# --------------------------------------------------------------------------- geometry


def test_good_geometry_has_no_errors() -> None:
    assert rotor_types.validate_geometry(GOOD) == {}


@pytest.mark.parametrize(
    ("change", "field", "words"),
    [
        ({"bearing_b_mm": 0.0}, "bearing_b_mm", "from bearing A"),
        ({"bearing_b_mm": 0.5}, "bearing_b_mm", "from bearing A"),
        ({"radius_1_mm": 0.0}, "radius_1_mm", "greater than 0"),
        ({"radius_2_mm": -5.0}, "radius_2_mm", "greater than 0"),
        ({"mass_kg": 0.0}, "mass_kg", "greater than 0"),
        ({"mass_kg": "nan"}, "mass_kg", "finite"),
        ({"mass_kg": float("inf")}, "mass_kg", "finite"),
        ({"mass_kg": "heavy"}, "mass_kg", "number"),
        ({"mass_kg": None}, "mass_kg", "required"),
        ({"mass_kg": 1e300}, "mass_kg", "at most"),
        ({"service_speed_rpm": -1480.0}, "service_speed_rpm", "greater than 0"),
        ({"first_critical_rpm": 0.0}, "first_critical_rpm", "greater than 0"),
        # Span 800 mm: allowed -1600 .. 2400 mm (two spans beyond a bearing).
        ({"centre_of_mass_mm": 2401.0}, "centre_of_mass_mm", "too far"),
        ({"plane_1_mm": -1601.0}, "plane_1_mm", "too far"),
        ({"plane_2_mm": 5000.0}, "plane_2_mm", "too far"),
        ({"plane_2_mm": None}, "plane_2_mm", "both"),
        ({"radius_2_mm": None}, "radius_2_mm", "both"),
        ({"plane_2_mm": 150.5}, "plane_2_mm", "away from plane 1"),
        ({"positions_1": 1}, "positions_1", "at least 2"),
        ({"positions_1": 2.5}, "positions_1", "whole"),
        ({"positions_1": 10_000}, "positions_1", "at most 360 fixed positions"),
        ({"method_1": "remove"}, "density_g_cm3", "required"),
        ({"method_2": "both"}, "density_g_cm3", "required"),
        ({"method_1": "glue"}, "method_1", "not allowed"),
        ({"method_1": "remove", "density_g_cm3": -7.85}, "density_g_cm3", "greater than 0"),
        ({"tolerance_grade": 5.0}, "tolerance_grade", "ISO 21940-11"),
        ({"tolerance_grade": None, "tolerance_gmm": 0.0}, "tolerance_gmm", "greater than 0"),
        ({"tolerance_gmm": 500.0}, "tolerance_gmm", "not both"),
        ({"first_position_1_deg": "north"}, "first_position_1_deg", "number"),
    ],
)
def test_bad_geometry_names_the_field(change: dict[str, Any], field: str, words: str) -> None:
    errors = rotor_types.validate_geometry(GOOD | change)
    assert field in errors, errors
    assert words in errors[field]


def test_overhung_rotor_within_two_spans_is_fine() -> None:
    # An overhung fan: impeller 900 mm beyond bearing B of a 500 mm span (inside 2 spans).
    values = GOOD | {"bearing_b_mm": 500.0, "centre_of_mass_mm": 1200.0,
                     "plane_1_mm": 1350.0, "plane_2_mm": 1450.0}
    assert rotor_types.validate_geometry(values) == {}


def test_iso_grades_from_the_series_are_accepted() -> None:
    # ISO 21940-11 grade series G 0.4 ... G 4000, each 2.5 times the last.
    for grade in (0.4, 1, 2.5, 6.3, 16, 40, 100, 250, 630, 1600, 4000):
        assert rotor_types.validate_geometry(GOOD | {"tolerance_grade": grade}) == {}


def test_single_plane_rotor_drops_plane_2_method() -> None:
    values = GOOD | {"plane_2_mm": None, "radius_2_mm": None, "method_2": "add"}
    clean, errors = rotor_types.clean_geometry(values)
    assert errors == {}
    assert clean["method_2"] is None


def test_positions_on_a_missing_plane_2_are_refused() -> None:
    values = GOOD | {"plane_2_mm": None, "radius_2_mm": None, "positions_2": 8}
    assert "positions_2" in rotor_types.validate_geometry(values)


# --------------------------------------------------------------------------- customers


def test_create_customer_writes_audit_event_in_the_same_transaction(db: Session, make_user):
    op = make_user("operator")
    c = customers.create_customer(db, by=op, name="  Northwind Fans  ", contact="R. Vale")
    assert c.name == "Northwind Fans"
    db.flush()
    cid = c.id
    (event,) = _events(db, "customer", cid)
    assert event.action == "create" and event.user_id == op.id
    assert event.after["name"] == "Northwind Fans"
    db.rollback()  # the change and its audit event go together
    assert db.get(Customer, cid) is None
    assert _events(db, "customer", cid) == []


def test_duplicate_customer_name_ignoring_case_is_refused(db: Session, make_user, shop):
    op = make_user("operator")
    shop.customer(name="Harbour Pumps")
    with pytest.raises(ValidationFailed) as exc:
        customers.create_customer(db, by=op, name="harbour pumps")
    assert exc.value.field == "name" and "already exists" in exc.value.message


@pytest.mark.parametrize(
    ("fields", "field"),
    [
        ({"name": ""}, "name"),
        ({"name": "x" * 201}, "name"),
        ({"name": "ok", "email": "not-an-address"}, "email"),
        ({"name": "ok", "phone": "1" * 65}, "phone"),
        ({"name": "bad\x00name"}, "name"),
    ],
)
def test_bad_customer_fields(db: Session, make_user, fields: dict[str, Any], field: str):
    op = make_user("operator")
    before = _count(db, Customer)
    with pytest.raises(ValidationFailed) as exc:
        customers.create_customer(db, by=op, **fields)
    assert field in exc.value.errors
    assert _count(db, Customer) == before


def test_owner_may_not_create_customers(db: Session, make_user):
    with pytest.raises(PermissionDenied):
        customers.create_customer(db, by=make_user("owner"), name="Anything Ltd")


def test_update_customer_audits_before_and_after(db: Session, make_user, shop):
    op = make_user("quality")
    c = shop.customer(name="Old Name Works")
    customers.update_customer(db, c, by=op, name="New Name Works")
    db.flush()
    (event,) = _events(db, "customer", c.id)
    assert event.action == "update"
    assert event.before["name"] == "Old Name Works"
    assert event.after["name"] == "New Name Works"


def test_update_customer_to_its_own_name_is_not_a_duplicate(db: Session, make_user, shop):
    c = shop.customer(name="Same Name Co")
    customers.update_customer(db, c, by=make_user("admin"), name="SAME NAME CO")
    assert c.name == "SAME NAME CO"


def test_archive_customer_hides_it_and_refuses_with_open_jobs(db: Session, make_user, shop):
    op = make_user("operator")
    rotor = shop.rotor()
    customer = db.get(Customer, rotor.customer_id)
    assert customer is not None
    job = shop.job(rotor)  # booked_in: still in the shop
    with pytest.raises(ValidationFailed, match="open job"):
        customers.archive_customer(db, customer, by=op)
    job.state = "dispatched"
    db.flush()
    customers.archive_customer(db, customer, by=op)
    assert customer.id not in {c.id for c in db.scalars(queries.customers_stmt())}
    assert customer.id in {c.id for c in db.scalars(queries.customers_stmt(include_archived=True))}
    customers.unarchive_customer(db, customer, by=op)
    db.flush()
    assert [e.action for e in _events(db, "customer", customer.id)] == ["archive", "unarchive"]


def test_customer_search_by_name_or_contact_case_insensitive(db: Session, shop):
    shop.customer(name="Quarry Rolls", contact="Dana Quill")
    shop.customer(name="Other Works", contact="QUILL Jr")
    shop.customer(name="Unrelated")
    names = [c.name for c in db.scalars(queries.customers_stmt("quill"))]
    assert names == ["Other Works", "Quarry Rolls"]  # ordered by name


def test_like_wildcards_in_search_are_literal(db: Session, shop):
    shop.customer(name="100% Balance")
    shop.customer(name="1000 Balance")
    assert [c.name for c in db.scalars(queries.customers_stmt("0%"))] == ["100% Balance"]


# --------------------------------------------------------------------------- rotor types


def test_create_rotor_type_and_duplicate_part_number(db: Session, make_user, shop):
    op = make_user("operator")
    customer = shop.customer()
    rt = rotor_types.create_rotor_type(db, by=op, customer=customer, **GOOD)
    assert rt.method_2 == "add"  # plane 2 takes plane 1's method when none is given
    db.flush()
    assert [e.action for e in _events(db, "rotor_type", rt.id)] == ["create"]
    with pytest.raises(ValidationFailed) as exc:
        rotor_types.create_rotor_type(
            db, by=op, customer=customer, **(GOOD | {"part_number": "fan-800"})
        )
    assert exc.value.field == "part_number"
    # The same part number at another customer is another drawing: allowed.
    rotor_types.create_rotor_type(db, by=op, customer=shop.customer(), **GOOD)


def test_create_rotor_type_reports_all_bad_fields_and_saves_nothing(db: Session, make_user, shop):
    customer = shop.customer()
    before = _count(db, RotorType)
    with pytest.raises(ValidationFailed) as exc:
        rotor_types.create_rotor_type(
            db, by=make_user("operator"), customer=customer,
            **(GOOD | {"mass_kg": -1, "radius_1_mm": 0, "part_number": ""}),
        )
    assert {"mass_kg", "radius_1_mm", "part_number"} <= set(exc.value.errors)
    assert _count(db, RotorType) == before


def test_rotor_type_for_archived_customer_is_refused(db: Session, make_user, shop):
    customer = shop.customer(archived=True)
    with pytest.raises(ValidationFailed, match="archived"):
        rotor_types.create_rotor_type(db, by=make_user("operator"), customer=customer, **GOOD)


def test_update_rotor_type_rechecks_the_merged_geometry(db: Session, make_user, shop):
    op = make_user("operator")
    rt = shop.rotor_type()
    with pytest.raises(ValidationFailed) as exc:
        rotor_types.update_rotor_type(db, rt, by=op, bearing_b_mm=rt.bearing_a_mm)
    assert "bearing_b_mm" in exc.value.errors
    rotor_types.update_rotor_type(db, rt, by=op, mass_kg=150.0)
    db.flush()
    (event,) = _events(db, "rotor_type", rt.id)
    assert event.before["mass_kg"] == 120.0 and event.after["mass_kg"] == 150.0


def test_update_rotor_type_unknown_field_is_a_programming_error(db: Session, make_user, shop):
    with pytest.raises(TypeError):
        rotor_types.update_rotor_type(db, shop.rotor_type(), by=make_user("operator"), colour="red")


def test_one_off_rotor_type_part_number_from_serial(db: Session, make_user, shop):
    op = make_user("operator")
    customer = shop.customer()
    geometry = {k: v for k, v in GOOD.items() if k != "part_number"}
    rt = rotor_types.create_one_off_rotor_type(
        db, by=op, customer=customer, serial_number=" X-77 ", **geometry
    )
    assert rt.one_off and rt.part_number == "one-off X-77"
    again = rotor_types.create_one_off_rotor_type(
        db, by=op, customer=customer, serial_number="X-77", **geometry
    )
    assert again.part_number == "one-off X-77 (2)"


def test_rotor_types_stmt_filters(db: Session, shop):
    a, b = shop.customer(), shop.customer()
    fan = shop.rotor_type(a, part_number="FX-1", kind="fan")
    shop.rotor_type(a, part_number="RX-1", kind="roll")
    shop.rotor_type(b, part_number="FX-2", kind="fan", archived=True)
    assert [r.id for r in db.scalars(queries.rotor_types_stmt("fx", a.id, "fan"))] == [fan.id]
    assert [r.part_number for r in db.scalars(queries.rotor_types_stmt("FX", kind="fan"))] == [
        "FX-1"
    ]
    assert len(list(db.scalars(queries.rotor_types_stmt("fx", include_archived=True)))) == 2


# --------------------------------------------------------------------------- rotors


def test_rotor_serial_unique_per_customer_ignoring_case(db: Session, make_user, shop):
    op = make_user("operator")
    rt = shop.rotor_type()
    customer = rt.customer
    rotor = rotors.create_rotor(db, by=op, customer=customer, rotor_type=rt, serial_number="SN-9")
    db.flush()
    assert [e.action for e in _events(db, "rotor", rotor.id)] == ["create"]
    before = _count(db, Rotor)
    with pytest.raises(ValidationFailed) as exc:
        rotors.create_rotor(db, by=op, customer=customer, rotor_type=rt, serial_number="sn-9")
    assert exc.value.field == "serial_number" and "already has" in exc.value.message
    assert _count(db, Rotor) == before
    # The same serial at another customer is another rotor.
    rt2 = shop.rotor_type()
    rotors.create_rotor(db, by=op, customer=rt2.customer, rotor_type=rt2, serial_number="SN-9")


def test_rotor_type_of_another_customer_is_refused(db: Session, make_user, shop):
    rt = shop.rotor_type()
    with pytest.raises(ValidationFailed) as exc:
        rotors.create_rotor(
            db, by=make_user("operator"), customer=shop.customer(), rotor_type=rt,
            serial_number="A1",
        )
    assert exc.value.field == "rotor_type_id"


def test_find_rotor_ignores_case_and_spaces(db: Session, shop):
    rotor = shop.rotor(serial_number="AB-123")
    assert rotors.find_rotor(db, rotor.customer_id, "  ab-123 ") is rotor
    assert rotors.find_rotor(db, rotor.customer_id, "AB-124") is None
    assert rotors.find_rotor(db, rotor.customer_id, "") is None
    assert rotors.find_rotor(db, rotor.customer_id + 999, "AB-123") is None


def test_update_and_archive_rotor(db: Session, make_user, shop):
    op = make_user("operator")
    rotor = shop.rotor(serial_number="R-1")
    shop.rotor(rotor.rotor_type, serial_number="R-2")
    with pytest.raises(ValidationFailed):
        rotors.update_rotor(db, rotor, by=op, serial_number="r-2")
    rotors.update_rotor(db, rotor, by=op, serial_number="R-1b", notes="balanced in 2026")
    job = shop.job(rotor)
    with pytest.raises(ValidationFailed, match="open job"):
        rotors.archive_rotor(db, rotor, by=op)
    job.state = "rejected"
    db.flush()
    rotors.archive_rotor(db, rotor, by=op)
    assert rotor.id not in {r.id for r in db.scalars(queries.rotors_stmt("R-1"))}
    every = queries.rotors_stmt("R-1", include_archived=True)
    assert rotor.id in {r.id for r in db.scalars(every)}


def test_archived_rotor_type_takes_no_new_rotors(db: Session, make_user, shop):
    op = make_user("operator")
    rt = shop.rotor_type()
    rotor_types.archive_rotor_type(db, rt, by=op)
    with pytest.raises(ValidationFailed, match="archived"):
        rotors.create_rotor(db, by=op, customer=rt.customer, rotor_type=rt, serial_number="Z1")


# --------------------------------------------------------------------------- machines

MACHINE: dict[str, Any] = {
    "name": "Bay 1 hard-bearing",
    "bearing_kind": "hard",
    "max_mass_kg": 3000.0,
    "max_speed_rpm": 2500.0,
    "claimed_emar_gmm_per_kg": 0.5,
    "reading_unit": "g·mm",
    "reading_planes": 2,
}


def test_machine_needs_quality_or_admin(db: Session, make_user):
    with pytest.raises(PermissionDenied):
        machines.create_machine(db, by=make_user("operator"), **MACHINE)
    machine = machines.create_machine(db, by=make_user("quality"), **MACHINE)
    assert machine.verification_interval_days == 365 and machine.min_mass_kg == 0.0
    db.flush()
    assert [e.action for e in _events(db, "machine", machine.id)] == ["create"]


def test_duplicate_machine_name_is_refused(db: Session, make_user, shop):
    shop.machine(name="Bay 2")
    before = _count(db, Machine)
    with pytest.raises(ValidationFailed) as exc:
        machines.create_machine(db, by=make_user("admin"), **(MACHINE | {"name": "BAY 2"}))
    assert exc.value.field == "name"
    assert _count(db, Machine) == before


@pytest.mark.parametrize(
    ("change", "field"),
    [
        ({"min_mass_kg": 3000.0}, "min_mass_kg"),
        ({"min_mass_kg": -1.0}, "min_mass_kg"),
        ({"max_speed_rpm": 0.0}, "max_speed_rpm"),
        ({"min_speed_rpm": 2600.0}, "min_speed_rpm"),
        ({"claimed_urr_pct": 101.0}, "claimed_urr_pct"),
        ({"claimed_urr_pct": 0.0}, "claimed_urr_pct"),
        ({"verification_interval_days": 0}, "verification_interval_days"),
        ({"verification_interval_days": 10**12}, "verification_interval_days"),
        ({"bearing_kind": "magnetic"}, "bearing_kind"),
        ({"suspension_resonance_rpm": "nan"}, "suspension_resonance_rpm"),
        ({"name": " "}, "name"),
    ],
)
def test_bad_machine_fields(db: Session, make_user, change: dict[str, Any], field: str):
    with pytest.raises(ValidationFailed) as exc:
        machines.create_machine(db, by=make_user("quality"), **(MACHINE | change))
    assert field in exc.value.errors


def test_archive_machine_refused_with_open_job_and_hidden_after(db: Session, make_user, shop):
    q = make_user("quality")
    machine = shop.machine()
    job = shop.job(machine_id=machine.id)
    with pytest.raises(ValidationFailed, match="open job"):
        machines.archive_machine(db, machine, by=q)
    job.state = "dispatched"
    db.flush()
    machines.archive_machine(db, machine, by=q)
    assert machine.id not in {m.id for m in db.scalars(queries.machines_stmt())}
    machines.update_machine(db, machine, by=q, notes="spare")
    machines.unarchive_machine(db, machine, by=q)
    assert machine.id in {m.id for m in db.scalars(queries.machines_stmt())}


def test_unique_race_is_converted_to_a_message(db: Session, make_user, shop, monkeypatch):
    """If the pre-check misses a concurrent insert, the database's unique key still answers."""
    shop.machine(name="Race")
    monkeypatch.setattr(
        machines, "_clean_machine", lambda s, v, x: dict(MACHINE | {"name": "Race"})
    )
    with pytest.raises(ValidationFailed) as exc:
        machines.create_machine(db, by=make_user("quality"), **MACHINE)
    assert exc.value.field == "name"
    # The outer transaction is still usable after the savepoint rolled back.
    assert _count(db, Machine) >= 1


# --------------------------------------------------------------------------- issue 11


def test_permitted_balancing_speed_defaults_to_the_service_speed(db: Session, make_user, shop):
    op = make_user("operator")
    rt = rotor_types.create_rotor_type(db, by=op, customer=shop.customer(), **GOOD)
    assert rt.permitted_balancing_speed_rpm is None
    assert rt.permitted_speed_rpm == rt.service_speed_rpm
    rotor_types.update_rotor_type(db, rt, by=op, permitted_balancing_speed_rpm=900.0)
    assert rt.permitted_speed_rpm == 900.0


def test_permitted_balancing_speed_may_not_exceed_the_service_speed(db: Session, make_user,
                                                                     shop):
    """Common shop practice: a balancing run never goes above the rotor's service speed
    (over-speed, rotor burst); the field may only lower the limit."""
    with pytest.raises(ValidationFailed) as exc:
        rotor_types.create_rotor_type(
            db, by=make_user("operator"), customer=shop.customer(),
            **(GOOD | {"permitted_balancing_speed_rpm": GOOD["service_speed_rpm"] + 1}))
    assert exc.value.field == "permitted_balancing_speed_rpm"
    assert "above the service speed" in exc.value.message


def test_a_machine_must_say_what_it_reads(db: Session, make_user):
    """Defect: a velocity machine looked like a calibrated one (g·mm was assumed)."""
    q = make_user("quality")
    with pytest.raises(ValidationFailed) as exc:
        machines.create_machine(db, by=q, **(MACHINE | {"reading_unit": ""}))
    assert exc.value.field == "reading_unit"
    with pytest.raises(ValidationFailed) as exc:
        machines.create_machine(db, by=q, **(MACHINE | {"reading_planes": 3}))
    assert exc.value.field == "reading_planes"
    m = machines.create_machine(db, by=q, **(MACHINE | {"reading_unit": "mm/s",
                                                        "reading_planes": 1}))
    assert (m.reading_unit, m.reading_planes) == ("mm/s", 1)

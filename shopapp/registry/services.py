"""Customers, rotor types, rotors and balancing machines: create, edit, archive, list.

Nothing with history is ever deleted: archiving hides a row from the default
lists and from new work, and unarchiving brings it back. Every change writes an
audit event (before/after snapshots) in the caller's transaction.

Rotor-type geometry rule (see :func:`validate_geometry`): positions are mm from
the shop's datum. With the bearing span ``L = |B − A|`` (at least
:data:`MIN_SPAN_MM`), the centre of mass and the correction planes must lie in
``[min(A, B) − k·L, max(A, B) + k·L]`` with ``k =`` :data:`OVERHANG_SPANS` —
an overhung fan or pulley may stand out up to twice the span beyond a bearing
(common practice, no source: wider than that is almost surely a typing error);
every position must also lie within ±:data:`MAX_POSITION_MM`.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from typing import Any

from sqlalchemy import Select, func, or_, select
from sqlalchemy.exc import IntegrityError
from sqlalchemy.orm import Session, joinedload

from shopapp.balancing.tolerance import GRADE_VALUES_MM_S
from shopapp.core import audit
from shopapp.core.errors import ValidationFailed
from shopapp.core.permissions import require
from shopapp.models import (
    BEARING_KINDS,
    CORRECTION_METHODS,
    JOB_STATES,
    KEY_CONVENTIONS,
    ROTATIONS,
    ROTOR_KINDS,
    Base,
    Customer,
    Job,
    Machine,
    Rotor,
    RotorType,
    User,
)

# Bounds that catch typing errors without getting in the way of real rotors.
MIN_SPAN_MM = 1.0
MIN_PLANE_GAP_MM = 1.0
OVERHANG_SPANS = 2.0
MAX_POSITION_MM = 100_000.0  # 100 m from the datum
MAX_MASS_KG = 500_000.0
MAX_SPEED_RPM = 500_000.0
MAX_RADIUS_MM = 10_000.0
MAX_DENSITY_G_CM3 = 25.0  # the densest metals are about 22.6 g/cm³
MAX_TOLERANCE_GMM = 1.0e9
MAX_FIXED_POSITIONS = 360
MAX_INTERVAL_DAYS = 3650
MAX_NOTES = 5000

# Jobs still in the shop: a customer, rotor or machine with one cannot be archived.
OPEN_JOB_STATES = tuple(s for s in JOB_STATES if s not in ("dispatched", "rejected"))

GEOMETRY_FIELDS: tuple[str, ...] = (
    "mass_kg",
    "service_speed_rpm",
    "first_critical_rpm",
    "bearing_a_mm",
    "bearing_b_mm",
    "centre_of_mass_mm",
    "plane_1_mm",
    "plane_2_mm",
    "radius_1_mm",
    "radius_2_mm",
    "method_1",
    "method_2",
    "positions_1",
    "positions_2",
    "first_position_1_deg",
    "first_position_2_deg",
    "density_g_cm3",
    "tolerance_grade",
    "tolerance_gmm",
)
# Keyway and key size for the half-key compensation: optional, not on the rotor-type form.
KEY_FIELDS: tuple[str, ...] = tuple(
    name
    for name in (
        "key_width_mm", "key_height_mm", "key_length_mm", "hub_length_mm", "key_radius_mm",
        "key_angle_deg",
    )
    if hasattr(RotorType, name)
)
ROTOR_TYPE_TEXT_FIELDS: tuple[str, ...] = (
    "part_number",
    "description",
    "kind",
    "rotation",
    "key_convention",
    "notes",
)
ROTOR_TYPE_FIELDS = ROTOR_TYPE_TEXT_FIELDS + GEOMETRY_FIELDS + KEY_FIELDS
CUSTOMER_FIELDS: tuple[str, ...] = (
    "name",
    "contact",
    "email",
    "phone",
    "address",
    "notes",
    "requires_residual_test",
)
ROTOR_FIELDS: tuple[str, ...] = ("serial_number", "notes", "rotor_type")
MACHINE_FIELDS: tuple[str, ...] = (
    "name",
    "bearing_kind",
    "min_mass_kg",
    "max_mass_kg",
    "min_speed_rpm",
    "max_speed_rpm",
    "claimed_emar_gmm_per_kg",
    "claimed_urr_pct",
    "suspension_resonance_rpm",
    "verification_interval_days",
    "notes",
)


# --------------------------------------------------------------------------- checks


class _Errors(dict[str, str]):
    """field → message; the first message for a field wins."""

    def add(self, field: str, message: str) -> None:
        self.setdefault(field, message)

    def raise_if_any(self) -> None:
        if self:
            field = next(iter(self))
            raise ValidationFailed(field, self[field], errors=dict(self))


def _blank(value: Any) -> bool:
    return value is None or (isinstance(value, str) and not value.strip())


def _number(
    errors: _Errors,
    field: str,
    value: Any,
    *,
    required: bool,
    minimum: float | None = None,
    above: float | None = None,
    maximum: float | None = None,
    unit: str = "",
) -> float | None:
    """``value`` as a finite float within bounds, or None (and a message in ``errors``)."""
    if _blank(value):
        if required:
            errors.add(field, "is required")
        return None
    if isinstance(value, bool):
        errors.add(field, f"must be a number, got {value!r}")
        return None
    try:
        out = float(value)
    except (TypeError, ValueError, OverflowError):
        errors.add(field, f"must be a number, got {str(value)[:40]!r}")
        return None
    if not math.isfinite(out):
        errors.add(field, f"must be a finite number, got {str(value)[:40]!r}")
        return None
    suffix = f" {unit}" if unit else ""
    if above is not None and out <= above:
        errors.add(field, f"must be greater than {above:g}{suffix}, got {out:g}")
    elif minimum is not None and out < minimum:
        errors.add(field, f"must be at least {minimum:g}{suffix}, got {out:g}")
    elif maximum is not None and out > maximum:
        errors.add(field, f"must be at most {maximum:g}{suffix}, got {out:g}")
    else:
        return out
    return None


def _integer(
    errors: _Errors, field: str, value: Any, *, required: bool, minimum: int, maximum: int
) -> int | None:
    if _blank(value):
        if required:
            errors.add(field, "is required")
        return None
    number = _number(errors, field, value, required=required)
    if number is None:
        return None
    if not number.is_integer():
        errors.add(field, f"must be a whole number, got {number:g}")
        return None
    out = int(number)
    if not minimum <= out <= maximum:
        errors.add(field, f"must be between {minimum} and {maximum}, got {out}")
        return None
    return out


def _text(
    errors: _Errors, field: str, value: Any, *, max_len: int, required: bool = False
) -> str:
    text = "" if value is None else str(value).strip()
    if required and not text:
        errors.add(field, "is required")
    elif len(text) > max_len:
        errors.add(field, f"is too long: {len(text)} characters, at most {max_len} allowed")
    elif any(ord(ch) < 32 and ch not in "\n\r\t" for ch in text):
        errors.add(field, "contains control characters; type plain text")
    return text


def _choice(
    errors: _Errors, field: str, value: Any, allowed: tuple[str, ...], *, required: bool = True
) -> str | None:
    if _blank(value):
        if required:
            errors.add(field, f"is required; choose one of {', '.join(allowed)}")
        return None
    if value not in allowed:
        errors.add(field, f"{str(value)[:40]!r} is not allowed; choose one of {', '.join(allowed)}")
        return None
    return str(value)


def _clean_geometry(values: Mapping[str, Any]) -> tuple[dict[str, Any], _Errors]:
    """Checked and normalised geometry values, and the messages for the bad ones."""
    e = _Errors()
    v = values.get
    out: dict[str, Any] = {}
    out["mass_kg"] = _number(
        e, "mass_kg", v("mass_kg"), required=True, above=0, maximum=MAX_MASS_KG, unit="kg"
    )
    for name, required in (("service_speed_rpm", True), ("first_critical_rpm", False)):
        out[name] = _number(
            e, name, v(name), required=required, above=0, maximum=MAX_SPEED_RPM, unit="rpm"
        )
    for name, required in (
        ("bearing_a_mm", True),
        ("bearing_b_mm", True),
        ("centre_of_mass_mm", True),
        ("plane_1_mm", True),
        ("plane_2_mm", False),
    ):
        out[name] = _number(
            e, name, v(name), required=required, minimum=-MAX_POSITION_MM,
            maximum=MAX_POSITION_MM, unit="mm",
        )
    for name, required in (("radius_1_mm", True), ("radius_2_mm", False)):
        out[name] = _number(
            e, name, v(name), required=required, above=0, maximum=MAX_RADIUS_MM, unit="mm"
        )
    out["method_1"] = _choice(e, "method_1", v("method_1") or "add", CORRECTION_METHODS)
    out["method_2"] = _choice(e, "method_2", v("method_2"), CORRECTION_METHODS, required=False)
    for name in ("positions_1", "positions_2"):
        count = _integer(e, name, v(name), required=False, minimum=0, maximum=MAX_FIXED_POSITIONS)
        if count is not None and count < 2:
            if count == 0:
                count = None  # 0 means "free position", the same as leaving it empty
            else:
                e.add(name, "must be at least 2 fixed positions (blades, holes), or empty if free")
        out[name] = count
    for name in ("first_position_1_deg", "first_position_2_deg"):
        angle = _number(e, name, v(name), required=False, minimum=-360, maximum=360, unit="°")
        out[name] = 0.0 if angle is None else angle % 360.0
    out["density_g_cm3"] = _number(
        e, "density_g_cm3", v("density_g_cm3"), required=False, above=0,
        maximum=MAX_DENSITY_G_CM3, unit="g/cm³",
    )
    out["tolerance_gmm"] = _number(
        e, "tolerance_gmm", v("tolerance_gmm"), required=False, above=0,
        maximum=MAX_TOLERANCE_GMM, unit="g·mm",
    )
    grade = _number(e, "tolerance_grade", v("tolerance_grade"), required=False, above=0)
    if grade is not None and not any(math.isclose(grade, g) for g in GRADE_VALUES_MM_S):
        allowed = ", ".join(f"G {g:g}" for g in GRADE_VALUES_MM_S)
        e.add("tolerance_grade", f"G {grade:g} is not an ISO 21940-11 grade; use one of {allowed}")
        grade = None
    out["tolerance_grade"] = grade
    if out["tolerance_grade"] is not None and out["tolerance_gmm"] is not None:
        e.add("tolerance_gmm", "give a balance grade or an explicit limit in g·mm, not both")

    for name in KEY_FIELDS:
        if name not in values:
            continue
        if name == "key_angle_deg":
            angle = _number(e, name, v(name), required=False, minimum=-360, maximum=360, unit="°")
            out[name] = None if angle is None else angle % 360.0
        else:
            out[name] = _number(
                e, name, v(name), required=False, above=0, maximum=MAX_RADIUS_MM, unit="mm"
            )

    # Relations between fields, checked only when the fields themselves are fine.
    a, b, c = out["bearing_a_mm"], out["bearing_b_mm"], out["centre_of_mass_mm"]
    p1, p2 = out["plane_1_mm"], out["plane_2_mm"]
    if a is not None and b is not None:
        span = abs(b - a)
        if span < MIN_SPAN_MM:
            e.add(
                "bearing_b_mm",
                f"bearings A and B must be at least {MIN_SPAN_MM:g} mm apart "
                f"(A = {a:g} mm, B = {b:g} mm)",
            )
        else:
            lo, hi = min(a, b) - OVERHANG_SPANS * span, max(a, b) + OVERHANG_SPANS * span
            for name, pos in (("centre_of_mass_mm", c), ("plane_1_mm", p1), ("plane_2_mm", p2)):
                if pos is not None and not lo <= pos <= hi:
                    e.add(
                        name,
                        f"{pos:g} mm is too far from the bearings: allowed {lo:g} to {hi:g} mm "
                        f"(up to {OVERHANG_SPANS:g} bearing spans beyond a bearing)",
                    )
    plane_2_given = [x is not None for x in (p2, out["radius_2_mm"])]
    if any(plane_2_given) and not all(plane_2_given):
        missing = "plane_2_mm" if p2 is None else "radius_2_mm"
        if missing not in e:
            e.add(missing, "plane 2 needs both its position and its radius (or neither)")
    if p2 is None and "plane_2_mm" not in e and "radius_2_mm" not in e:
        if out["positions_2"] is not None:
            e.add("positions_2", "there is no plane 2: give its position and radius first")
        out["method_2"] = None
    elif p2 is not None:
        if out["method_2"] is None and "method_2" not in e:
            out["method_2"] = out["method_1"]
        if p1 is not None and abs(p2 - p1) < MIN_PLANE_GAP_MM:
            e.add("plane_2_mm", f"must be at least {MIN_PLANE_GAP_MM:g} mm away from plane 1")
    removes = [out["method_1"], out["method_2"]]
    if any(m in ("remove", "both") for m in removes) and out["density_g_cm3"] is None:
        e.add(
            "density_g_cm3",
            "is required when mass may be removed (method remove or both): "
            "e.g. 7.85 g/cm³ for steel",
        )
    return out, e


def validate_geometry(values: Mapping[str, Any]) -> dict[str, str]:
    """Check a rotor type's geometry; return field → message (empty when all is fine).

    Rules: mass, speeds, radii and density > 0 (density required when a plane's
    method is ``remove`` or ``both``); bearings at least 1 mm apart; centre of
    mass and correction planes within two bearing spans beyond either bearing
    (module docstring); plane 2 complete (position and radius) or absent and at
    least 1 mm from plane 1; fixed-position count ≥ 2 when set (0 or empty =
    free); grade one of the ISO 21940-11 series, or an explicit limit > 0 g·mm,
    not both. NaN, infinity and non-numbers are refused everywhere.

    Parameters
    ----------
    values : mapping
        Field name (:data:`GEOMETRY_FIELDS`) → value (number, numeric string or None).
    """
    return dict(_clean_geometry(values)[1])


# --------------------------------------------------------------------------- helpers


def _audit(
    session: Session,
    by: User,
    obj: Base,
    entity: str,
    action: str,
    before: dict[str, Any] | None,
) -> None:
    audit.record(
        session,
        by=by,
        entity=entity,
        entity_id=obj.id,  # type: ignore[attr-defined]
        action=action,
        before=before,
        after=audit.snapshot(obj),
    )


def _is_unique_violation(exc: IntegrityError) -> bool:
    orig = exc.orig
    return getattr(orig, "sqlstate", None) == "23505" or "UNIQUE" in str(orig).upper()


def _flush(session: Session, obj: Base, field: str, message: str) -> None:
    """Flush ``obj`` inside a savepoint, so a lost race on a unique key is a message."""
    try:
        with session.begin_nested():
            session.add(obj)
            session.flush()
    except IntegrityError as exc:
        if _is_unique_violation(exc):
            raise ValidationFailed(field, message) from exc
        raise


def _unknown(fields: Mapping[str, Any], allowed: tuple[str, ...]) -> None:
    extra = sorted(set(fields) - set(allowed))
    if extra:
        raise TypeError(f"unknown field(s): {', '.join(extra)}")


def _open_jobs(session: Session, column: Any, value: int) -> int:
    stmt = (
        select(func.count())
        .select_from(Job)
        .where(column == value, Job.state.in_(OPEN_JOB_STATES))
    )
    return session.scalar(stmt) or 0


def _set_archived(
    session: Session, obj: Base, *, by: User, entity: str, archived: bool
) -> None:
    before = audit.snapshot(obj)
    obj.archived = archived  # type: ignore[attr-defined]
    session.flush()
    _audit(session, by, obj, entity, "archive" if archived else "unarchive", before)


# --------------------------------------------------------------------------- customers


def _clean_customer(values: Mapping[str, Any]) -> tuple[dict[str, Any], _Errors]:
    e = _Errors()
    out = {
        "name": _text(e, "name", values.get("name"), max_len=200, required=True),
        "contact": _text(e, "contact", values.get("contact"), max_len=200),
        "email": _text(e, "email", values.get("email"), max_len=200),
        "phone": _text(e, "phone", values.get("phone"), max_len=64),
        "address": _text(e, "address", values.get("address"), max_len=2000),
        "notes": _text(e, "notes", values.get("notes"), max_len=MAX_NOTES),
        "requires_residual_test": bool(values.get("requires_residual_test")),
    }
    email = out["email"]
    if email and "email" not in e and (
        email.count("@") != 1 or email.startswith("@") or email.endswith("@") or " " in email
    ):
        e.add("email", f"{email!r} is not an e-mail address (name@example.org), or leave it empty")
    return out, e


def _customer_name_taken(session: Session, name: str, exclude_id: int | None) -> Customer | None:
    stmt = select(Customer).where(func.lower(Customer.name) == name.lower())
    if exclude_id is not None:
        stmt = stmt.where(Customer.id != exclude_id)
    return session.scalars(stmt.limit(1)).first()


def _check_customer_name(session: Session, e: _Errors, name: str, exclude_id: int | None) -> None:
    if "name" in e:
        return
    other = _customer_name_taken(session, name, exclude_id)
    if other is not None:
        where = " (archived: unarchive it instead)" if other.archived else ""
        e.add("name", f"a customer called {other.name!r} already exists{where}")


def create_customer(
    session: Session,
    *,
    by: User,
    name: str,
    contact: str = "",
    email: str = "",
    phone: str = "",
    address: str = "",
    notes: str = "",
    requires_residual_test: bool = False,
) -> Customer:
    """Create a customer. Names are unique, ignoring case.

    Raises
    ------
    PermissionDenied
        ``by`` may not edit the registry.
    ValidationFailed
        Missing name, too long text, a bad e-mail address or a duplicate name.
    """
    require(by, "edit_registry")
    clean, e = _clean_customer(
        {
            "name": name, "contact": contact, "email": email, "phone": phone,
            "address": address, "notes": notes, "requires_residual_test": requires_residual_test,
        }
    )
    _check_customer_name(session, e, clean["name"], None)
    e.raise_if_any()
    customer = Customer(**clean)
    _flush(session, customer, "name", f"a customer called {clean['name']!r} already exists")
    _audit(session, by, customer, "customer", "create", None)
    return customer


def update_customer(session: Session, customer: Customer, *, by: User, **fields: Any) -> Customer:
    """Change some of a customer's fields (:data:`CUSTOMER_FIELDS`); same rules as create."""
    require(by, "edit_registry")
    _unknown(fields, CUSTOMER_FIELDS)
    merged = {name: getattr(customer, name) for name in CUSTOMER_FIELDS} | fields
    clean, e = _clean_customer(merged)
    _check_customer_name(session, e, clean["name"], customer.id)
    e.raise_if_any()
    before = audit.snapshot(customer)
    for name, value in clean.items():
        setattr(customer, name, value)
    _flush(session, customer, "name", f"a customer called {clean['name']!r} already exists")
    _audit(session, by, customer, "customer", "update", before)
    return customer


def archive_customer(session: Session, customer: Customer, *, by: User) -> Customer:
    """Hide a customer from the lists and from new work; refused while it has open jobs."""
    require(by, "edit_registry")
    open_jobs = _open_jobs(session, Job.customer_id, customer.id)
    if open_jobs:
        raise ValidationFailed(
            "archived",
            f"{customer.name} has {open_jobs} open job(s); dispatch or reject them first",
        )
    _set_archived(session, customer, by=by, entity="customer", archived=True)
    return customer


def unarchive_customer(session: Session, customer: Customer, *, by: User) -> Customer:
    """Bring an archived customer back."""
    require(by, "edit_registry")
    _set_archived(session, customer, by=by, entity="customer", archived=False)
    return customer


# --------------------------------------------------------------------------- rotor types


def _clean_rotor_type(
    session: Session,
    values: Mapping[str, Any],
    customer: Customer,
    exclude_id: int | None,
) -> dict[str, Any]:
    clean, e = _clean_geometry(values)
    v = values.get
    clean["part_number"] = _text(e, "part_number", v("part_number"), max_len=100, required=True)
    clean["description"] = _text(e, "description", v("description"), max_len=200)
    clean["kind"] = _choice(e, "kind", v("kind") or "other", ROTOR_KINDS)
    clean["rotation"] = _choice(e, "rotation", v("rotation") or "cw", ROTATIONS)
    clean["key_convention"] = _choice(
        e, "key_convention", v("key_convention") or "none", KEY_CONVENTIONS
    )
    clean["notes"] = _text(e, "notes", v("notes"), max_len=MAX_NOTES)
    if "part_number" not in e:
        stmt = select(RotorType.id).where(
            RotorType.customer_id == customer.id,
            func.lower(RotorType.part_number) == clean["part_number"].lower(),
        )
        if exclude_id is not None:
            stmt = stmt.where(RotorType.id != exclude_id)
        if session.scalar(stmt.limit(1)) is not None:
            e.add(
                "part_number",
                f"{customer.name} already has a rotor type with part number "
                f"{clean['part_number']!r}",
            )
    e.raise_if_any()
    return clean


def _require_live_customer(customer: Customer | None, field: str = "customer_id") -> Customer:
    if customer is None:
        raise ValidationFailed(field, "is required; choose a customer")
    if customer.archived:
        raise ValidationFailed(field, f"{customer.name} is archived; unarchive it first")
    return customer


def create_rotor_type(
    session: Session, *, by: User, customer: Customer, **values: Any
) -> RotorType:
    """Create a customer's rotor type (part number and geometry).

    ``values`` are the fields of :data:`ROTOR_TYPE_FIELDS`; the geometry is
    checked by :func:`validate_geometry`, part numbers are unique per customer
    (ignoring case).
    """
    require(by, "edit_registry")
    _unknown(values, (*ROTOR_TYPE_FIELDS, "one_off"))
    _require_live_customer(customer)
    one_off = bool(values.pop("one_off", False))
    clean = _clean_rotor_type(session, values, customer, None)
    rotor_type = RotorType(customer_id=customer.id, one_off=one_off, **clean)
    _flush(
        session, rotor_type, "part_number",
        f"{customer.name} already has a rotor type with part number {clean['part_number']!r}",
    )
    _audit(session, by, rotor_type, "rotor_type", "create", None)
    return rotor_type


def update_rotor_type(
    session: Session, rotor_type: RotorType, *, by: User, **fields: Any
) -> RotorType:
    """Change some fields of a rotor type; the whole geometry is re-checked."""
    require(by, "edit_registry")
    _unknown(fields, ROTOR_TYPE_FIELDS)
    merged = {name: getattr(rotor_type, name) for name in ROTOR_TYPE_FIELDS} | fields
    clean = _clean_rotor_type(session, merged, rotor_type.customer, rotor_type.id)
    before = audit.snapshot(rotor_type)
    for name, value in clean.items():
        setattr(rotor_type, name, value)
    _flush(
        session, rotor_type, "part_number",
        f"{rotor_type.customer.name} already has part number {clean['part_number']!r}",
    )
    _audit(session, by, rotor_type, "rotor_type", "update", before)
    return rotor_type


def archive_rotor_type(session: Session, rotor_type: RotorType, *, by: User) -> RotorType:
    """Hide a rotor type from the lists and from new rotors (its rotors keep it)."""
    require(by, "edit_registry")
    _set_archived(session, rotor_type, by=by, entity="rotor_type", archived=True)
    return rotor_type


def unarchive_rotor_type(session: Session, rotor_type: RotorType, *, by: User) -> RotorType:
    require(by, "edit_registry")
    _set_archived(session, rotor_type, by=by, entity="rotor_type", archived=False)
    return rotor_type


ONE_OFF_PREFIX = "one-off "


def create_one_off_rotor_type(
    session: Session, *, by: User, customer: Customer, serial_number: str, **geometry: Any
) -> RotorType:
    """A rotor type of its own for a one-off rotor (``one_off`` set).

    The part number is ``"one-off <serial>"`` (with `` (2)``, `` (3)``… if that
    is taken); ``geometry`` takes the fields of :data:`ROTOR_TYPE_FIELDS`
    except ``part_number``.
    """
    require(by, "edit_registry")
    geometry.pop("part_number", None)
    e = _Errors()
    serial = _text(e, "serial_number", serial_number, max_len=100, required=True)
    e.raise_if_any()
    _require_live_customer(customer)
    base = f"{ONE_OFF_PREFIX}{serial}"[:90]
    taken = set(
        session.scalars(
            select(func.lower(RotorType.part_number)).where(
                RotorType.customer_id == customer.id,
                func.lower(RotorType.part_number).like(_like_prefix(base.lower()), escape="\\"),
            )
        )
    )
    part_number, n = base, 1
    while part_number.lower() in taken:
        n += 1
        part_number = f"{base} ({n})"
    geometry.setdefault("description", f"one-off rotor {serial}"[:200])
    return create_rotor_type(
        session, by=by, customer=customer, part_number=part_number, one_off=True, **geometry
    )


# --------------------------------------------------------------------------- rotors


def _serial_taken(
    session: Session, customer_id: int, serial: str, exclude_id: int | None
) -> Rotor | None:
    stmt = select(Rotor).where(
        Rotor.customer_id == customer_id, func.lower(Rotor.serial_number) == serial.lower()
    )
    if exclude_id is not None:
        stmt = stmt.where(Rotor.id != exclude_id)
    return session.scalars(stmt.limit(1)).first()


def _clean_rotor(
    session: Session,
    customer: Customer,
    rotor_type: RotorType | None,
    serial_number: Any,
    notes: Any,
    exclude_id: int | None,
) -> dict[str, Any]:
    e = _Errors()
    serial = _text(e, "serial_number", serial_number, max_len=100, required=True)
    clean_notes = _text(e, "notes", notes, max_len=MAX_NOTES)
    if rotor_type is None:
        e.add("rotor_type_id", "is required; choose the rotor type (part number)")
    elif rotor_type.customer_id != customer.id:
        e.add(
            "rotor_type_id",
            f"rotor type {rotor_type.part_number!r} belongs to another customer",
        )
    if "serial_number" not in e:
        other = _serial_taken(session, customer.id, serial, exclude_id)
        if other is not None:
            where = " (archived)" if other.archived else ""
            e.add(
                "serial_number",
                f"{customer.name} already has a rotor with serial {other.serial_number!r}{where}",
            )
    e.raise_if_any()
    return {"serial_number": serial, "notes": clean_notes}


def create_rotor(
    session: Session,
    *,
    by: User,
    customer: Customer,
    rotor_type: RotorType,
    serial_number: str,
    notes: str = "",
) -> Rotor:
    """Register a rotor of ``customer``. Serial numbers are unique per customer (ignoring case)."""
    require(by, "edit_registry")
    _require_live_customer(customer)
    if rotor_type is not None and rotor_type.archived:
        raise ValidationFailed(
            "rotor_type_id", f"rotor type {rotor_type.part_number!r} is archived"
        )
    clean = _clean_rotor(session, customer, rotor_type, serial_number, notes, None)
    rotor = Rotor(customer_id=customer.id, rotor_type_id=rotor_type.id, **clean)
    _flush(
        session, rotor, "serial_number",
        f"{customer.name} already has a rotor with serial {clean['serial_number']!r}",
    )
    _audit(session, by, rotor, "rotor", "create", None)
    return rotor


def update_rotor(session: Session, rotor: Rotor, *, by: User, **fields: Any) -> Rotor:
    """Change a rotor's serial number, notes or rotor type (of the same customer)."""
    require(by, "edit_registry")
    _unknown(fields, ROTOR_FIELDS)
    rotor_type = fields.get("rotor_type", rotor.rotor_type)
    clean = _clean_rotor(
        session,
        rotor.customer,
        rotor_type,
        fields.get("serial_number", rotor.serial_number),
        fields.get("notes", rotor.notes),
        rotor.id,
    )
    before = audit.snapshot(rotor)
    rotor.serial_number = clean["serial_number"]
    rotor.notes = clean["notes"]
    rotor.rotor_type = rotor_type
    _flush(
        session, rotor, "serial_number",
        f"{rotor.customer.name} already has a rotor with serial {clean['serial_number']!r}",
    )
    _audit(session, by, rotor, "rotor", "update", before)
    return rotor


def archive_rotor(session: Session, rotor: Rotor, *, by: User) -> Rotor:
    """Hide a rotor from the lists (its history stays); refused while it has an open job."""
    require(by, "edit_registry")
    open_jobs = _open_jobs(session, Job.rotor_id, rotor.id)
    if open_jobs:
        raise ValidationFailed(
            "archived", f"rotor {rotor.serial_number} has an open job; finish that first"
        )
    _set_archived(session, rotor, by=by, entity="rotor", archived=True)
    return rotor


def unarchive_rotor(session: Session, rotor: Rotor, *, by: User) -> Rotor:
    require(by, "edit_registry")
    _set_archived(session, rotor, by=by, entity="rotor", archived=False)
    return rotor


def find_rotor(session: Session, customer_id: int, serial_number: str) -> Rotor | None:
    """The customer's rotor with this serial (ignoring case and outer spaces), or None.

    Archived rotors are found too: their serial is still taken, and a rotor that
    comes back after years is the same rotor with the same history.
    """
    serial = (serial_number or "").strip()
    if not serial:
        return None
    stmt = (
        select(Rotor)
        .options(joinedload(Rotor.rotor_type))
        .where(Rotor.customer_id == customer_id, func.lower(Rotor.serial_number) == serial.lower())
        .order_by(Rotor.id)
        .limit(1)
    )
    return session.scalars(stmt).first()


# --------------------------------------------------------------------------- machines


def _clean_machine(
    session: Session, values: Mapping[str, Any], exclude_id: int | None
) -> dict[str, Any]:
    e = _Errors()
    v = values.get
    out: dict[str, Any] = {
        "name": _text(e, "name", v("name"), max_len=100, required=True),
        "bearing_kind": _choice(e, "bearing_kind", v("bearing_kind"), BEARING_KINDS),
        "notes": _text(e, "notes", v("notes"), max_len=MAX_NOTES),
    }
    for name, maximum, unit in (
        ("min_mass_kg", MAX_MASS_KG, "kg"),
        ("max_mass_kg", MAX_MASS_KG, "kg"),
        ("min_speed_rpm", MAX_SPEED_RPM, "rpm"),
        ("max_speed_rpm", MAX_SPEED_RPM, "rpm"),
    ):
        low_end = name.startswith("min_")
        raw = v(name)
        if low_end and _blank(raw):
            raw = 0.0
        out[name] = _number(
            e, name, raw, required=True, minimum=0.0 if low_end else None,
            above=None if low_end else 0.0, maximum=maximum, unit=unit,
        )
    for low, high, unit in (
        ("min_mass_kg", "max_mass_kg", "kg"),
        ("min_speed_rpm", "max_speed_rpm", "rpm"),
    ):
        if out[low] is not None and out[high] is not None and out[low] >= out[high]:
            e.add(low, f"must be below the maximum ({out[high]:g} {unit}), got {out[low]:g}")
    out["claimed_emar_gmm_per_kg"] = _number(
        e, "claimed_emar_gmm_per_kg", v("claimed_emar_gmm_per_kg"), required=False, above=0,
        maximum=10_000.0, unit="g·mm/kg",
    )
    out["claimed_urr_pct"] = _number(
        e, "claimed_urr_pct", v("claimed_urr_pct"), required=False, above=0, maximum=100, unit="%"
    )
    out["suspension_resonance_rpm"] = _number(
        e, "suspension_resonance_rpm", v("suspension_resonance_rpm"), required=False, above=0,
        maximum=MAX_SPEED_RPM, unit="rpm",
    )
    out["verification_interval_days"] = _integer(
        e, "verification_interval_days",
        365 if _blank(v("verification_interval_days")) else v("verification_interval_days"),
        required=True, minimum=1, maximum=MAX_INTERVAL_DAYS,
    )
    if "name" not in e:
        stmt = select(Machine.name).where(func.lower(Machine.name) == out["name"].lower())
        if exclude_id is not None:
            stmt = stmt.where(Machine.id != exclude_id)
        other = session.scalar(stmt.limit(1))
        if other is not None:
            e.add("name", f"a machine called {other!r} already exists; machine names are unique")
    e.raise_if_any()
    return out


def create_machine(session: Session, *, by: User, **values: Any) -> Machine:
    """Add a balancing machine (:data:`MACHINE_FIELDS`). Needs ``edit_machines`` (quality, admin).

    Mass and speed ranges: minimum ≥ 0 and below the maximum; the claimed
    minimum achievable residual specific unbalance (g·mm/kg) > 0; the claimed
    unbalance reduction ratio in (0, 100] %; verification interval 1–3650 days.
    """
    require(by, "edit_machines")
    _unknown(values, MACHINE_FIELDS)
    clean = _clean_machine(session, values, None)
    machine = Machine(**clean)
    _flush(session, machine, "name", f"a machine called {clean['name']!r} already exists")
    _audit(session, by, machine, "machine", "create", None)
    return machine


def update_machine(session: Session, machine: Machine, *, by: User, **fields: Any) -> Machine:
    """Change some of a machine's fields; same rules as :func:`create_machine`."""
    require(by, "edit_machines")
    _unknown(fields, MACHINE_FIELDS)
    merged = {name: getattr(machine, name) for name in MACHINE_FIELDS} | fields
    clean = _clean_machine(session, merged, machine.id)
    before = audit.snapshot(machine)
    for name, value in clean.items():
        setattr(machine, name, value)
    _flush(session, machine, "name", f"a machine called {clean['name']!r} already exists")
    _audit(session, by, machine, "machine", "update", before)
    return machine


def archive_machine(session: Session, machine: Machine, *, by: User) -> Machine:
    """Retire a machine from new work; refused while a job on it is still open."""
    require(by, "edit_machines")
    open_jobs = _open_jobs(session, Job.machine_id, machine.id)
    if open_jobs:
        raise ValidationFailed(
            "archived", f"{machine.name} has {open_jobs} open job(s); move or finish them first"
        )
    _set_archived(session, machine, by=by, entity="machine", archived=True)
    return machine


def unarchive_machine(session: Session, machine: Machine, *, by: User) -> Machine:
    require(by, "edit_machines")
    _set_archived(session, machine, by=by, entity="machine", archived=False)
    return machine


# --------------------------------------------------------------------------- lists


def _like_prefix(text: str) -> str:
    return _escape_like(text) + "%"


def _escape_like(text: str) -> str:
    return text.replace("\\", "\\\\").replace("%", "\\%").replace("_", "\\_")


def _contains(q: str) -> str:
    return f"%{_escape_like(q.strip()[:100])}%"


def customers_stmt(q: str | None = None, include_archived: bool = False) -> Select[Any]:
    """Customers by name; ``q`` searches name and contact (case-insensitive)."""
    stmt = select(Customer)
    if q and q.strip():
        pattern = _contains(q)
        stmt = stmt.where(
            or_(
                Customer.name.ilike(pattern, escape="\\"),
                Customer.contact.ilike(pattern, escape="\\"),
            )
        )
    if not include_archived:
        stmt = stmt.where(Customer.archived.is_(False))
    return stmt.order_by(func.lower(Customer.name), Customer.id)


def rotor_types_stmt(
    q: str | None = None,
    customer_id: int | None = None,
    kind: str | None = None,
    include_archived: bool = False,
) -> Select[Any]:
    """Rotor types (with their customer loaded) by part number; ``q`` searches
    part number and description."""
    stmt = select(RotorType).options(joinedload(RotorType.customer))
    if q and q.strip():
        pattern = _contains(q)
        stmt = stmt.where(
            or_(
                RotorType.part_number.ilike(pattern, escape="\\"),
                RotorType.description.ilike(pattern, escape="\\"),
            )
        )
    if customer_id is not None:
        stmt = stmt.where(RotorType.customer_id == customer_id)
    if kind:
        stmt = stmt.where(RotorType.kind == kind)
    if not include_archived:
        stmt = stmt.where(RotorType.archived.is_(False))
    return stmt.order_by(func.lower(RotorType.part_number), RotorType.id)


def rotors_stmt(
    q: str | None = None,
    customer_id: int | None = None,
    rotor_type_id: int | None = None,
    include_archived: bool = False,
) -> Select[Any]:
    """Rotors (customer and rotor type loaded) by serial; ``q`` searches the serial."""
    stmt = select(Rotor).options(joinedload(Rotor.customer), joinedload(Rotor.rotor_type))
    if q and q.strip():
        stmt = stmt.where(Rotor.serial_number.ilike(_contains(q), escape="\\"))
    if customer_id is not None:
        stmt = stmt.where(Rotor.customer_id == customer_id)
    if rotor_type_id is not None:
        stmt = stmt.where(Rotor.rotor_type_id == rotor_type_id)
    if not include_archived:
        stmt = stmt.where(Rotor.archived.is_(False))
    return stmt.order_by(func.lower(Rotor.serial_number), Rotor.id)


def machines_stmt(include_archived: bool = False) -> Select[Any]:
    """The shop's machines by name."""
    stmt = select(Machine)
    if not include_archived:
        stmt = stmt.where(Machine.archived.is_(False))
    return stmt.order_by(func.lower(Machine.name), Machine.id)

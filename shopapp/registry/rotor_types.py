"""Rotor types (a customer's part number with its geometry): check, create, edit, archive,
one-off rotor types, and the page's tolerance summary.

Geometry rule (see :func:`validate_geometry`): positions are mm from the shop's
datum. With the bearing span ``L = |B − A|`` (at least :data:`MIN_SPAN_MM`), the
centre of mass and the correction planes must lie in
``[min(A, B) − k·L, max(A, B) + k·L]`` with ``k =`` :data:`OVERHANG_SPANS` — an
overhung fan or pulley may stand out up to twice the span beyond a bearing
(common practice, no source: wider than that is almost surely a typing error);
every position must also lie within ±:data:`MAX_POSITION_MM`.
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any

from sqlalchemy import func, select
from sqlalchemy.orm import Session

from shopapp.balancing.dynamics import RigidityCheck, rigid_or_flexible
from shopapp.balancing.errors import BalancingInputError
from shopapp.balancing.removal import HOLE_DIRECTIONS
from shopapp.balancing.tolerance import GRADE_VALUES_MM_S, permissible_unbalance
from shopapp.core import checks
from shopapp.core.display import plain
from shopapp.core.permissions import require
from shopapp.models import (
    CORRECTION_METHODS,
    KEY_CONVENTIONS,
    ROTATIONS,
    ROTOR_KINDS,
    ROTOR_MATERIALS,
    Customer,
    RotorType,
    User,
)
from shopapp.registry.common import (
    MAX_MASS_KG,
    MAX_NOTES,
    MAX_RADIUS_MM,
    MAX_SPEED_RPM,
    flush_unique,
    like_prefix,
    record,
    refuse_if_changed,
    refuse_unknown,
    require_live_customer,
    set_archived,
    update_fields,
)

MIN_SPAN_MM = 1.0
MIN_PLANE_GAP_MM = 1.0
OVERHANG_SPANS = 2.0
MAX_POSITION_MM = 100_000.0  # 100 m from the datum
MAX_DENSITY_G_CM3 = 25.0  # the densest metals are about 22.6 g/cm³
MAX_TOLERANCE_GMM = 1.0e9
MAX_FIXED_POSITIONS = 360

GEOMETRY_FIELDS: tuple[str, ...] = (
    "mass_kg",
    "service_speed_rpm",
    "first_critical_rpm",
    "permitted_balancing_speed_rpm",
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
KEY_FIELDS: tuple[str, ...] = (
    "key_width_mm", "key_height_mm", "key_length_mm", "hub_length_mm", "key_radius_mm",
    "key_angle_deg",
)
ROTOR_TYPE_TEXT_FIELDS: tuple[str, ...] = (
    "part_number",
    "description",
    "kind",
    "rotation",
    "key_convention",
    "notes",
)
# How corrections fit this rotor (issue 11): stock weights, material and drilling limits.
CORRECTION_FIELDS: tuple[str, ...] = (
    "stock_weights_g", "material", "hole_direction", "max_hole_depth_mm", "min_wall_mm",
    "drill_section_mm",
)
ROTOR_TYPE_FIELDS = ROTOR_TYPE_TEXT_FIELDS + GEOMETRY_FIELDS + KEY_FIELDS + CORRECTION_FIELDS
MAX_STOCK_SIZES = 12  # the weight search of balancing.positions considers at most 12 sizes
MAX_STOCK_WEIGHT_G = 10_000.0
ONE_OFF_PREFIX = "one-off "


# --------------------------------------------------------------------------- geometry


def _angle(e: checks.Errors, name: str, value: Any) -> float | None:
    """An optional angle −360…360° as 0…360°."""
    angle = checks.number(e, name, value, required=False, minimum=-360, maximum=360, unit="°")
    return None if angle is None else angle % 360.0


def _fields(e: checks.Errors, v: Any, out: dict[str, Any], values: Mapping[str, Any]) -> None:
    """Each geometry field on its own (bounds, types, choices)."""
    out["mass_kg"] = checks.number(
        e, "mass_kg", v("mass_kg"), above=0, maximum=MAX_MASS_KG, unit="kg"
    )
    for name, required in (("service_speed_rpm", True), ("first_critical_rpm", False),
                           ("permitted_balancing_speed_rpm", False)):
        out[name] = checks.number(
            e, name, v(name), required=required, above=0, maximum=MAX_SPEED_RPM, unit="rpm"
        )
    permitted, service = out["permitted_balancing_speed_rpm"], out["service_speed_rpm"]
    # It may only lower the limit: spinning a rotor above its service speed risks a burst.
    if permitted is not None and service is not None and permitted > service:
        e.add("permitted_balancing_speed_rpm",
              f"{plain(permitted)} rpm is above the service speed ({plain(service)} rpm): "
              "the permitted balancing speed may only be lower; leave it empty to use the "
              "service speed")
    for name, required in (
        ("bearing_a_mm", True),
        ("bearing_b_mm", True),
        ("centre_of_mass_mm", True),
        ("plane_1_mm", True),
        ("plane_2_mm", False),
    ):
        out[name] = checks.number(
            e, name, v(name), required=required, minimum=-MAX_POSITION_MM,
            maximum=MAX_POSITION_MM, unit="mm",
        )
    for name, required in (("radius_1_mm", True), ("radius_2_mm", False)):
        out[name] = checks.number(
            e, name, v(name), required=required, above=0, maximum=MAX_RADIUS_MM, unit="mm"
        )
    out["method_1"] = checks.choice(e, "method_1", v("method_1") or "add", CORRECTION_METHODS)
    out["method_2"] = checks.choice(
        e, "method_2", v("method_2"), CORRECTION_METHODS, required=False
    )
    for name in ("positions_1", "positions_2"):
        count = checks.integer(e, name, v(name), required=False, minimum=0, maximum=10**9)
        if count is not None and count > MAX_FIXED_POSITIONS:
            # A count, not an angle: "between 0 and 360" read like degrees.
            e.add(name, f"at most {MAX_FIXED_POSITIONS} fixed positions (one per degree), "
                  f"got {count}")
            count = None
        elif count is not None and count < 2:
            if count == 0:
                count = None  # 0 means "free position", the same as leaving it empty
            else:
                e.add(name, "must be at least 2 fixed positions (blades, holes), or empty if free")
        out[name] = count
    for name in ("first_position_1_deg", "first_position_2_deg"):
        angle = _angle(e, name, v(name))
        out[name] = 0.0 if angle is None else angle
    out["density_g_cm3"] = checks.number(
        e, "density_g_cm3", v("density_g_cm3"), required=False, above=0,
        maximum=MAX_DENSITY_G_CM3, unit="g/cm³",
    )
    out["tolerance_gmm"] = checks.number(
        e, "tolerance_gmm", v("tolerance_gmm"), required=False, above=0,
        maximum=MAX_TOLERANCE_GMM, unit="g·mm",
    )
    grade = checks.number(e, "tolerance_grade", v("tolerance_grade"), required=False, above=0)
    if grade is not None and not any(math.isclose(grade, g) for g in GRADE_VALUES_MM_S):
        allowed = ", ".join(f"G {plain(g)}" for g in GRADE_VALUES_MM_S)
        e.add("tolerance_grade",
              f"G {plain(grade)} is not an ISO 21940-11 grade; use one of {allowed}")
        grade = None
    out["tolerance_grade"] = grade
    if out["tolerance_grade"] is not None and out["tolerance_gmm"] is not None:
        e.add("tolerance_gmm", "give a balance grade or an explicit limit in g·mm, not both")
    for name in KEY_FIELDS:
        if name not in values:
            continue
        if name == "key_angle_deg":
            out[name] = _angle(e, name, v(name))
        else:
            out[name] = checks.number(
                e, name, v(name), required=False, above=0, maximum=MAX_RADIUS_MM, unit="mm"
            )


def _stock_weights(e: checks.Errors, value: Any) -> list[float] | None:
    """The stock weight sizes: a list of distinct masses in grams, sorted (empty = none)."""
    if value is None or value == [] or (isinstance(value, str) and not value.strip()):
        return None
    if isinstance(value, str) or not isinstance(value, list | tuple):
        e.add("stock_weights_g", "must be a list of masses in grams, e.g. 2, 5, 10, 20")
        return None
    sizes: set[float] = set()
    for item in value:
        mass = checks.number(e, "stock_weights_g", item, above=0, maximum=MAX_STOCK_WEIGHT_G,
                             unit="g")
        if mass is None:
            return None
        sizes.add(mass)
    if len(sizes) > MAX_STOCK_SIZES:
        e.add("stock_weights_g", f"at most {MAX_STOCK_SIZES} different sizes, got {len(sizes)}")
        return None
    return sorted(sizes)


def _correction_fields(e: checks.Errors, v: Any, out: dict[str, Any],
                       values: Mapping[str, Any]) -> None:
    """Stock weights, material and drilling limits (only those given are checked)."""
    if "stock_weights_g" in values:
        out["stock_weights_g"] = _stock_weights(e, v("stock_weights_g"))
    if "material" in values:
        out["material"] = checks.choice(e, "material", v("material") or None, ROTOR_MATERIALS,
                                        required=False)
    if "hole_direction" in values:
        out["hole_direction"] = checks.choice(e, "hole_direction", v("hole_direction") or None,
                                              HOLE_DIRECTIONS, required=False)
    for name, low in (("max_hole_depth_mm", "above"), ("drill_section_mm", "above"),
                      ("min_wall_mm", "minimum")):
        if name in values:
            bound = {low: 0.0}
            out[name] = checks.number(e, name, v(name), required=False, maximum=MAX_RADIUS_MM,
                                      unit="mm", **bound)
    depth, wall, section = (out.get(n) for n in ("max_hole_depth_mm", "min_wall_mm",
                                                 "drill_section_mm"))
    if section is not None and wall is not None and wall >= section:
        e.add("min_wall_mm", f"the wall left ({plain(wall)} mm) must be less than the material "
              f"depth ({plain(section)} mm)")
    radius = out.get("radius_1_mm")
    if out.get("hole_direction") == "radial" and radius is not None:
        for name, reach in (("max_hole_depth_mm", depth), ("drill_section_mm", section)):
            if reach is not None and reach >= radius:
                e.add(name, f"a radial hole {plain(reach)} mm deep would reach the axis from the "
                      f"{plain(radius)} mm correction radius")


def _relations(e: checks.Errors, out: dict[str, Any]) -> None:
    """Rules between fields, checked only when the fields themselves are fine."""
    a, b, c = out["bearing_a_mm"], out["bearing_b_mm"], out["centre_of_mass_mm"]
    p1, p2 = out["plane_1_mm"], out["plane_2_mm"]
    if a is not None and b is not None:
        span = abs(b - a)
        if span < MIN_SPAN_MM:
            e.add(
                "bearing_b_mm",
                f"must be at least {plain(MIN_SPAN_MM)} mm from bearing A "
                f"(A = {plain(a)} mm, B = {plain(b)} mm)",
            )
        else:
            lo, hi = min(a, b) - OVERHANG_SPANS * span, max(a, b) + OVERHANG_SPANS * span
            for name, pos in (("centre_of_mass_mm", c), ("plane_1_mm", p1), ("plane_2_mm", p2)):
                if pos is not None and not lo <= pos <= hi:
                    e.add(
                        name,
                        f"{plain(pos)} mm is too far from the bearings: allowed {plain(lo)} to "
                        f"{plain(hi)} mm (up to {plain(OVERHANG_SPANS)} bearing spans beyond "
                        "a bearing)",
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
            e.add("plane_2_mm",
                  f"must be at least {plain(MIN_PLANE_GAP_MM)} mm away from plane 1")
    removes = [out["method_1"], out["method_2"]]
    if (any(m in ("remove", "both") for m in removes) and out["density_g_cm3"] is None
            and out.get("material") is None):
        e.add(
            "density_g_cm3",
            "is required when mass may be removed (method remove or both): "
            "e.g. 7.85 g/cm³ for steel, or choose the material",
        )


def clean_geometry(values: Mapping[str, Any]) -> tuple[dict[str, Any], checks.Errors]:
    """Checked and normalised geometry values, and the messages for the bad ones."""
    e = checks.Errors()
    out: dict[str, Any] = {}
    _fields(e, values.get, out, values)
    _correction_fields(e, values.get, out, values)
    _relations(e, out)
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
    return dict(clean_geometry(values)[1])


# --------------------------------------------------------------------------- use-cases


def _clean_rotor_type(
    session: Session,
    values: Mapping[str, Any],
    customer: Customer,
    exclude_id: int | None,
) -> dict[str, Any]:
    clean, e = clean_geometry(values)
    v = values.get
    clean["part_number"] = checks.text(
        e, "part_number", v("part_number"), max_len=100, required=True
    )
    clean["description"] = checks.text(e, "description", v("description"), max_len=200)
    clean["kind"] = checks.choice(e, "kind", v("kind") or "other", ROTOR_KINDS)
    clean["rotation"] = checks.choice(e, "rotation", v("rotation") or "cw", ROTATIONS)
    clean["key_convention"] = checks.choice(
        e, "key_convention", v("key_convention") or "none", KEY_CONVENTIONS
    )
    clean["notes"] = checks.text(e, "notes", v("notes"), max_len=MAX_NOTES)
    if "part_number" not in e:
        stmt = select(RotorType.id).where(
            RotorType.customer_id == customer.id,
            func.lower(RotorType.part_number) == clean["part_number"].lower(),
        )
        if exclude_id is not None:
            stmt = stmt.where(RotorType.id != exclude_id)
        if session.scalar(stmt.limit(1)) is not None:
            e.add("part_number", _taken(customer, clean["part_number"]))
    e.raise_if_any()
    return clean


def _taken(customer: Customer, part_number: str) -> str:
    return f"{customer.name} already has a rotor type with part number {part_number!r}"


def create_rotor_type(
    session: Session, *, by: User, customer: Customer, **values: Any
) -> RotorType:
    """Create a customer's rotor type (part number and geometry).

    ``values`` are the fields of :data:`ROTOR_TYPE_FIELDS`; the geometry is
    checked by :func:`validate_geometry`, part numbers are unique per customer
    (ignoring case).
    """
    require(by, "edit_registry")
    refuse_unknown(values, (*ROTOR_TYPE_FIELDS, "one_off"))
    require_live_customer(customer)
    one_off = bool(values.pop("one_off", False))
    clean = _clean_rotor_type(session, values, customer, None)
    rotor_type = RotorType(customer_id=customer.id, one_off=one_off, **clean)
    flush_unique(session, rotor_type, "part_number", _taken(customer, clean["part_number"]))
    record(session, by, rotor_type, "rotor_type", "create", None)
    return rotor_type


def update_rotor_type(
    session: Session, rotor_type: RotorType, *, by: User, drawn: str | None = None,
    **fields: Any
) -> RotorType:
    """Change some fields of a rotor type; the whole geometry is re-checked.
    ``drawn``: the edit form's stamp (:func:`~shopapp.registry.common.refuse_if_changed`)."""
    require(by, "edit_registry")
    refuse_unknown(fields, ROTOR_TYPE_FIELDS)
    refuse_if_changed(rotor_type, ROTOR_TYPE_FIELDS, drawn, entity="rotor type")
    merged = {name: getattr(rotor_type, name) for name in ROTOR_TYPE_FIELDS} | fields
    clean = _clean_rotor_type(session, merged, rotor_type.customer, rotor_type.id)
    update_fields(session, rotor_type, clean, by=by, entity="rotor_type", field="part_number",
                  taken=_taken(rotor_type.customer, clean["part_number"]))
    return rotor_type


def archive_rotor_type(session: Session, rotor_type: RotorType, *, by: User) -> RotorType:
    """Hide a rotor type from the lists and from new rotors (its rotors keep it)."""
    set_archived(session, rotor_type, by=by, action="edit_registry", entity="rotor_type",
                 archived=True)
    return rotor_type


def unarchive_rotor_type(session: Session, rotor_type: RotorType, *, by: User) -> RotorType:
    set_archived(session, rotor_type, by=by, action="edit_registry", entity="rotor_type",
                 archived=False)
    return rotor_type


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
    e = checks.Errors()
    serial = checks.text(e, "serial_number", serial_number, max_len=100, required=True)
    e.raise_if_any()
    require_live_customer(customer)
    base = f"{ONE_OFF_PREFIX}{serial}"[:90]
    taken: set[str] = set(
        session.scalars(
            select(func.lower(RotorType.part_number)).where(
                RotorType.customer_id == customer.id,
                func.lower(RotorType.part_number).like(like_prefix(base.lower()), escape="\\"),
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


# --------------------------------------------------------------------------- summary


@dataclass(frozen=True)
class RotorTypeSummary:
    """What the rotor-type page says beside the geometry (nothing stored).

    ``u_per_gmm``: the default permissible residual unbalance of the whole rotor
    (ISO 21940-11 from the grade, or the explicit limit); ``rigidity``: the
    rigid/flexible check when a first critical speed is on record.
    """

    u_per_gmm: float | None
    rigidity: RigidityCheck | None


def summary(rotor_type: RotorType) -> RotorTypeSummary:
    """Default U_per and the rigid/flexible check of ``rotor_type`` (never raises).

    Stored values the numerics refuse leave the figure out; the page still shows
    the raw values.
    """
    u_per: float | None = None
    rigidity: RigidityCheck | None = None
    try:
        if rotor_type.tolerance_grade is not None:
            u_per = permissible_unbalance(
                rotor_type.tolerance_grade, rotor_type.mass_kg, rotor_type.service_speed_rpm
            )
        elif rotor_type.tolerance_gmm is not None:
            u_per = rotor_type.tolerance_gmm
        if rotor_type.first_critical_rpm is not None:
            rigidity = rigid_or_flexible(
                rotor_type.service_speed_rpm, rotor_type.first_critical_rpm
            )
    except BalancingInputError:
        pass
    return RotorTypeSummary(u_per, rigidity)

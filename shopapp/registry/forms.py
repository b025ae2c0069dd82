"""Registry forms: customers, balancing machines, rotor types (geometry), rotors, one-off rotors.

The forms check types (a number is a number); the registry's use-cases check the
rules (bearings apart, planes within bounds, ...) and their messages are put
beside the same fields (``shopapp.core.forms.apply_errors``).
"""

from __future__ import annotations

from typing import Any

from wtforms import BooleanField, HiddenField, StringField, TextAreaField
from wtforms.validators import InputRequired, Length, Optional

from shopapp.balancing.removal import DENSITIES
from shopapp.balancing.tolerance import GRADE_VALUES_MM_S
from shopapp.core.display import plain
from shopapp.core.forms import (
    ChoiceField,
    NumberField,
    NumberListField,
    OnceForm,
    ShopForm,
    WholeNumberField,
)
from shopapp.models import (
    BEARING_KINDS,
    CORRECTION_METHODS,
    KEY_CONVENTIONS,
    READING_UNITS,
    ROTATIONS,
    ROTOR_KINDS,
    ROTOR_MATERIALS,
)
from shopapp.registry.machines import MACHINE_FIELDS
from shopapp.registry.rotor_types import CORRECTION_FIELDS, GEOMETRY_FIELDS

# --------------------------------------------------------------------------- customers


class CustomerForm(OnceForm):
    name = StringField(
        "Name", validators=[InputRequired("Give the customer's name."), Length(max=200)]
    )
    contact = StringField("Contact person", validators=[Length(max=200)])
    email = StringField("E-mail", validators=[Length(max=200)])
    phone = StringField("Phone", validators=[Length(max=64)])
    address = TextAreaField("Address", validators=[Length(max=2000)])
    notes = TextAreaField("Notes", validators=[Length(max=5000)])
    requires_residual_test = BooleanField("Residual-unbalance test on every job by default")
    # The record's stamp when the edit form was drawn (registry.pages.drawn_on_record).
    drawn = HiddenField()

    def values(self) -> dict[str, object]:
        return {
            "name": self.name.data or "",
            "contact": self.contact.data or "",
            "email": self.email.data or "",
            "phone": self.phone.data or "",
            "address": self.address.data or "",
            "notes": self.notes.data or "",
            "requires_residual_test": bool(self.requires_residual_test.data),
        }


# --------------------------------------------------------------------------- machines

# What a machine's readings are; only calibrated g·mm is unbalance without trial runs.
READING_UNIT_LABELS = {
    "g·mm": "calibrated unbalance, g·mm per correction plane",
    "mm/s": "vibration velocity, mm/s",
    "um": "vibration displacement, µm",
    "mil": "vibration displacement, mil",
    "in/s": "vibration velocity, in/s",
}
BEARING_LABELS = {"hard": "hard-bearing (runs below resonance)", "soft": "soft-bearing (above it)"}


class MachineForm(OnceForm):
    name = StringField(
        "Name", validators=[InputRequired("Give the machine a name."), Length(max=100)]
    )
    bearing_kind = ChoiceField(
        "Bearing kind", choices=[(k, BEARING_LABELS[k]) for k in BEARING_KINDS]
    )
    min_mass_kg = NumberField("Smallest rotor mass (kg)", validators=[Optional()])
    max_mass_kg = NumberField("Largest rotor mass (kg)", validators=[InputRequired("Required.")])
    min_speed_rpm = NumberField("Lowest balancing speed (rpm)", validators=[Optional()])
    max_speed_rpm = NumberField(
        "Highest balancing speed (rpm)", validators=[InputRequired("Required.")]
    )
    claimed_emar_gmm_per_kg = NumberField(
        "Claimed minimum achievable residual specific unbalance (g·mm/kg)", validators=[Optional()]
    )
    claimed_urr_pct = NumberField("Claimed unbalance reduction ratio (%)", validators=[Optional()])
    suspension_resonance_rpm = NumberField(
        "Rotor-on-suspension resonance (rpm)", validators=[Optional()]
    )
    reading_unit = ChoiceField(
        "Reading unit", choices=[("", "— choose —")] + [
            (u, READING_UNIT_LABELS[u]) for u in READING_UNITS]
    )
    reading_planes = ChoiceField(
        "Planes (sensors) read in one run", coerce=int,
        choices=[(2, "2 planes"), (1, "1 plane")], default=2
    )
    verification_interval_days = WholeNumberField(
        "Verification interval (days)", validators=[Optional()], default=365
    )
    notes = TextAreaField("Notes", validators=[Length(max=5000)])

    drawn = HiddenField()  # the record's stamp (registry.pages.drawn_on_record)

    def values(self) -> dict[str, Any]:
        return {name: getattr(self, name).data for name in MACHINE_FIELDS}


# --------------------------------------------------------------------------- rotor types and rotors

_REQUIRED = "Required: type a number."


def _choices(values: tuple[str, ...]) -> list[tuple[str, str]]:
    return [(v, v.replace("_", " ")) for v in values]


METHOD_LABELS = {"add": "add mass", "remove": "remove mass (drill, grind)", "both": "add or remove"}
ROTATION_LABELS = {"cw": "clockwise (seen from the datum end)", "ccw": "counter-clockwise"}
KEY_LABELS = {"none": "no key", "half_key": "half key", "full_key": "full key"}


class GeometryForm(ShopForm):
    """The fields every rotor geometry has (rotor types and one-off rotors)."""

    kind = ChoiceField("Kind", choices=_choices(ROTOR_KINDS), default="other")
    mass_kg = NumberField("Rotor mass (kg)", validators=[InputRequired(_REQUIRED)])
    service_speed_rpm = NumberField(
        "Maximum service speed (rpm)", validators=[InputRequired(_REQUIRED)]
    )
    first_critical_rpm = NumberField("First bending critical speed (rpm)", validators=[Optional()])
    permitted_balancing_speed_rpm = NumberField(
        "Permitted balancing speed (rpm)", validators=[Optional()]
    )
    bearing_a_mm = NumberField("Bearing A position (mm)", validators=[InputRequired(_REQUIRED)])
    bearing_b_mm = NumberField("Bearing B position (mm)", validators=[InputRequired(_REQUIRED)])
    centre_of_mass_mm = NumberField(
        "Centre of mass position (mm)", validators=[InputRequired(_REQUIRED)]
    )
    plane_1_mm = NumberField("Plane 1 position (mm)", validators=[InputRequired(_REQUIRED)])
    radius_1_mm = NumberField(
        "Plane 1 correction radius (mm)", validators=[InputRequired(_REQUIRED)]
    )
    method_1 = ChoiceField(
        "Plane 1 method", choices=[(m, METHOD_LABELS[m]) for m in CORRECTION_METHODS],
        default="add",
    )
    positions_1 = WholeNumberField("Plane 1 fixed positions", validators=[Optional()])
    first_position_1_deg = NumberField("Plane 1 first position (°)", validators=[Optional()])
    plane_2_mm = NumberField("Plane 2 position (mm)", validators=[Optional()])
    radius_2_mm = NumberField("Plane 2 correction radius (mm)", validators=[Optional()])
    method_2 = ChoiceField(
        "Plane 2 method",
        choices=[("", "same as plane 1")] + [(m, METHOD_LABELS[m]) for m in CORRECTION_METHODS],
        default="",
    )
    positions_2 = WholeNumberField("Plane 2 fixed positions", validators=[Optional()])
    first_position_2_deg = NumberField("Plane 2 first position (°)", validators=[Optional()])
    density_g_cm3 = NumberField("Material density (g/cm³)", validators=[Optional()])
    tolerance_grade = ChoiceField(
        "Default balance grade",
        choices=[("", "none (set on each job)")]
        + [(plain(g), f"G {plain(g)}") for g in GRADE_VALUES_MM_S],
        default="",
    )
    tolerance_gmm = NumberField("Or an explicit limit (g·mm)", validators=[Optional()])
    rotation = ChoiceField(
        "Rotation", choices=[(r, ROTATION_LABELS[r]) for r in ROTATIONS], default="cw"
    )
    key_convention = ChoiceField(
        "Key convention", choices=[(k, KEY_LABELS[k]) for k in KEY_CONVENTIONS], default="none"
    )
    notes = TextAreaField("Notes", validators=[Length(max=5000)])
    # How corrections fit this rotor (issue 11).
    stock_weights_g = NumberListField("Stock weights (g)", validators=[Optional()])
    material = ChoiceField(
        "Material",
        choices=[("", "not stated")]
        + [(m, f"{DENSITIES[m].material} ({plain(DENSITIES[m].g_cm3)} g/cm³)")
           for m in ROTOR_MATERIALS],
        default="",
    )
    hole_direction = ChoiceField(
        "Drilled holes", choices=[("", "not stated"), ("radial", "radial (into the rim)"),
                                  ("axial", "axial (parallel to the shaft)")], default="",
    )
    max_hole_depth_mm = NumberField("Deepest hole, to the tip (mm)", validators=[Optional()])
    min_wall_mm = NumberField("Least wall left (mm)", validators=[Optional()])
    drill_section_mm = NumberField("Material depth the holes go into (mm)",
                                   validators=[Optional()])

    def geometry_values(self) -> dict[str, Any]:
        """Field → value for the registry service (empty selects become None)."""
        values: dict[str, Any] = {name: getattr(self, name).data for name in GEOMETRY_FIELDS}
        values["method_2"] = values["method_2"] or None
        grade = self.tolerance_grade.data
        values["tolerance_grade"] = float(grade) if grade else None
        values["kind"] = self.kind.data
        values["rotation"] = self.rotation.data
        values["key_convention"] = self.key_convention.data
        values["notes"] = self.notes.data or ""
        for name in CORRECTION_FIELDS:
            values[name] = getattr(self, name).data or None
        return values

    def load(self, rotor_type: Any) -> None:
        """Fill the fields from a stored rotor type (GET of an edit page)."""
        for name in (*GEOMETRY_FIELDS, "kind", "rotation", "key_convention", "notes"):
            getattr(self, name).data = getattr(rotor_type, name)
        for name in CORRECTION_FIELDS:
            value = getattr(rotor_type, name)
            getattr(self, name).data = "" if value is None and name in (
                "material", "hole_direction") else value
        self.method_2.data = rotor_type.method_2 or ""
        grade = rotor_type.tolerance_grade
        self.tolerance_grade.data = plain(grade) if grade is not None else ""


class RotorTypeForm(GeometryForm, OnceForm):
    customer = ChoiceField("Customer", coerce=int, choices=[])
    part_number = StringField(
        "Part number / drawing",
        validators=[InputRequired("Give the part number."), Length(max=100)],
    )
    description = StringField("Description", validators=[Length(max=200)])

    drawn = HiddenField()  # the record's stamp (registry.pages.drawn_on_record)

    def values(self) -> dict[str, Any]:
        values = self.geometry_values()
        values["part_number"] = self.part_number.data or ""
        values["description"] = self.description.data or ""
        return values


class OneOffRotorForm(GeometryForm, OnceForm):
    """A rotor without a part number: it carries its own geometry."""

    customer = ChoiceField("Customer", coerce=int, choices=[])
    serial_number = StringField(
        "Serial number", validators=[InputRequired("Give the serial number."), Length(max=100)]
    )
    description = StringField("Description", validators=[Length(max=200)])
    rotor_notes = TextAreaField("Rotor notes", validators=[Length(max=5000)])


class RotorForm(OnceForm):
    rotor_type = ChoiceField("Rotor type (customer · part number)", coerce=int, choices=[])
    serial_number = StringField(
        "Serial number", validators=[InputRequired("Give the serial number."), Length(max=100)]
    )
    notes = TextAreaField("Notes", validators=[Length(max=5000)])
    drawn = HiddenField()  # the record's stamp (registry.pages.drawn_on_record)

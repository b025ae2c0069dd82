"""Rotor-type (geometry), rotor and one-off rotor forms.

The forms check types (a number is a number); the registry service checks the
rules (bearings apart, planes within bounds, ...) and its messages are put
beside the same fields.
"""

from __future__ import annotations

from typing import Any

from flask_wtf import FlaskForm
from wtforms import StringField, TextAreaField
from wtforms.validators import InputRequired, Length, Optional

from shopapp.core.forms import ChoiceField, NumberField, WholeNumberField
from shopapp.models import CORRECTION_METHODS, KEY_CONVENTIONS, ROTATIONS, ROTOR_KINDS
from shopapp.registry.services import GEOMETRY_FIELDS, GRADE_VALUES_MM_S

_REQUIRED = "Required: type a number."


def _choices(values: tuple[str, ...]) -> list[tuple[str, str]]:
    return [(v, v.replace("_", " ")) for v in values]


METHOD_LABELS = {"add": "add mass", "remove": "remove mass (drill, grind)", "both": "add or remove"}
ROTATION_LABELS = {"cw": "clockwise (seen from the datum end)", "ccw": "counter-clockwise"}
KEY_LABELS = {"none": "no key", "half_key": "half key", "full_key": "full key"}


class GeometryForm(FlaskForm):
    """The fields every rotor geometry has (rotor types and one-off rotors)."""

    kind = ChoiceField("Kind", choices=_choices(ROTOR_KINDS), default="other")
    mass_kg = NumberField("Rotor mass (kg)", validators=[InputRequired(_REQUIRED)])
    service_speed_rpm = NumberField(
        "Maximum service speed (rpm)", validators=[InputRequired(_REQUIRED)]
    )
    first_critical_rpm = NumberField("First bending critical speed (rpm)", validators=[Optional()])
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
        + [(f"{g:g}", f"G {g:g}") for g in GRADE_VALUES_MM_S],
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
        return values

    def load(self, rotor_type: Any) -> None:
        """Fill the fields from a stored rotor type (GET of an edit page)."""
        for name in (*GEOMETRY_FIELDS, "kind", "rotation", "key_convention", "notes"):
            getattr(self, name).data = getattr(rotor_type, name)
        self.method_2.data = rotor_type.method_2 or ""
        grade = rotor_type.tolerance_grade
        self.tolerance_grade.data = f"{grade:g}" if grade is not None else ""


class RotorTypeForm(GeometryForm):
    customer = ChoiceField("Customer", coerce=int, choices=[])
    part_number = StringField(
        "Part number / drawing",
        validators=[InputRequired("Give the part number."), Length(max=100)],
    )
    description = StringField("Description", validators=[Length(max=200)])

    def values(self) -> dict[str, Any]:
        values = self.geometry_values()
        values["part_number"] = self.part_number.data or ""
        values["description"] = self.description.data or ""
        return values


class OneOffRotorForm(GeometryForm):
    """A rotor without a part number: it carries its own geometry."""

    customer = ChoiceField("Customer", coerce=int, choices=[])
    serial_number = StringField(
        "Serial number", validators=[InputRequired("Give the serial number."), Length(max=100)]
    )
    description = StringField("Description", validators=[Length(max=200)])
    rotor_notes = TextAreaField("Rotor notes", validators=[Length(max=5000)])


class RotorForm(FlaskForm):
    rotor_type = ChoiceField("Rotor type (customer · part number)", coerce=int, choices=[])
    serial_number = StringField(
        "Serial number", validators=[InputRequired("Give the serial number."), Length(max=100)]
    )
    notes = TextAreaField("Notes", validators=[Length(max=5000)])

"""Forms of the jobs area: intake, run, correction, state change, return job.

The forms check types (a number is a number, a date a date); the jobs service
checks the rules and its messages go beside the same fields. Angles are typed
in the shop's display convention; the routes convert them.
"""

from __future__ import annotations

import re
from typing import Any

from wtforms import (
    BooleanField,
    FormField,
    HiddenField,
    StringField,
    TextAreaField,
)
from wtforms.fields.choices import SelectChoice
from wtforms.validators import InputRequired, Length, NumberRange, Optional

from shopapp.balancing.numtext import short
from shopapp.balancing.tolerance import GRADE_VALUES_MM_S
from shopapp.core import forms
from shopapp.core.checks import PROMISE_AHEAD_DAYS, plain_digits
from shopapp.core.display import plain
from shopapp.core.forms import (
    AngleField,
    DayField,
    NumberField,
    OnceForm,
    ShopForm,
    WholeNumberField,
)
from shopapp.models import CORRECTION_METHODS, READING_UNITS, ROTOR_KINDS, RUN_PURPOSES

_NUMBER = "Required: type a number."
MIN_DRILL_MM, MAX_DRILL_MM = 0.5, 100.0
PURPOSE_LABELS = {
    "initial": "initial (as received)",
    "trial": "trial (trial mass fitted)",
    "check": "check (after a correction)",
    "final": "final (as handed over)",
    "verification": "verification (residual test)",
}
UNIT_LABELS = {"um": "µm (displacement)", "mm/s": "mm/s (velocity)",
               "g·mm": "g·mm (calibrated machine)", "mil": "mil", "in/s": "in/s"}


class ChoiceField(forms.ChoiceField):
    """A select whose refusal lists the allowed choices, and says so for junk values too."""

    def __init__(self, *args: Any, **kwargs: Any) -> None:
        kwargs.setdefault("invalid_value_message",
                          "Not one of the choices: pick one from the list.")
        super().__init__(*args, **kwargs)


def options(pairs: list[tuple[Any, str]]) -> list[SelectChoice]:
    """Select options (WTForms 3.3 deprecates plain tuples)."""
    return [SelectChoice(value, label) for value, label in pairs]


TOLERANCE_CHOICES = [
    ("", "the rotor type's default"),
    ("grade", "ISO 21940-11 balance grade"),
    ("4w/n", "4W/N from journal loads"),
    ("explicit", "customer limit per plane"),
]


class OneOffForm(ShopForm):
    """Geometry of a one-off rotor (no part number); the registry checks the rules."""

    class Meta:
        csrf = False  # part of the intake form, which carries the token

    description = StringField("Description", validators=[Optional(), Length(max=200)])
    kind = ChoiceField("Kind", choices=options([(k, k.replace("_", " ")) for k in ROTOR_KINDS]),
                       default="other")
    mass_kg = NumberField("Rotor mass (kg)", validators=[Optional()])
    first_critical_rpm = NumberField("First bending critical speed (rpm)",
                                     validators=[Optional()])
    bearing_a_mm = NumberField("Bearing A position (mm)", validators=[Optional()])
    bearing_b_mm = NumberField("Bearing B position (mm)", validators=[Optional()])
    centre_of_mass_mm = NumberField("Centre of mass position (mm)", validators=[Optional()])
    plane_1_mm = NumberField("Plane 1 position (mm)", validators=[Optional()])
    radius_1_mm = NumberField("Plane 1 correction radius (mm)", validators=[Optional()])
    method_1 = ChoiceField("Plane 1 method", choices=options([(m, m) for m in CORRECTION_METHODS]),
                           default="add")
    positions_1 = WholeNumberField("Plane 1 fixed positions", validators=[Optional()])
    plane_2_mm = NumberField("Plane 2 position (mm, empty for single-plane)",
                             validators=[Optional()])
    radius_2_mm = NumberField("Plane 2 correction radius (mm)", validators=[Optional()])
    method_2 = ChoiceField("Plane 2 method",
                           choices=options([("", "same as plane 1")]
                                           + [(m, m) for m in CORRECTION_METHODS]),
                           default="")
    positions_2 = WholeNumberField("Plane 2 fixed positions", validators=[Optional()])
    density_g_cm3 = NumberField("Material density (g/cm³, for removal)",
                                validators=[Optional()])

    GEOMETRY = ("mass_kg", "first_critical_rpm", "bearing_a_mm", "bearing_b_mm",
                "centre_of_mass_mm", "plane_1_mm", "radius_1_mm", "method_1", "positions_1",
                "plane_2_mm", "radius_2_mm", "method_2", "positions_2", "density_g_cm3",
                "description", "kind")

    def used(self) -> bool:
        """Whether the person filled in one-off geometry at all."""
        return any(getattr(self, n).data not in (None, "") for n in
                   ("mass_kg", "bearing_a_mm", "bearing_b_mm", "plane_1_mm", "radius_1_mm"))

    def values(self) -> dict[str, Any]:
        out = {n: getattr(self, n).data for n in self.GEOMETRY}
        out["method_2"] = out["method_2"] or None
        out["description"] = out["description"] or ""
        return out


class IntakeForm(OnceForm):
    customer_id = ChoiceField("Customer", coerce=int, choices=[])
    new_customer_name = StringField("New customer: name", validators=[Length(max=200)])
    new_customer_contact = StringField("New customer: contact", validators=[Length(max=200)])
    new_customer_phone = StringField("New customer: phone", validators=[Length(max=64)])
    serial_number = StringField("Serial number",
                                validators=[InputRequired("Give the rotor's serial number."),
                                            Length(max=100)])
    rotor_type_id = ChoiceField("Rotor type (customer · part number)", coerce=int, choices=[])
    one_off = FormField(OneOffForm, label="One-off rotor geometry")
    tolerance_method = ChoiceField("Tolerance", choices=options(TOLERANCE_CHOICES), default="")
    tolerance_grade = ChoiceField("Balance grade",
                                  choices=options([("", "—")] + [(plain(g), f"G {plain(g)}")
                                                                 for g in GRADE_VALUES_MM_S]),
                                  default="")
    journal_load_a_kg = NumberField("Journal load A (kg)", validators=[Optional()])
    journal_load_b_kg = NumberField("Journal load B (kg)", validators=[Optional()])
    explicit_limit_1 = NumberField("Limit plane 1", validators=[Optional()])
    explicit_limit_2 = NumberField("Limit plane 2", validators=[Optional()])
    service_speed_rpm = NumberField("Service speed (rpm)", validators=[Optional()])
    balancing_speed_rpm = NumberField("Balancing speed (rpm)",
                                      validators=[InputRequired(_NUMBER)])
    machine_id = ChoiceField("Machine", coerce=int, choices=[])
    received_on = DayField("Received on", validators=[Optional()])
    promised_on = DayField("Promised for", validators=[Optional()], ahead_days=PROMISE_AHEAD_DAYS)
    customer_order_ref = StringField("Customer order reference", validators=[Length(max=100)])
    notes = TextAreaField("Notes", validators=[Length(max=5000)])


class LookupForm(ShopForm):
    """GET form: find a serial's history before booking in (works without JavaScript)."""

    class Meta:
        csrf = False  # a GET search, nothing is written

    customer_id = ChoiceField("Customer", coerce=int, choices=[], validate_choice=False)
    serial_number = StringField("Serial number", validators=[Length(max=100)])


class RunForm(OnceForm):
    purpose = ChoiceField("Purpose",
                          choices=options([(p, PURPOSE_LABELS[p]) for p in RUN_PURPOSES]),
                          default="initial")
    speed_rpm = NumberField("Speed (rpm)", validators=[InputRequired(_NUMBER)])
    unit = ChoiceField("Reading unit",
                       choices=options([(u, UNIT_LABELS[u]) for u in READING_UNITS]),
                       default="g·mm")
    amplitude_1 = NumberField("Plane 1 amplitude", validators=[InputRequired(_NUMBER)])
    angle_1_deg = AngleField("Plane 1 angle (°)", validators=[InputRequired(_NUMBER)])
    amplitude_2 = NumberField("Plane 2 amplitude", validators=[Optional()])
    angle_2_deg = AngleField("Plane 2 angle (°)", validators=[Optional()])
    trial_plane = ChoiceField("Trial mass in plane", coerce=str,
                              choices=options([("", "—"), ("1", "1"), ("2", "2")]), default="")
    trial_mass_g = NumberField("Trial mass (g)", validators=[Optional()])
    trial_angle_deg = AngleField("Trial mass angle (°)", validators=[Optional()])
    trial_radius_mm = NumberField("Trial mass radius (mm)", validators=[Optional()])
    earlier_trial_left_on = BooleanField("The earlier trial mass is still on")
    notes = TextAreaField("Notes", validators=[Length(max=5000)])

    def trial_given(self) -> bool:
        """True when a trial mass is entered (or its plane or angle).

        The radius alone does not count: the page prefills it from the rotor type,
        and an initial or check run leaves it there.
        """
        return any(f.data not in (None, "") for f in (self.trial_plane, self.trial_mass_g,
                                                      self.trial_angle_deg))


class CorrectionForm(OnceForm):
    run_id = HiddenField()
    action = ChoiceField("Action", choices=options([("add", "added"), ("remove", "removed")]),
                         default="add")
    mass_g = NumberField("Mass (g)", validators=[InputRequired(_NUMBER)])
    angle_deg = AngleField("Angle (°)", validators=[InputRequired(_NUMBER)])
    radius_mm = NumberField("Radius (mm)", validators=[InputRequired(_NUMBER)])
    split = StringField("Split onto positions (position:grams, …)",
                        validators=[Optional(), Length(max=500)])
    drill_diameter_mm = NumberField("Drill diameter (mm)", validators=[Optional()])
    drill_depth_mm = NumberField("Drill depth (mm)", validators=[Optional()])
    drill_holes = WholeNumberField("Holes", validators=[Optional()])
    advised_mass_g = HiddenField()
    advised_angle_deg = HiddenField()
    replaces_correction_id = ChoiceField("Fitted in place of", coerce=str,
                                         choices=[("", "nothing (an extra weight)")],
                                         default="")


class DrillForm(ShopForm):
    """The drill diameter the advice's depths are computed for (a GET form)."""

    class Meta:
        csrf = False

    drill_mm = NumberField("Drill diameter for the depth (mm)", validators=[
        Optional(), NumberRange(min=MIN_DRILL_MM, max=MAX_DRILL_MM,
                                message=f"Drill diameter must be between {short(MIN_DRILL_MM)} and "
                                        f"{short(MAX_DRILL_MM)} mm.")])


class StrikeForm(ShopForm):
    """Strike a mistaken run out of the calculations (it stays in the log)."""

    reason = TextAreaField("Why is this run struck out?",
                           validators=[InputRequired("Give the reason: it is kept with the run."),
                                       Length(max=500)])


class StrikeCorrectionForm(ShopForm):
    """Strike a correction recorded by mistake out of the calculations (it stays listed)."""

    reason = TextAreaField("Why is this correction struck out?",
                           validators=[InputRequired("Give the reason: it is kept with the "
                                                     "correction."), Length(max=500)])


class StateForm(ShopForm):
    action = HiddenField()
    reason = TextAreaField("Reason", validators=[Length(max=5000)])
    dispatched_on = DayField("Dispatched on", validators=[Optional()])


class ReturnForm(OnceForm):
    received_on = DayField("Received back on", validators=[Optional()])
    notes = TextAreaField("What the customer reports", validators=[Length(max=5000)])


# Parts are separated by ";" or by a comma before the next "position:" — so a mass typed
# with a decimal comma ("4:1,95") stays one part, read as the other number fields read it.
_NEXT_PART = re.compile(r";|,(?=\s*\d+\s*:)")


def parse_split(text: str | None) -> list[dict[str, Any]] | None:
    """``"3:4.2, 4:1.1"`` → ``[{"position": 3, "mass_g": 4.2}, ...]``; raises ValueError.

    Masses are read by the one number parser (:func:`shopapp.core.forms.parse_number`):
    ``"4:1,95"`` is 1.95 g at position 4, ``"4:1,500"`` is refused as ambiguous.
    """
    if not text or not text.strip():
        return None
    parts = []
    for chunk in _NEXT_PART.split(text):
        chunk = chunk.strip().rstrip(",").strip()
        if not chunk:
            continue
        pos, sep, mass = chunk.partition(":")
        if not sep or not plain_digits(pos.strip()):
            raise ValueError(f"{chunk[:30]!r} is not position:grams, e.g. 3:4.2")
        try:
            value = forms.parse_number(mass.strip())
        except ValueError as exc:
            raise ValueError(f"position {pos.strip()}: {exc}") from None
        parts.append({"position": int(pos), "mass_g": value})
    return parts or None

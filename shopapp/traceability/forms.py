"""Forms of the traceability area.

Readings are typed as text and checked by the use-cases (which name the field
and the rule); the forms only carry them. Angles are typed in the shop's
display convention and turned into internal degrees by :func:`typed_angle` (what
is not a number passes on unchanged, so the use-case names the field). Every form
is a FlaskForm (CSRF on).
"""

from __future__ import annotations

import math
from collections.abc import Callable, Iterable
from typing import Any

from wtforms import (
    BooleanField,
    FieldList,
    Form,
    FormField,
    HiddenField,
    SelectField,
    StringField,
    SubmitField,
    TextAreaField,
)
from wtforms.fields.choices import SelectChoice
from wtforms.validators import InputRequired, Length, Optional

from shopapp.balancing.arbor import FRAMES
from shopapp.core.display import ShopDisplay, plain
from shopapp.core.forms import DayField, OnceForm, ShopForm, angle_refusal, parse_number
from shopapp.models import KEY_CONVENTIONS, READING_UNITS, RESIDUAL_TEST_POSITIONS

KEY_DIMENSIONS = ("key_width_mm", "key_height_mm", "key_length_mm", "hub_length_mm",
                  "key_radius_mm", "key_angle_deg")
KEY_LABELS = {"none": "none (no keyway)", "half_key": "half-key (ISO 21940-32)",
              "full_key": "full-key (ISO 21940-32)"}
FRAME_LABELS = {"arbor": "from the arbor's mark (machine reference on the spindle)",
                "rotor": "from the rotor's own mark"}


def blank_to_none(value: Any) -> Any:
    """None for an empty or blank entry, else the value as typed."""
    return None if value is None or (isinstance(value, str) and not value.strip()) else value


def typed_number(raw: Any) -> Any:
    """A typed number read as every form of the app reads one (:func:`parse_number`: a
    decimal comma is a point). Empty stays None; what it refuses passes on unchanged, so
    the use-case refuses it with the field's name and the reason."""
    raw = blank_to_none(raw)
    if not isinstance(raw, str):
        return raw
    try:
        return parse_number(raw.strip())
    except ValueError:
        return raw


def typed_angle(disp: ShopDisplay, raw: Any) -> Any:
    """A typed angle in the shop's convention as internal degrees (read by
    :func:`typed_number`; what is not a finite number passes on unchanged)."""
    value = typed_number(raw)
    if isinstance(value, float) and math.isfinite(value):
        return disp.internal(value)
    return value


def refuse_angles_outside_a_turn(fields: Iterable[tuple[Any, str]]) -> bool:
    """Refuse, beside each field, a typed angle outside 0–360° (``(field, label)`` pairs;
    the label starts the message), as every angle field of the app does
    (:func:`shopapp.core.forms.angle_refusal`): never wrapped. What is not a number is
    left to the use-case, which names it. True when none was refused."""
    ok = True
    for fld, label in fields:
        raw = blank_to_none(fld.data)
        if not isinstance(raw, str):
            continue
        try:
            value = parse_number(raw.strip())
        except ValueError:
            continue
        refusal = angle_refusal(raw.strip(), value)
        if refusal is not None:
            fld.errors = [*fld.errors, f"{label}{refusal}"]
            ok = False
    return ok


def options(pairs: list[tuple[Any, str]]) -> list[SelectChoice]:
    return [SelectChoice(value, label) for value, label in pairs]


def sized(field_list: Any, n: int) -> None:
    """Give a FieldList exactly ``n`` entries (keeps the typed ones)."""
    while len(field_list.entries) < n:
        field_list.append_entry()
    while len(field_list.entries) > n:
        field_list.pop_entry()


class ProvingTestForm(OnceForm):
    performed_on = DayField("Test date", validators=[InputRequired("Required: a date.")])
    proving_rotor_id = SelectField("Proving rotor", coerce=int)
    # The rotor the proposed figures below belong to (kept in step by proving_test.js;
    # without script the server notices a changed rotor and proposes its figures).
    figures_for = HiddenField()
    test_mass_g = StringField("Test mass, each plane, g")
    test_radius_mm = StringField("Test-mass radius, each plane, mm")
    first_position_deg = StringField("Position 1 at, °", default="0")
    claimed_umar = StringField("Claimed U_mar, whole rotor, g·mm")
    p1_amp = FieldList(StringField("indicated"), min_entries=0)
    p1_ang = FieldList(StringField("angle"), min_entries=0)
    p2_amp = FieldList(StringField("indicated"), min_entries=0)
    p2_ang = FieldList(StringField("angle"), min_entries=0)
    urr_before_1 = StringField("URR: unbalance added, plane 1, g·mm")
    urr_after_1 = StringField("URR: left after one step, plane 1, g·mm")
    urr_before_2 = StringField("URR: unbalance added, plane 2, g·mm")
    urr_after_2 = StringField("URR: left after one step, plane 2, g·mm")
    claimed_urr_pct = StringField("Claimed URR, %")
    notes = TextAreaField("Notes", validators=[Optional(), Length(max=5000)])
    compute = SubmitField("Compute")
    save = SubmitField("Save the test")

    def validate(self, extra_validators: Any = None) -> bool:
        """The typed figures read as numbers (a decimal comma is a point) and the angles
        inside 0–360°, each refusal beside its field; the use-case checks the rest."""
        valid = super().validate(extra_validators)
        numbers: list[tuple[Any, str, bool]] = [
            (f, "", f is self.first_position_deg)
            for f in (self.test_mass_g, self.test_radius_mm, self.first_position_deg,
                      self.claimed_umar, self.urr_before_1, self.urr_after_1,
                      self.urr_before_2, self.urr_after_2, self.claimed_urr_pct)]
        for p, (amps, angs) in enumerate(((self.p1_amp, self.p1_ang),
                                          (self.p2_amp, self.p2_ang)), start=1):
            numbers += [(e, f"Plane {p}, position {k} reading: ", False)
                        for k, e in enumerate(amps.entries, start=1)]
            numbers += [(e, f"Plane {p}, position {k} angle: ", True)
                        for k, e in enumerate(angs.entries, start=1)]
        for fld, name, is_angle in numbers:
            raw = blank_to_none(fld.data)
            if not isinstance(raw, str) or fld.errors:
                continue
            try:
                value = parse_number(raw.strip())
            except ValueError as exc:
                fld.errors = [f"{name}{exc}"]
                valid = False
                continue
            refusal = angle_refusal(raw.strip(), value) if is_angle else None
            if refusal is not None:
                fld.errors = [f"{name}{refusal}"]
                valid = False
        return valid

    def size_for(self, positions: int) -> None:
        """One reading field per test-mass position in each plane."""
        for fl in (self.p1_amp, self.p1_ang, self.p2_amp, self.p2_ang):
            sized(fl, positions)

    def propose(self, defaults: Any, rotor_id: int | None = None, *,
                blanks_only: bool = False) -> None:
        """Fill the proposed figures (:class:`~shopapp.traceability.verifications.
        ProvingTestDefaults`) as a person would type them; ``blanks_only`` keeps
        what was typed. ``rotor_id``: the rotor they belong to."""
        for name, text in defaults.as_form().items():
            fld = getattr(self, name)
            if blanks_only and (fld.data or "").strip():
                continue
            fld.data = text
        if rotor_id is not None:
            self.figures_for.data = str(rotor_id)

    def rotor_changed(self, rotor_id: int) -> bool:
        """True when the figures on the form were proposed for another rotor (a form that
        does not say which rotor they belong to is taken as typed for the chosen one)."""
        marker = (self.figures_for.data or "").strip()
        return bool(marker) and marker != str(rotor_id)

    def readings(self, planes: int, disp: ShopDisplay) -> dict[str, Any]:
        """The typed test as keyword arguments of the proving-test use-cases."""
        first = typed_angle(disp, self.first_position_deg.data or "0")
        return {
            "test_mass_g": typed_number(self.test_mass_g.data),
            "test_radius_mm": typed_number(self.test_radius_mm.data),
            "indicated_gmm": [[typed_number(e.data) for e in self.p1_amp.entries],
                              [typed_number(e.data) for e in self.p2_amp.entries]][:planes],
            "indicated_angles_deg": [[typed_angle(disp, e.data) for e in self.p1_ang.entries],
                                     [typed_angle(disp, e.data) for e in self.p2_ang.entries]
                                     ][:planes],
            # As typed when it is not a number: the use-case refuses it by name.
            "first_position_deg": 0.0 if first is None else first,
            "claimed_umar": typed_number(self.claimed_umar.data),
            "urr_before_gmm": [typed_number(self.urr_before_1.data),
                               typed_number(self.urr_before_2.data)][:planes],
            "urr_after_gmm": [typed_number(self.urr_after_1.data),
                              typed_number(self.urr_after_2.data)][:planes],
            "claimed_urr_pct": typed_number(self.claimed_urr_pct.data),
        }

    def error_fields(self) -> dict[str, Any]:
        """Which field shows each of the proving-test use-case's error names."""
        m: dict[str, Any] = {"claimed_umar_gmm": self.claimed_umar}
        for p, (fa, fg) in enumerate(((self.p1_amp, self.p1_ang), (self.p2_amp, self.p2_ang)),
                                     start=1):
            for k, entry in enumerate(fa.entries, start=1):
                m[f"plane_{p}.amplitude_{k}"] = entry
            for k, entry in enumerate(fg.entries, start=1):
                m[f"plane_{p}.angle_{k}"] = entry
            m[f"urr_before_{p}_gmm"] = getattr(self, f"urr_before_{p}")
            m[f"urr_after_{p}_gmm"] = getattr(self, f"urr_after_{p}")
        return m


class ProvingRotorForm(OnceForm):
    name = StringField("Name", validators=[InputRequired("Required."), Length(max=100)])
    mass_kg = StringField("Mass, kg")
    planes = SelectField("Planes", choices=options([("2", "2"), ("1", "1")]))
    radius_1_mm = StringField("Radius plane 1, mm")
    radius_2_mm = StringField("Radius plane 2, mm")
    positions = StringField("Test-mass positions", default="8")
    notes = TextAreaField("Notes", validators=[Optional(), Length(max=5000)])


class ArborForm(OnceForm):
    name = StringField("Name", validators=[InputRequired("Required."), Length(max=100)])
    description = StringField("Description", validators=[Optional(), Length(max=200)])
    mass_kg = StringField("Mass, kg")
    notes = TextAreaField("Notes", validators=[Optional(), Length(max=5000)])


class PlaneReading(Form):
    """One reading per plane (subform: no CSRF of its own)."""

    amp_1 = StringField("plane 1 amplitude")
    ang_1 = StringField("plane 1 angle")
    amp_2 = StringField("plane 2 amplitude")
    ang_2 = StringField("plane 2 angle")


class IndexRunsForm(OnceForm):
    measured_on = DayField("Date", validators=[InputRequired("Required: a date.")])
    index_deg = StringField("Rotor turned on the arbor by, °", default="180")
    second_frame = SelectField("Angle of the second run read",
                               choices=options([(f, FRAME_LABELS[f]) for f in FRAMES]))
    first = FormField(PlaneReading, label="Run 1 (rotor's mark at the arbor's mark), g·mm")
    second = FormField(PlaneReading, label="Run 2 (rotor turned on the arbor), g·mm")
    rotor_mass_kg = StringField("Rotor mass, kg")
    notes = TextAreaField("Notes", validators=[Optional(), Length(max=5000)])

    def validate(self, extra_validators: Any = None) -> bool:
        """Angles outside 0–360° are refused beside their fields, not wrapped."""
        valid = super().validate(extra_validators)
        return refuse_angles_outside_a_turn(
            (getattr(sub, f"ang_{p}"), f"Run {k}, plane {p} angle: ")
            for k, sub in ((1, self.first), (2, self.second)) for p in (1, 2)) and valid


class JobArborForm(ShopForm):
    arbor_id = SelectField("Arbor", coerce=int)


class SubtractForm(ShopForm):
    measurement_id = SelectField("Subtract the arbor error", coerce=int)


class RequiredForm(ShopForm):
    required = HiddenField()


class ResidualTestForm(OnceForm):
    plane = HiddenField()
    positions = SelectField("Positions", coerce=int,
                            choices=options([(n, str(n)) for n in RESIDUAL_TEST_POSITIONS]))
    test_mass_g = StringField("Test mass, g")
    test_radius_mm = StringField("Test-mass radius, mm")
    unit = SelectField("Reading unit", choices=options([(u, u) for u in READING_UNITS]))
    amp = FieldList(StringField("amplitude"), min_entries=0)
    ang = FieldList(StringField("phase"), min_entries=0)
    repeat_amplitude = StringField("Repeat of position 1: amplitude")
    repeat_angle_deg = StringField("Repeat of position 1: phase, °")
    compute = SubmitField("Compute")
    save = SubmitField("Save the test")

    def validate(self, extra_validators: Any = None) -> bool:
        """Phases outside 0–360° are refused beside their fields, not wrapped."""
        valid = super().validate(extra_validators)
        fields = [(e, f"Position {k} phase: ") for k, e in enumerate(self.ang.entries, 1)]
        fields.append((self.repeat_angle_deg, "Repeat phase: "))
        return refuse_angles_outside_a_turn(fields) and valid


class ErrorRunsForm(OnceForm):
    runs = FieldList(FormField(PlaneReading), min_entries=3, max_entries=8)
    key_compensation_applied = BooleanField("The key compensation was applied to the rotor")
    notes = TextAreaField("Notes", validators=[Optional(), Length(max=5000)])

    def validate(self, extra_validators: Any = None) -> bool:
        """Angles outside 0–360° are refused beside their fields, not wrapped."""
        valid = super().validate(extra_validators)
        return refuse_angles_outside_a_turn(
            (getattr(r.form, f"ang_{p}"), f"Run {k}, plane {p} angle: ")
            for k, r in enumerate(self.runs.entries, 1) for p in (1, 2)) and valid


class KeyForm(ShopForm):
    key_convention = SelectField("Key convention",
                                 choices=options([(k, KEY_LABELS[k]) for k in KEY_CONVENTIONS]))
    key_width_mm = StringField("Key width b, mm")
    key_height_mm = StringField("Key height h, mm")
    key_length_mm = StringField("Key length, mm")
    hub_length_mm = StringField("Hub length, mm")
    key_radius_mm = StringField("Radius of the key's centre, mm")
    key_angle_deg = StringField("Keyway angle, °")

    def validate(self, extra_validators: Any = None) -> bool:
        """The keyway angle outside 0–360° is refused beside it, not wrapped."""
        valid = super().validate(extra_validators)
        return refuse_angles_outside_a_turn([(self.key_angle_deg, "")]) and valid

    def load(self, rt: Any, disp: ShopDisplay) -> None:
        """Fill from a stored rotor type (the keyway angle in the shop's convention)."""
        self.key_convention.data = rt.key_convention
        for f in KEY_DIMENSIONS:
            v = getattr(rt, f)
            if f == "key_angle_deg":
                v = disp.angle(v)
            getattr(self, f).data = plain(v)

    def dimensions(self, disp: ShopDisplay) -> dict[str, Any]:
        """The typed key size (mm) and keyway angle (internal degrees) for the use-case."""
        dims = {f: blank_to_none(getattr(self, f).data) for f in KEY_DIMENSIONS}
        dims["key_angle_deg"] = typed_angle(disp, dims["key_angle_deg"])
        return dims


def index_runs_from(form: IndexRunsForm, planes: int,
                    internal: Callable[[Any], Any]) -> tuple[list[Any], list[Any]]:
    """The two index runs typed on ``form`` as (amplitude, internal angle) per plane."""
    def run(sub: Any) -> list[Any]:
        out = [(sub.amp_1.data, internal(sub.ang_1.data))]
        if planes == 2:
            out.append((sub.amp_2.data, internal(sub.ang_2.data)))
        return out

    return run(form.first), run(form.second)


def index_error_fields(form: IndexRunsForm) -> dict[str, Any]:
    """Which field of ``form`` shows each of the index-run use-case's error names."""
    m: dict[str, Any] = {"index_deg": form.index_deg, "rotor_mass_kg": form.rotor_mass_kg,
                         "measured_on": form.measured_on}
    for name, sub in (("first_run", form.first), ("second_run", form.second)):
        for p in (1, 2):
            m[f"{name}.plane_{p}.amplitude"] = getattr(sub, f"amp_{p}")
            m[f"{name}.plane_{p}.angle_deg"] = getattr(sub, f"ang_{p}")
    return m

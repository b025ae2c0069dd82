"""Forms of the intake pages: a file to preview, its confirmation, a machine's mapping."""

from __future__ import annotations

from typing import Any

from flask_wtf.file import FileField
from wtforms import HiddenField, StringField, SubmitField
from wtforms.validators import Length, Optional, Regexp

from shopapp.core.forms import AngleField, ChoiceField, OnceForm, ShopForm, WholeNumberField
from shopapp.intake.files import FIELDS
from shopapp.jobs.forms import UNIT_LABELS
from shopapp.models import READING_UNITS

FIELD_LABELS: dict[str, str] = {
    "job": "Job number", "serial": "Rotor serial", "purpose": "Run purpose",
    "speed_rpm": "Speed", "unit": "Reading unit",
    "amplitude_1": "Plane 1 amplitude", "angle_1_deg": "Plane 1 angle",
    "amplitude_2": "Plane 2 amplitude", "angle_2_deg": "Plane 2 angle",
    "trial_plane": "Trial mass plane", "trial_mass_g": "Trial mass (g)",
    "trial_angle_deg": "Trial mass angle", "trial_radius_mm": "Trial mass radius (mm)",
    "taken_at": "Time of the run", "machine": "Machine name", "notes": "Notes",
}


class UploadForm(ShopForm):
    """A run file to preview (nothing is written)."""

    file = FileField("Run file (CSV or JSON)")
    job_id = HiddenField()
    machine_id = ChoiceField("Machine", choices=[], validate_choice=False)


class ConfirmImportForm(OnceForm):
    """Import the previewed file: its hash (its bytes wait on the server)."""

    sha256 = HiddenField(validators=[Regexp(r"^[0-9a-f]{64}$", message="not a file hash")])
    file_name = HiddenField(validators=[Length(max=255)])
    machine_id = HiddenField()
    job_id = HiddenField()


class MappingForm(ShopForm):
    """A machine's export layout and which of its columns holds which of our fields."""

    sample = FileField("Sample export (CSV)")
    delimiter = ChoiceField("Delimiter", choices=[(";", "semicolon ;"), (",", "comma ,")])
    decimal_mark = ChoiceField("Decimal mark", choices=[(",", "comma: 12,5"),
                                                        (".", "point: 12.5")])
    skip_rows = WholeNumberField("Lines before the header line", default=0)
    encoding = ChoiceField("Encoding", choices=[("utf-8", "UTF-8"),
                                                ("cp1252", "Windows Western (cp1252)")])
    angle_sense = ChoiceField("Its angles count", choices=[
        ("with_rotation", "with rotation"), ("against_rotation", "against rotation")])
    angle_zero_deg = AngleField("Its 0° lies at (degrees from the mark, with rotation)",
                                default=0.0)
    speed_unit = ChoiceField("Speed unit", choices=[("rpm", "rpm"), ("Hz", "Hz")])
    reading_unit = ChoiceField("Amplitude unit when there is no unit column",
                               choices=[("", "— (the export has a unit column)")]
                               + [(u, UNIT_LABELS[u]) for u in READING_UNITS])
    preview = SubmitField("Preview")
    save = SubmitField("Save mapping")

    def values(self) -> dict[str, Any]:
        """The mapping's values for :func:`shopapp.intake.mappings.save_mapping`."""
        return {
            "delimiter": self.delimiter.data, "decimal_mark": self.decimal_mark.data,
            "skip_rows": self.skip_rows.data, "encoding": self.encoding.data,
            "angle_sense": self.angle_sense.data, "angle_zero_deg": self.angle_zero_deg.data,
            "speed_unit": self.speed_unit.data, "reading_unit": self.reading_unit.data or "",
            "columns": {f: (getattr(self, f"column_{f}").data or "") for f in FIELDS},
        }


for _f in FIELDS:
    setattr(MappingForm, f"column_{_f}",
            StringField(f"{FIELD_LABELS[_f]}: column", validators=[Optional(), Length(max=100)]))

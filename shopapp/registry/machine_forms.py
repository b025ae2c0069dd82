"""Balancing-machine form."""

from __future__ import annotations

from typing import Any

from flask_wtf import FlaskForm
from wtforms import StringField, TextAreaField
from wtforms.validators import InputRequired, Length, Optional

from shopapp.core.forms import ChoiceField, NumberField, WholeNumberField
from shopapp.models import BEARING_KINDS
from shopapp.registry.services import MACHINE_FIELDS

BEARING_LABELS = {"hard": "hard-bearing (runs below resonance)", "soft": "soft-bearing (above it)"}


class MachineForm(FlaskForm):
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
    verification_interval_days = WholeNumberField(
        "Verification interval (days)", validators=[Optional()], default=365
    )
    notes = TextAreaField("Notes", validators=[Length(max=5000)])

    def values(self) -> dict[str, Any]:
        return {name: getattr(self, name).data for name in MACHINE_FIELDS}

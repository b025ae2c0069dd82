"""Forms of the resonance pages, and the parser of typed run-up readings.

Readings are typed one per line as ``speed amplitude angle``, separated by
spaces, tabs, semicolons or commas; a decimal comma is refused with a message
naming the line (``12,5`` could be twelve and a half or two numbers). Empty
lines and lines starting with ``#`` are skipped. The parser only turns text into
numbers; the use-case checks their values (speed > 0, order, machine limit).
"""

from __future__ import annotations

import math
import re

from wtforms import StringField, TextAreaField
from wtforms.validators import Length, Optional

from shopapp.core.forms import (
    ChoiceField,
    DayField,
    NumberField,
    OnceForm,
    ShopForm,
    WholeNumberField,
)
from shopapp.models import MEASURED_QUANTITIES, RUNUP_UNITS
from shopapp.resonance.runups import MAX_POINTS, PointIn

MAX_TEXT = 40_000
_DECIMAL_COMMA = re.compile(r"\d,\d")


def _fields(line: str) -> tuple[list[str] | None, str | None]:
    if ";" in line or "\t" in line:
        parts = [p.strip() for p in re.split(r"[;\t]", line)]
        parts = [p for p in parts if p]
        if any("," in p for p in parts):
            return None, "decimal comma"
        return parts, None
    if "," in line:
        parts = [p.strip() for p in line.split(",")]
        if len(parts) == 3 and all(p and not re.search(r"\s", p) for p in parts):
            return parts, None
        if _DECIMAL_COMMA.search(line):
            return None, "decimal comma"
        return [p for p in re.split(r"[,\s]+", line) if p], None
    return line.split(), None


def parse_points(text: str) -> tuple[list[PointIn], list[str]]:
    """Readings from the textarea and one message per bad line (empty when all are good)."""
    points: list[PointIn] = []
    errors: list[str] = []
    for number, raw in enumerate(text.splitlines(), start=1):
        line = raw.strip()
        if not line or line.startswith("#"):
            continue
        parts, problem = _fields(line)
        if problem == "decimal comma" or parts is None:
            errors.append(f"line {number}: {line[:40]!r} has a decimal comma; type a point "
                          "(12.5), and separate the numbers with spaces, tabs or semicolons")
            continue
        if len(parts) != 3:
            errors.append(f"line {number}: expected three numbers (speed amplitude angle), "
                          f"found {len(parts)}")
            continue
        values: list[float] = []
        for part in parts:
            try:
                value = float(part)
            except ValueError:
                errors.append(f"line {number}: {part[:20]!r} is not a number")
                break
            if not math.isfinite(value):
                errors.append(f"line {number}: {part[:20]!r} is not allowed; type a finite "
                              "number")
                break
            values.append(value)
        else:
            points.append(PointIn(values[0], values[1], values[2], line=number))
        if len(points) + len(errors) > MAX_POINTS:
            errors.append(f"more than {MAX_POINTS} lines; record at most {MAX_POINTS} readings")
            break
    return points, errors


def unit_choices() -> list[tuple[str, str]]:
    return [(u, f"{u} ({q})") for q, units in RUNUP_UNITS.items() for u in units]


class RunUpForm(OnceForm):
    recorded_on = DayField("Recorded on", validators=[Optional()])
    sensor = StringField("Sensor (plane, bearing, direction)",
                         validators=[Length(max=64, message="At most 64 characters.")])
    measured = ChoiceField("Measured quantity", choices=[(q, q) for q in MEASURED_QUANTITIES])
    unit = ChoiceField("Unit", choices=unit_choices())
    points = TextAreaField("Readings: speed (rpm), amplitude, angle (°) — one per line",
                           validators=[Length(max=MAX_TEXT,
                                              message=f"At most {MAX_TEXT} characters.")])
    slow_roll_amplitude = NumberField("Slow-roll amplitude")
    slow_roll_angle_deg = NumberField("Slow-roll angle, °")
    operating_speed_rpm = NumberField("Operating speed, rpm")
    operating_lo_rpm = NumberField("or operating range from, rpm")
    operating_hi_rpm = NumberField("to, rpm")
    notes = TextAreaField("Notes", validators=[Length(max=5000)])

    def readings(self) -> list[PointIn] | None:
        """The parsed readings, or None with the line messages put on the field."""
        points, errors = parse_points(self.points.data or "")
        if errors:
            self.points.errors = [*self.points.errors, *errors]
            return None
        return points


class LooseMassForm(ShopForm):
    """The calculator's inputs; sent as a GET (it stores nothing), so no CSRF token."""

    class Meta:
        csrf = False

    rotor_mass_kg = NumberField("Rotor mass, kg")
    unbalance_gmm = NumberField("Unbalance, g·mm")
    eccentricity_um = NumberField("or eccentricity, µm")
    natural_frequency_hz = NumberField("Support natural frequency, Hz")
    stiffness_n_per_m = NumberField("or support stiffness, N/m")
    damping_ratio = NumberField("Support damping ratio ζ")
    ball_count = WholeNumberField("Number of loose masses (at most 12)")
    ball_mass_g = NumberField("Mass of each, g")
    race_radius_mm = NumberField("Race radius, mm")
    drag_ratio = NumberField("Drag ratio of the masses ζ_b")
    rolling_resistance = NumberField("Rolling resistance (fraction, optional)")
    speed_rpm = NumberField("Operating speed, rpm")
    max_speed_rpm = NumberField("Check stability up to, rpm (optional)")
    ramp_time_s = NumberField("Run-up time, s (optional)")

    def values(self) -> dict[str, object]:
        return {f.name: f.data for f in self}


TYRE_BEAD_EXAMPLE: dict[str, str] = {
    # An invented car wheel with balancing beads in the tyre: wheel and tyre 20 kg,
    # 6000 g·mm unbalance (30 g at 200 mm), wheel-hop resonance 12 Hz on a damped
    # suspension, beads lumped into 12 masses of 5 g at 300 mm, about 130 km/h.
    "rotor_mass_kg": "20", "unbalance_gmm": "6000", "natural_frequency_hz": "12",
    "damping_ratio": "0.25", "ball_count": "12", "ball_mass_g": "5",
    "race_radius_mm": "300", "drag_ratio": "0.05", "speed_rpm": "1150",
}

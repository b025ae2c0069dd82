"""The dashboard's period picker (a GET form: no CSRF, nothing is written)."""

from __future__ import annotations

import datetime as dt
from typing import Any

from wtforms import HiddenField, SelectField
from wtforms.fields.choices import SelectChoice
from wtforms.validators import Optional

from shopapp.core.checks import QUERY_AHEAD_DAYS, plain_digits
from shopapp.core.forms import DayField, ShopForm
from shopapp.measures.periods import Period, Scope

# Longest custom range, so one request cannot ask for decades of work.
MAX_CUSTOM_DAYS = 3 * 366
SCOPE_FIELDS = ("operator_id", "machine_id", "rotor_type_id", "customer_id")


class PeriodForm(ShopForm):
    class Meta:
        csrf = False  # a GET filter form; it changes nothing

    period = SelectField(
        "Period",
        choices=[SelectChoice("week"), SelectChoice("month"), SelectChoice("quarter"),
                 SelectChoice("year"), SelectChoice("custom", "from … to …")],
        default="year",
    )
    on = DayField("Containing the day", validators=[Optional()], ahead_days=QUERY_AHEAD_DAYS)
    start = DayField("From", validators=[Optional()], ahead_days=QUERY_AHEAD_DAYS)
    end = DayField("To", validators=[Optional()], ahead_days=QUERY_AHEAD_DAYS)
    operator_id = HiddenField()
    machine_id = HiddenField()
    rotor_type_id = HiddenField()
    customer_id = HiddenField()

    def validate(self, extra_validators: Any = None) -> bool:
        """Field checks, then the range rules (run here: Optional stops a field's chain)."""
        ok = super().validate(extra_validators)
        if self.period.data != "custom" or not ok:
            return ok
        first, last = self.start.data, self.end.data
        if first is None:
            self.start.errors = [*self.start.errors, "give the first day of the range (YYYY-MM-DD)"]
        if last is None:
            self.end.errors = [*self.end.errors, "give the last day of the range (YYYY-MM-DD)"]
        elif first is not None and last < first:
            self.end.errors = [*self.end.errors, f"{last} is before the first day {first}"]
        elif first is not None and (last - first).days >= MAX_CUSTOM_DAYS:
            self.end.errors = [*self.end.errors,
                               f"a range may span at most {MAX_CUSTOM_DAYS} days"]
        return not (self.start.errors or self.end.errors)

    def period_value(self, today: dt.date) -> Period:
        """The chosen period (call after ``validate()`` succeeded)."""
        if self.period.data == "custom" and self.start.data and self.end.data:
            return Period(self.start.data, self.end.data, "custom")
        kind = self.period.data if self.period.data in ("week", "month", "quarter") else "year"
        return Period.containing(kind, self.on.data or today)

    def scope_value(self) -> tuple[Scope, list[tuple[str, str]]]:
        """The focus (operator, machine, rotor type, customer); junk ids are dropped, each
        with (field, why)."""
        values: dict[str, int] = {}
        dropped: list[tuple[str, str]] = []
        for name in SCOPE_FIELDS:
            raw = (getattr(self, name).data or "").strip()
            if not raw:
                continue
            if plain_digits(raw) and len(raw) < 12:
                values[name] = int(raw)
            else:
                dropped.append((name, f"{raw[:20]!r} is not an id"))
        return Scope(**values), dropped


def period_args(period: Period, scope: Scope) -> dict[str, str]:
    """Query arguments that reproduce ``period`` and ``scope`` (links, CSV, PDF)."""
    args: dict[str, str] = {"period": period.kind}
    if period.kind == "custom":
        args.update(start=period.start.isoformat(), end=period.end.isoformat())
    else:
        args["on"] = period.start.isoformat()
    args.update({k: str(v) for k, v in scope.as_args().items()})
    return args

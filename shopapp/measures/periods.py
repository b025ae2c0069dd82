"""What the shop measures are taken over: a period of whole days and a scope.

A period is a range of whole days, first and last day included (a week from
Monday, a calendar month, quarter or year, or a custom range); timestamps belong
to the period of their UTC date. A scope restricts every measure to one operator,
machine, rotor type and/or customer.
"""

from __future__ import annotations

import calendar
import datetime as dt
from dataclasses import asdict, dataclass

from shopapp.core.checks import EARLIEST_DAY, day_refusal
from shopapp.core.errors import ValidationFailed

PERIOD_KINDS: tuple[str, ...] = ("week", "month", "quarter", "year", "custom")


@dataclass(frozen=True)
class Period:
    """Whole days from ``start`` to ``end``, both included."""

    start: dt.date
    end: dt.date
    kind: str = "custom"

    def __post_init__(self) -> None:
        if self.end < self.start:
            raise ValidationFailed(
                "end", f"the period ends ({self.end}) before it starts ({self.start})"
            )

    @classmethod
    def week(cls, day: dt.date) -> Period:
        start = day - dt.timedelta(days=day.weekday())
        return cls(start, start + dt.timedelta(days=6), "week")

    @classmethod
    def month(cls, year: int, month: int) -> Period:
        last = calendar.monthrange(year, month)[1]
        return cls(dt.date(year, month, 1), dt.date(year, month, last), "month")

    @classmethod
    def quarter(cls, year: int, quarter: int) -> Period:
        first = 3 * (quarter - 1) + 1
        last = calendar.monthrange(year, first + 2)[1]
        return cls(dt.date(year, first, 1), dt.date(year, first + 2, last), "quarter")

    @classmethod
    def year(cls, year: int) -> Period:
        return cls(dt.date(year, 1, 1), dt.date(year, 12, 31), "year")

    @classmethod
    def containing(cls, kind: str, day: dt.date) -> Period:
        """The week, month, quarter or year that contains ``day``."""
        if kind == "week":
            return cls.week(day)
        if kind == "month":
            return cls.month(day.year, day.month)
        if kind == "quarter":
            return cls.quarter(day.year, (day.month - 1) // 3 + 1)
        if kind == "year":
            return cls.year(day.year)
        raise ValidationFailed("period", f"'{kind}' is not one of {', '.join(PERIOD_KINDS)}")

    @property
    def days(self) -> int:
        return (self.end - self.start).days + 1

    @property
    def label(self) -> str:
        if self.kind == "month":
            return self.start.strftime("%B %Y")
        if self.kind == "year":
            return str(self.start.year)
        if self.kind == "quarter":
            return f"Q{(self.start.month - 1) // 3 + 1} {self.start.year}"
        if self.kind == "week":
            iso = self.start.isocalendar()
            return f"week {iso.week} of {iso.year}"
        return f"{self.start.isoformat()} – {self.end.isoformat()}"

    @property
    def slug(self) -> str:
        """The period in a file name, as its label says it: ``2026-10``, ``2026-Q4``,
        ``2026``, ``2026-W40`` (ISO week), ``2026-10-01-to-2026-10-15``."""
        if self.kind == "month":
            return f"{self.start:%Y-%m}"
        if self.kind == "year":
            return str(self.start.year)
        if self.kind == "quarter":
            return f"{self.start.year}-Q{(self.start.month - 1) // 3 + 1}"
        if self.kind == "week":
            iso = self.start.isocalendar()
            return f"{iso.year}-W{iso.week:02d}"
        return f"{self.start.isoformat()}-to-{self.end.isoformat()}"

    def previous(self) -> Period:
        """The period of the same kind just before this one (custom: same length)."""
        if self.kind in ("week", "month", "quarter", "year"):
            return Period.containing(self.kind, self.start - dt.timedelta(days=1))
        return Period(
            self.start - dt.timedelta(days=self.days),
            self.start - dt.timedelta(days=1),
            "custom",
        )

    def elapsed_days(self, today: dt.date) -> int:
        """Days of the period up to and including ``today`` (0 before it starts)."""
        if today < self.start:
            return 0
        return (min(today, self.end) - self.start).days + 1

    def in_progress(self, today: dt.date) -> bool:
        """Whether ``today`` lies inside the period (its last days are still to come)."""
        return self.start <= today < self.end

    def compared_with(self, today: dt.date) -> Period:
        """The period this one is compared with on ``today``: like with like.

        A finished period (or one not begun) is compared with the whole previous period
        of its kind; a period in progress with the same number of days from the start
        of the previous one (1–15 November against 1–15 October), never running past
        that period's end (30 days of March against the 28 of February).
        """
        before = self.previous()
        if not self.in_progress(today):
            return before
        days = self.elapsed_days(today)
        end = min(before.end, before.start + dt.timedelta(days=days - 1))
        return Period(before.start, end, "custom")

    def months(self) -> list[str]:
        """``'YYYY-MM'`` of every month the period touches, in order."""
        out: list[str] = []
        y, m = self.start.year, self.start.month
        while (y, m) <= (self.end.year, self.end.month):
            out.append(f"{y:04d}-{m:02d}")
            y, m = (y + 1, 1) if m == 12 else (y, m + 1)
        return out

    def trailing_months(self, count: int = 12) -> Period:
        """The ``count`` whole months ending with the month of ``end``."""
        y, m = self.end.year, self.end.month - (count - 1)
        while m < 1:
            y, m = y - 1, m + 12
        last = calendar.monthrange(self.end.year, self.end.month)[1]
        return Period(dt.date(y, m, 1), dt.date(self.end.year, self.end.month, last), "custom")


def parse_month(value: str, today: dt.date | None = None) -> Period:
    """``'2026-10'`` → the month of October 2026; a clear message otherwise (also for a
    month before the date window or one that has not begun by ``today``)."""
    try:
        year_s, month_s = value.strip().split("-")
        year, month = int(year_s), int(month_s)
        if not (1 <= month <= 12 and 1 <= year <= 9999):
            raise ValueError
    except ValueError:
        raise ValidationFailed(
            "month", f"'{value}' is not a month; write it as YYYY-MM, e.g. 2026-10"
        ) from None
    period = Period.month(year, month)
    # The date window every date input is held to; a month not begun has no figures.
    refusal = day_refusal(period.start, today=today)
    if refusal is not None:
        if period.start >= EARLIEST_DAY:
            refusal = f"{value.strip()} has not begun: {refusal}"
        raise ValidationFailed("month", refusal)
    return period


@dataclass(frozen=True)
class Scope:
    """Restrict every measure to one operator, machine, rotor type and/or customer."""

    operator_id: int | None = None
    machine_id: int | None = None
    rotor_type_id: int | None = None
    customer_id: int | None = None

    def as_args(self) -> dict[str, int]:
        return {k: v for k, v in asdict(self).items() if v is not None}


EVERYTHING = Scope()  # no restriction: the whole shop

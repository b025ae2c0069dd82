"""The demo shop's calendar: working days and moments of a working day (all UTC)."""

from __future__ import annotations

import datetime as dt

WORKDAY_START_MIN = 7 * 60 + 30  # 07:30 UTC


def is_working_day(day: dt.date) -> bool:
    """Mondays to Fridays, except the shop's year-end closure (24 Dec – 1 Jan)."""
    if day.weekday() >= 5:
        return False
    return not ((day.month == 12 and day.day >= 24) or (day.month == 1 and day.day == 1))


def add_working_days(day: dt.date, n: int) -> dt.date:
    """The ``n``-th working day after ``day`` (``n = 0``: ``day`` or the next working day)."""
    out = day
    while not is_working_day(out):
        out += dt.timedelta(days=1)
    for _ in range(n):
        out += dt.timedelta(days=1)
        while not is_working_day(out):
            out += dt.timedelta(days=1)
    return out


def working_day_on_or_before(day: dt.date) -> dt.date:
    """``day`` when the shop works then, else the last working day before it."""
    out = day
    while not is_working_day(out):
        out -= dt.timedelta(days=1)
    return out


def at(day: dt.date, minutes: float) -> dt.datetime:
    """A whole-second UTC moment ``minutes`` after midnight of ``day``."""
    return dt.datetime(day.year, day.month, day.day, tzinfo=dt.UTC) + dt.timedelta(
        seconds=round(minutes * 60.0)
    )

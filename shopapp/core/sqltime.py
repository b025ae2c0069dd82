"""Date and time arithmetic in SQL that SQLite and PostgreSQL spell alike.

Day numbers, integer division, ``'YYYY-MM'`` months, whole epoch seconds and the
Monday-to-Friday working-day index, as SQLAlchemy expressions that compile to each
backend's own spelling, and their Python twins for bound dates. The shop measures
(:mod:`shopapp.measures.sql`) and the per-job facts (:mod:`shopapp.jobs.facts`) both
compute with them, so a figure means the same in either.
"""

from __future__ import annotations

import datetime as dt
from typing import Any

from sqlalchemy import Date, Integer, String, case
from sqlalchemy.ext.compiler import compiles
from sqlalchemy.sql import ColumnElement
from sqlalchemy.sql.functions import FunctionElement


class day_number(FunctionElement[int]):
    """Days since 1970-01-01 of a DATE column, as an integer, on SQLite and PostgreSQL."""

    type = Integer()
    name = "day_number"
    inherit_cache = True


@compiles(day_number, "sqlite")
def _day_number_sqlite(element: day_number, compiler: Any, **kw: Any) -> str:
    arg = compiler.process(element.clauses, **kw)
    # Seconds since the epoch of a whole day divide exactly by 86 400.
    return f"(CAST(strftime('%s', {arg}) AS INTEGER) / 86400)"


@compiles(day_number, "postgresql")
def _day_number_pg(element: day_number, compiler: Any, **kw: Any) -> str:
    arg = compiler.process(element.clauses, **kw)
    return f"(({arg}) - DATE '1970-01-01')"


class int_div(FunctionElement[int]):
    """Integer division of two non-negative integers (truncates on both backends)."""

    type = Integer()
    name = "int_div"
    inherit_cache = True


@compiles(int_div)
def _int_div(element: int_div, compiler: Any, **kw: Any) -> str:
    a, b = list(element.clauses)
    return f"(({compiler.process(a, **kw)}) / ({compiler.process(b, **kw)}))"


class year_month(FunctionElement[str]):
    """``'YYYY-MM'`` of a DATE, or of a UTC timestamp, on both backends."""

    type = String()
    name = "year_month"
    inherit_cache = True


@compiles(year_month, "sqlite")
def _year_month_sqlite(element: year_month, compiler: Any, **kw: Any) -> str:
    return f"strftime('%Y-%m', {compiler.process(element.clauses, **kw)})"


@compiles(year_month, "postgresql")
def _year_month_pg(element: year_month, compiler: Any, **kw: Any) -> str:
    (arg,) = list(element.clauses)
    sql = compiler.process(arg, **kw)
    if not isinstance(arg.type, Date):
        # timestamptz: take the UTC calendar month, whatever the session's time zone.
        sql = f"({sql} AT TIME ZONE 'UTC')"
    return f"to_char({sql}, 'YYYY-MM')"


class epoch_seconds(FunctionElement[int]):
    """Whole seconds since 1970-01-01 UTC of a UTC timestamp, on SQLite and PostgreSQL.

    Fractions of a second are dropped on both (SQLite's ``strftime('%s')`` truncates;
    PostgreSQL takes ``floor`` of the epoch), so differences are whole seconds and
    both backends add them up to the same totals.
    """

    type = Integer()
    name = "epoch_seconds"
    inherit_cache = True


@compiles(epoch_seconds, "sqlite")
def _epoch_seconds_sqlite(element: epoch_seconds, compiler: Any, **kw: Any) -> str:
    return f"CAST(strftime('%s', {compiler.process(element.clauses, **kw)}) AS INTEGER)"


@compiles(epoch_seconds, "postgresql")
def _epoch_seconds_pg(element: epoch_seconds, compiler: Any, **kw: Any) -> str:
    arg = compiler.process(element.clauses, **kw)
    return f"CAST(floor(extract(epoch FROM {arg})) AS BIGINT)"


# 1970-01-01 was a Thursday: +3 makes Monday 1969-12-29 day 0 of a Monday-based week.
_MONDAY_SHIFT = 3


def work_day_index_of_day(day_expr: ColumnElement[Any]) -> ColumnElement[int]:
    """Mondays-to-Fridays from 1969-12-29 up to and including the day ``day_expr`` (SQL).

    ``day_expr`` is a :class:`day_number` (days since 1970-01-01). With ``d`` the
    Monday-based day number plus one, ``5·(d div 7) + min(d mod 7, 5)`` counts the
    working days in ``[day 0, d)``; the difference of two indexes is the number of
    working days after the first date up to and including the second.
    """
    d = day_expr + (_MONDAY_SHIFT + 1)
    weeks = int_div(d, 7)
    rest = d - weeks * 7
    return weeks * 5 + case((rest > 5, 5), else_=rest)


def work_day_index(date_expr: ColumnElement[Any]) -> ColumnElement[int]:
    """:func:`work_day_index_of_day` of a DATE column (parses the date several times:
    where many rows are read, take ``day_number`` once in a subquery instead)."""
    return work_day_index_of_day(day_number(date_expr))


def work_day_index_py(day: dt.date) -> int:
    """The same index as :func:`work_day_index`, in Python (for bound dates)."""
    d = (day - dt.date(1970, 1, 1)).days + _MONDAY_SHIFT + 1
    return 5 * (d // 7) + min(d % 7, 5)


def working_days(received: dt.date, dispatched: dt.date) -> int:
    """Working days (Mon–Fri) after ``received`` up to and including ``dispatched``."""
    return work_day_index_py(dispatched) - work_day_index_py(received)


def utc_start(day: dt.date) -> dt.datetime:
    """The first moment of ``day`` in UTC (timestamps belong to the period of their UTC date)."""
    return dt.datetime.combine(day, dt.time(0), tzinfo=dt.UTC)

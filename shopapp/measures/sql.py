"""The SQL the shop measures are built from: date arithmetic both backends share and
the query shapes every measure family uses.

Every aggregate is computed by the database (GROUP BY and window functions that
SQLite >= 3.25 and PostgreSQL both have); :func:`day_number`, :func:`int_div` and
:func:`year_month` compile to each backend's own spelling. A family's rows are
built once (:func:`base_select`: the job's slice columns, its month and the
family's values), repeated per dimension (:func:`long_form`) and grouped
(:func:`grouped`); percentiles are read off a histogram (:func:`histogram`,
:func:`pct_hist`). The definitions of the measures are in
:mod:`shopapp.measures.services`.
"""

from __future__ import annotations

import datetime as dt
from collections.abc import Sequence
from typing import Any, TypeAlias

from sqlalchemy import (
    Date,
    Float,
    Integer,
    Select,
    SQLColumnExpression,
    String,
    and_,
    case,
    cast,
    func,
    label,
    literal_column,
    select,
    union_all,
)
from sqlalchemy.ext.compiler import compiles
from sqlalchemy.orm import Session
from sqlalchemy.sql import ColumnElement
from sqlalchemy.sql.functions import FunctionElement

from shopapp.measures.periods import Period, Scope
from shopapp.models import Job, JobTransition, Rotor

# Any SELECT, whatever its columns (SQLAlchemy types a Select by its column tuple).
AnySelect: TypeAlias = "Select[*tuple[Any, ...]]"
# A column expression or an ORM attribute: what a measure family selects.
Column: TypeAlias = "SQLColumnExpression[Any]"

REWORK_FROM_STATES: tuple[str, ...] = ("in_tolerance", "certified", "dispatched")


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


def job_dims() -> dict[str, Column]:
    """The slice columns of a job, by the name they carry in every family's rows."""
    return {
        "operator_id": Job.operator_id,
        "machine_id": Job.machine_id,
        "rotor_type_id": Rotor.rotor_type_id,
        "customer_id": Job.customer_id,
    }


def scoped(stmt: AnySelect, scope: Scope) -> AnySelect:
    """``stmt`` (over job JOIN rotor) restricted to ``scope``."""
    if scope.operator_id is not None:
        stmt = stmt.where(Job.operator_id == scope.operator_id)
    if scope.machine_id is not None:
        stmt = stmt.where(Job.machine_id == scope.machine_id)
    if scope.rotor_type_id is not None:
        stmt = stmt.where(Rotor.rotor_type_id == scope.rotor_type_id)
    if scope.customer_id is not None:
        stmt = stmt.where(Job.customer_id == scope.customer_id)
    return stmt


def base_select(columns: dict[str, Column], month: Column) -> AnySelect:
    """SELECT of the job's slice columns, its month and ``columns``, FROM job JOIN rotor."""
    cols = [label(n, c) for n, c in job_dims().items()]
    cols.append(year_month(month).label("month"))
    cols.extend(label(n, c) for n, c in columns.items())
    return select(*cols).select_from(Job).join(Rotor, Rotor.id == Job.rotor_id)


def _key(dim: str, base: Any) -> ColumnElement[Any]:
    if dim == "all":
        return cast(literal_column("NULL"), String)
    if dim == "month":
        return base.c.month
    return cast(base.c[f"{dim}_id"], String)


def long_form(base_stmt: AnySelect, dims: Sequence[str], values: Sequence[str]) -> Any:
    """The base rows once per dimension: (dim, key, *values), as a subquery.

    The base is a CTE, so each backend computes it once and reads it per dimension.
    """
    # MATERIALIZED: computed once and read per dimension (SQLite >= 3.35, PostgreSQL >= 12).
    base = base_stmt.cte("base").prefix_with("MATERIALIZED")
    parts = [
        select(
            literal_column(f"'{dim}'", String).label("dim"),
            _key(dim, base).label("key"),
            *(base.c[v] for v in values),
        )
        for dim in dims
    ]
    return (union_all(*parts) if len(parts) > 1 else parts[0]).subquery("long")


def grouped(
    session: Session, long: Any, aggregates: dict[str, ColumnElement[Any]]
) -> dict[tuple[str, str | None], dict[str, Any]]:
    stmt = select(long.c.dim, long.c.key, *(a.label(n) for n, a in aggregates.items())).group_by(
        long.c.dim, long.c.key
    )
    out: dict[tuple[str, str | None], dict[str, Any]] = {}
    for row in session.execute(stmt).mappings():
        out[(row["dim"], row["key"])] = {n: row[n] for n in aggregates}
    return out


def histogram(long: Any, value: str, extra: dict[str, ColumnElement[Any]]) -> Any:
    """Rows per (dim, key, value) with their count ``c``, running count ``cum`` and total ``n``.

    Percentiles are read off this histogram: the rank-``r`` value is the ``value`` of
    the row with ``cum − c < r ≤ cum``. The histogram has one row per distinct value
    (turnarounds and ages are whole working days), so the window functions run over
    a few hundred rows whatever the number of jobs.
    """
    hist = (
        select(long.c.dim, long.c.key, long.c[value].label("v"), func.count().label("c"),
               *(e.label(n) for n, e in extra.items()))
        .group_by(long.c.dim, long.c.key, long.c[value])
        .subquery("hist")
    )
    hpart = (hist.c.dim, hist.c.key)
    return select(
        hist,
        cast(func.sum(hist.c.c).over(partition_by=hpart, order_by=hist.c.v, rows=(None, 0)),
             Integer).label("cum"),
        cast(func.sum(hist.c.c).over(partition_by=hpart), Integer).label("n"),
    ).subquery("cumulative")


def pct_hist(h: Any, num: int, den: int) -> ColumnElement[float]:
    """Aggregate over a :func:`histogram`: the ``num/den`` quantile, linear interpolation.

    With ``h = (n−1)·num/den`` the result is ``v[⌊h⌋+1] + (h−⌊h⌋)·(v[⌊h⌋+2] − v[⌊h⌋+1])``
    (Hyndman & Fan 1996, definition 7; numpy.percentile's default, PostgreSQL's
    ``percentile_cont``). Integer arithmetic only, so SQLite needs no math functions.
    """
    scaled = (h.c.n - 1) * num
    lo = int_div(scaled, den)
    rem = scaled - lo * den

    def at_rank(r: ColumnElement[Any]) -> ColumnElement[Any]:
        return func.max(case((and_(h.c.cum - h.c.c < r, r <= h.c.cum), h.c.v)))

    v_lo, v_hi = at_rank(lo + 1), at_rank(lo + 2)
    frac = cast(func.max(rem), Float) / den
    return cast(v_lo + frac * (func.coalesce(v_hi, v_lo) - v_lo), Float)


Grouped = dict[tuple[str, str | None], dict[str, Any]]


def days_cte(stmt: AnySelect) -> Any:
    """``stmt`` as a materialized CTE, so each date is parsed once per row."""
    return stmt.cte("days").prefix_with("MATERIALIZED")


def from_days(days: Any, columns: dict[str, Column]) -> AnySelect:
    """The slice columns and month of a :func:`days_cte`, with ``columns`` computed on it."""
    dims = [days.c[n] for n in (*job_dims(), "month")]
    return select(*dims, *(label(n, c) for n, c in columns.items()))


def reopenings(p: Period) -> AnySelect:
    """Reopenings in ``p``: moves back to ``on_machine`` from a finished state (rework)."""
    return select(JobTransition.job_id, JobTransition.at, JobTransition.reason).where(
        JobTransition.to_state == "on_machine",
        JobTransition.from_state.in_(REWORK_FROM_STATES),
        JobTransition.at >= utc_start(p.start),
        JobTransition.at < utc_start(p.end + dt.timedelta(days=1)),
    )


NO_REASON = "(no reason given)"
RETURN_REASON = "customer return"


def reopen_reason(reason: Column) -> ColumnElement[str]:
    """How a reopening's reason is listed: its text trimmed, or "(no reason given)"."""
    trimmed = func.trim(reason)
    return case((trimmed == "", NO_REASON), else_=trimmed)


def return_reason(notes: Column) -> ColumnElement[str]:
    """How a customer return is listed: "customer return", with the note written when it
    was booked in (its first 80 characters) when there is one."""
    trimmed = func.trim(notes)
    return case(
        (trimmed == "", RETURN_REASON),
        else_=literal_column(f"'{RETURN_REASON}: '", String) + func.substr(trimmed, 1, 80),
    )


def rejections(p: Period) -> AnySelect:
    """Moves to ``rejected`` in ``p``."""
    return select(JobTransition.job_id, JobTransition.at, JobTransition.reason).where(
        JobTransition.to_state == "rejected",
        JobTransition.at >= utc_start(p.start),
        JobTransition.at < utc_start(p.end + dt.timedelta(days=1)),
    )

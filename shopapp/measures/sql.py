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
from sqlalchemy.orm import Session
from sqlalchemy.sql import ColumnElement

# The date arithmetic lives in shopapp.core.sqltime; the measures import it from here too.
from shopapp.core.sqltime import (
    day_number as day_number,
)
from shopapp.core.sqltime import (
    epoch_seconds as epoch_seconds,
)
from shopapp.core.sqltime import (
    int_div as int_div,
)
from shopapp.core.sqltime import (
    utc_start as utc_start,
)
from shopapp.core.sqltime import (
    work_day_index as work_day_index,
)
from shopapp.core.sqltime import (
    work_day_index_of_day as work_day_index_of_day,
)
from shopapp.core.sqltime import (
    work_day_index_py as work_day_index_py,
)
from shopapp.core.sqltime import (
    working_days as working_days,
)
from shopapp.core.sqltime import (
    year_month as year_month,
)
from shopapp.jobs.facts import NO_REASON as NO_REASON
from shopapp.jobs.facts import RETURN_REASON as RETURN_REASON
from shopapp.jobs.facts import REWORK_FROM_STATES as REWORK_FROM_STATES
from shopapp.jobs.facts import reopen_reason as reopen_reason
from shopapp.jobs.facts import return_reason as return_reason
from shopapp.measures.periods import Period, Scope
from shopapp.models import Job, JobFact, JobTransition, Rotor

# Any SELECT, whatever its columns (SQLAlchemy types a Select by its column tuple).
AnySelect: TypeAlias = "Select[*tuple[Any, ...]]"
# A column expression or an ORM attribute: what a measure family selects.
Column: TypeAlias = "SQLColumnExpression[Any]"



def fact_dims() -> dict[str, Column]:
    """The slice columns of a job's facts, by the name they carry in every family's rows."""
    return {
        "operator_id": JobFact.operator_id,
        "machine_id": JobFact.machine_id,
        "rotor_type_id": JobFact.rotor_type_id,
        "customer_id": JobFact.customer_id,
    }


def scoped_facts(stmt: AnySelect, scope: Scope) -> AnySelect:
    """``stmt`` (over job_fact) restricted to ``scope``."""
    for name, col in fact_dims().items():
        value = getattr(scope, name)
        if value is not None:
            stmt = stmt.where(col == value)
    return stmt


def fact_select(columns: dict[str, Column], month: Column) -> AnySelect:
    """SELECT of the job's slice columns, its month (``'YYYY-MM'`` already) and ``columns``,
    FROM job_fact: one small row per job, no join."""
    cols = [label(n, c) for n, c in fact_dims().items()]
    cols.append(label("month", month))
    cols.extend(label(n, c) for n, c in columns.items())
    return select(*cols).select_from(JobFact)


def fact_summary(columns: dict[str, Column], month: Column, *by: Column) -> AnySelect:
    """As :func:`fact_select`, but one row per slice (the four slice columns and the month,
    and ``by``), ``columns`` being aggregates over its jobs.

    A year of a busy shop is 50 000 jobs in about 800 slices: the per-dimension rows
    (:func:`long_form`) then repeat 800 rows, not 50 000, and the families sum them.
    """
    return fact_select(columns, month).group_by(*fact_dims().values(), month, *by)


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


def long_form(base_stmt: AnySelect, dims: Sequence[str], values: Sequence[str],
              name: str = "base") -> Any:
    """The base rows once per dimension: (dim, key, *values), as a subquery.

    The base is a CTE (named ``name``), so each backend computes it once and reads it per
    dimension.
    """
    # MATERIALIZED: computed once and read per dimension (SQLite >= 3.35, PostgreSQL >= 12).
    base = base_stmt.cte(name).prefix_with("MATERIALIZED")
    parts = [
        select(
            literal_column(f"'{dim}'", String).label("dim"),
            _key(dim, base).label("key"),
            *(base.c[v] for v in values),
        )
        for dim in dims
    ]
    return (union_all(*parts) if len(parts) > 1 else parts[0]).subquery(f"{name}_long")


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


def histogram(long: Any, value: str, extra: dict[str, ColumnElement[Any]],
              weight: str | None = None) -> Any:
    """Rows per (dim, key, value) with their count ``c``, running count ``cum`` and total ``n``.

    ``weight``: the column of ``long`` that counts how many jobs a row stands for (rows
    already summed per slice, :func:`fact_summary`); without it each row is one job.

    Percentiles are read off this histogram: the rank-``r`` value is the ``value`` of
    the row with ``cum − c < r ≤ cum``. The histogram has one row per distinct value
    (turnarounds and ages are whole working days), so the window functions run over
    a few hundred rows whatever the number of jobs.
    """
    hist = (
        select(long.c.dim, long.c.key, long.c[value].label("v"),
               (func.count() if weight is None else func.sum(long.c[weight])).label("c"),
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


def rejections(p: Period) -> AnySelect:
    """Moves to ``rejected`` in ``p``."""
    return select(JobTransition.job_id, JobTransition.at, JobTransition.reason).where(
        JobTransition.to_state == "rejected",
        JobTransition.at >= utc_start(p.start),
        JobTransition.at < utc_start(p.end + dt.timedelta(days=1)),
    )

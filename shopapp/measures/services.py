"""Shop measures for the owner: throughput, turnaround, first-pass, rework, rejections.

Every aggregate is computed by the database (GROUP BY and window functions that
SQLite ≥ 3.25 and PostgreSQL both have); no job is loaded into Python. The few
lines of Python after a query only combine two aggregates into a ratio or fill
in months without jobs, so both backends give the same numbers.

Definitions (a period is a range of whole days, first and last day included;
timestamps are stored in UTC and belong to the period of their UTC date):

jobs_received
    jobs whose ``received_on`` lies in the period.
jobs_dispatched
    jobs whose ``dispatched_on`` lies in the period.
wip_jobs, wip_age_median_wd, wip_age_max_wd
    work in progress at the end of the period (or today, if the period has not
    ended yet): jobs received on or before that day, not dispatched by then and
    not rejected by then. Their age is the number of working days from receipt
    to that day; median and oldest.
turnaround_median_wd, turnaround_p90_wd
    over the jobs dispatched in the period: working days from received to
    dispatched, counting the Mondays to Fridays after the day of receipt up to
    and including the day of dispatch (received and dispatched the same day = 0;
    received Friday, dispatched Monday = 1; public holidays are not known to
    shopapp and count as working days). Median and 90th percentile by linear
    interpolation between the closest ranks (numpy's default, PostgreSQL's
    ``percentile_cont``).
promised_hit_rate
    among the jobs dispatched in the period that carried a promised date, the
    share dispatched on or before it (``promised_jobs``, ``promised_hit``).
reached_in_tolerance
    jobs that first reached ``in_tolerance`` in the period (``first_in_tolerance_at``).
correction_cycles_mean
    over those jobs, the mean number of correction steps applied up to the moment
    the job first reached ``in_tolerance``. A step is the set of corrections that
    answer one run (masses in both planes after one reading are one step); a
    correction recorded without its run counts as a step of its own. Corrections
    after a reopening are rework, not cycles.
first_pass_rate
    among the jobs that reached ``in_tolerance`` in the period and had at least one
    correction step before that, the share whose first check (or final) run after
    the first step was within tolerance in every plane (``Run.within_tolerance``).
    ``first_pass_judged`` is that denominator: jobs that needed no correction, or
    whose first check after the first step carries no verdict, are left out of it.
reworked_jobs, rework_rate
    distinct jobs reopened in the period (a transition to ``on_machine`` from
    ``in_tolerance``, ``certified`` or ``dispatched``) plus return jobs received in
    the period; divided by ``reached_in_tolerance`` of the same period and slice.
    A return is counted against its own job (its operator, machine, month).
rework_reasons
    the reasons of the period's reopenings, one count per reopening, and the return
    jobs received in the period under "customer return".
rejected_jobs, rejection_reasons
    distinct jobs moved to ``rejected`` in the period, and the reasons given.
rotors_getting_worse
    rotors whose latest visit up to the end of the period was received in the
    period and whose initial unbalance rose from each of their last ``visits``
    visits to the next (default three visits, so two rises in a row). A visit's
    initial unbalance is the largest plane amplitude of its first ``initial`` run;
    visits are compared only when their readings are in the same unit.
machine_utilisation
    per machine: runs taken in the period on jobs assigned to it, and the distinct
    jobs those runs belong to.
verification status
    per machine, as of today, from its latest verification: ``failed`` when that
    one failed, ``never verified`` without one, else due on its date plus the
    machine's interval: ``overdue`` after that day, ``due soon`` within the shop's
    ``due_soon_days`` of it, else ``current``.

Slices: operator (``Job.operator_id``), machine (``Job.machine_id``), rotor type
(``Rotor.rotor_type_id``), customer (``Job.customer_id``) and month (the month of
the date that puts a row into the period: received for received jobs and work in
progress, dispatched for dispatched jobs, turnaround and promised dates, first
``in_tolerance`` for first-pass and cycles, the event for rework and rejection).
"""

from __future__ import annotations

import calendar
import datetime as dt
from collections.abc import Iterable, Sequence
from dataclasses import asdict, dataclass, field, fields
from typing import Any

from sqlalchemy import (
    Date,
    Float,
    Integer,
    Select,
    String,
    and_,
    case,
    cast,
    false,
    func,
    literal_column,
    or_,
    select,
    true,
    union_all,
)
from sqlalchemy.ext.compiler import compiles
from sqlalchemy.orm import Session, aliased
from sqlalchemy.sql import ColumnElement
from sqlalchemy.sql.functions import FunctionElement

from shopapp.core.errors import ValidationFailed
from shopapp.core.permissions import require
from shopapp.core.settings import get_settings
from shopapp.models import (
    Correction,
    Customer,
    Job,
    JobTransition,
    Machine,
    MachineVerification,
    Rotor,
    RotorType,
    Run,
    RunReading,
    User,
)

DIMENSIONS: tuple[str, ...] = ("operator", "machine", "rotor_type", "customer", "month")
DIMENSION_LABELS: dict[str, str] = {
    "operator": "operator",
    "machine": "machine",
    "rotor_type": "rotor type",
    "customer": "customer",
    "month": "month",
}
PERIOD_KINDS: tuple[str, ...] = ("week", "month", "quarter", "year", "custom")
REWORK_FROM_STATES: tuple[str, ...] = ("in_tolerance", "certified", "dispatched")
CHECK_PURPOSES: tuple[str, ...] = ("check", "final")
RETURN_REASON = "customer return"
UNASSIGNED = "(none)"


# --------------------------------------------------------------------------- SQL helpers
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


def _utc_start(day: dt.date) -> dt.datetime:
    return dt.datetime.combine(day, dt.time(0), tzinfo=dt.UTC)


# --------------------------------------------------------------------------- periods
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

    def previous(self) -> Period:
        """The period of the same kind just before this one (custom: same length)."""
        if self.kind in ("week", "month", "quarter", "year"):
            return Period.containing(self.kind, self.start - dt.timedelta(days=1))
        return Period(
            self.start - dt.timedelta(days=self.days),
            self.start - dt.timedelta(days=1),
            "custom",
        )

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


def parse_month(value: str) -> Period:
    """``'2026-10'`` → the month of October 2026; a clear message otherwise."""
    try:
        year_s, month_s = value.strip().split("-")
        year, month = int(year_s), int(month_s)
        if not (1 <= month <= 12 and 1900 <= year <= 9999):
            raise ValueError
    except ValueError:
        raise ValidationFailed(
            "month", f"'{value}' is not a month; write it as YYYY-MM, e.g. 2026-10"
        ) from None
    return Period.month(year, month)


# --------------------------------------------------------------------------- results
@dataclass(frozen=True)
class Scope:
    """Restrict every measure to one operator, machine, rotor type and/or customer."""

    operator_id: int | None = None
    machine_id: int | None = None
    rotor_type_id: int | None = None
    customer_id: int | None = None

    def as_args(self) -> dict[str, int]:
        return {k: v for k, v in asdict(self).items() if v is not None}


@dataclass
class Figures:
    """The measures of one period, or of one slice of it (see the module docstring)."""

    jobs_received: int = 0
    jobs_dispatched: int = 0
    wip_jobs: int = 0
    wip_age_median_wd: float | None = None
    wip_age_max_wd: int | None = None
    turnaround_median_wd: float | None = None
    turnaround_p90_wd: float | None = None
    promised_jobs: int = 0
    promised_hit: int = 0
    reached_in_tolerance: int = 0
    first_pass_judged: int = 0
    first_pass_jobs: int = 0
    correction_cycles_mean: float | None = None
    reworked_jobs: int = 0
    rejected_jobs: int = 0

    @property
    def promised_hit_rate(self) -> float | None:
        return self.promised_hit / self.promised_jobs if self.promised_jobs else None

    @property
    def first_pass_rate(self) -> float | None:
        return self.first_pass_jobs / self.first_pass_judged if self.first_pass_judged else None

    @property
    def rework_rate(self) -> float | None:
        return self.reworked_jobs / self.reached_in_tolerance if self.reached_in_tolerance else None

    def as_dict(self) -> dict[str, Any]:
        out: dict[str, Any] = {f.name: getattr(self, f.name) for f in fields(self)}
        out["promised_hit_rate"] = self.promised_hit_rate
        out["first_pass_rate"] = self.first_pass_rate
        out["rework_rate"] = self.rework_rate
        return out


FIGURE_NAMES: tuple[str, ...] = tuple(Figures().as_dict())


@dataclass
class SliceRow:
    dimension: str
    key: str | None  # the id (as text) or 'YYYY-MM'; None = not assigned
    label: str
    figures: Figures

    @property
    def key_id(self) -> int | None:
        return int(self.key) if self.key is not None and self.dimension != "month" else None


@dataclass(frozen=True)
class ReasonCount:
    reason: str
    count: int


@dataclass(frozen=True)
class WorseningRotor:
    rotor_id: int
    serial_number: str
    customer: str
    rotor_type: str
    job_number: str
    received_on: dt.date
    unit: str
    # Initial unbalance of the compared visits, oldest first.
    initial_amplitudes: tuple[float, ...]


@dataclass(frozen=True)
class MachineStatus:
    machine_id: int
    name: str
    jobs: int
    runs: int
    last_verified_on: dt.date | None
    due_on: dt.date | None
    status: str  # current | due soon | overdue | failed | never verified


@dataclass
class ShopReport:
    """Everything the dashboard, the CSV files, the JSON and the monthly PDF show."""

    period: Period
    previous_period: Period
    scope: Scope
    as_of: dt.date
    figures: Figures
    previous: Figures
    slices: dict[str, list[SliceRow]] = field(default_factory=dict)
    trend_period: Period | None = None
    trend: list[SliceRow] = field(default_factory=list)
    rework_reasons: list[ReasonCount] = field(default_factory=list)
    rejection_reasons: list[ReasonCount] = field(default_factory=list)
    rotors_getting_worse: list[WorseningRotor] = field(default_factory=list)
    machines: list[MachineStatus] = field(default_factory=list)
    shop_name: str = ""

    def to_json(self) -> dict[str, Any]:
        """Plain JSON data keyed by the measure names."""

        def slice_rows(rows: list[SliceRow]) -> list[dict[str, Any]]:
            return [{"key": r.key, "label": r.label, **r.figures.as_dict()} for r in rows]

        return {
            "period": {"start": self.period.start.isoformat(), "end": self.period.end.isoformat(),
                       "label": self.period.label},
            "previous_period": {"start": self.previous_period.start.isoformat(),
                                "end": self.previous_period.end.isoformat()},
            "as_of": self.as_of.isoformat(),
            "scope": self.scope.as_args(),
            **self.figures.as_dict(),
            "previous": self.previous.as_dict(),
            "by": {dim: slice_rows(rows) for dim, rows in self.slices.items()},
            "trend": slice_rows(self.trend),
            "rework_reasons": [asdict(r) for r in self.rework_reasons],
            "rejection_reasons": [asdict(r) for r in self.rejection_reasons],
            "rotors_getting_worse": [
                {**asdict(r), "received_on": r.received_on.isoformat(),
                 "initial_amplitudes": list(r.initial_amplitudes)}
                for r in self.rotors_getting_worse
            ],
            "machine_utilisation": [
                {"machine_id": m.machine_id, "machine": m.name, "jobs": m.jobs, "runs": m.runs}
                for m in self.machines
            ],
            "machine_verification": [
                {"machine_id": m.machine_id, "machine": m.name,
                 "last_verified_on": m.last_verified_on.isoformat() if m.last_verified_on else None,
                 "due_on": m.due_on.isoformat() if m.due_on else None, "status": m.status}
                for m in self.machines
            ],
        }


# --------------------------------------------------------------------------- query building
def _job_dims() -> dict[str, ColumnElement[Any]]:
    return {
        "operator_id": Job.operator_id,
        "machine_id": Job.machine_id,
        "rotor_type_id": Rotor.rotor_type_id,
        "customer_id": Job.customer_id,
    }


def _scoped(stmt: Select[Any], scope: Scope) -> Select[Any]:
    if scope.operator_id is not None:
        stmt = stmt.where(Job.operator_id == scope.operator_id)
    if scope.machine_id is not None:
        stmt = stmt.where(Job.machine_id == scope.machine_id)
    if scope.rotor_type_id is not None:
        stmt = stmt.where(Rotor.rotor_type_id == scope.rotor_type_id)
    if scope.customer_id is not None:
        stmt = stmt.where(Job.customer_id == scope.customer_id)
    return stmt


def _base(columns: dict[str, ColumnElement[Any]], month: ColumnElement[Any]) -> Select[Any]:
    """SELECT of the job's slice columns, its month and ``columns``, FROM job JOIN rotor."""
    cols = [c.label(n) for n, c in _job_dims().items()]
    cols.append(year_month(month).label("month"))
    cols.extend(c.label(n) for n, c in columns.items())
    return select(*cols).select_from(Job).join(Rotor, Rotor.id == Job.rotor_id)


def _key(dim: str, base: Any) -> ColumnElement[Any]:
    if dim == "all":
        return cast(literal_column("NULL"), String)
    if dim == "month":
        return base.c.month
    return cast(base.c[f"{dim}_id"], String)


def _long(base_stmt: Select[Any], dims: Sequence[str], values: Sequence[str]) -> Any:
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


def _grouped(
    session: Session, long: Any, aggregates: dict[str, ColumnElement[Any]]
) -> dict[tuple[str, str | None], dict[str, Any]]:
    stmt = select(long.c.dim, long.c.key, *(a.label(n) for n, a in aggregates.items())).group_by(
        long.c.dim, long.c.key
    )
    out: dict[tuple[str, str | None], dict[str, Any]] = {}
    for row in session.execute(stmt).mappings():
        out[(row["dim"], row["key"])] = {n: row[n] for n in aggregates}
    return out


def _histogram(long: Any, value: str, extra: dict[str, ColumnElement[Any]]) -> Any:
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


def _pct_hist(h: Any, num: int, den: int) -> ColumnElement[float]:
    """Aggregate over a :func:`_histogram`: the ``num/den`` quantile, linear interpolation.

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


def _received(session: Session, p: Period, scope: Scope, dims: Sequence[str]) -> Grouped:
    base = _scoped(
        _base({"job_id": Job.id}, Job.received_on).where(Job.received_on.between(p.start, p.end)),
        scope,
    )
    long = _long(base, dims, ["job_id"])
    return _grouped(session, long, {"jobs_received": func.count(long.c.job_id)})


def _days(stmt: Select[Any]) -> Any:
    """``stmt`` as a materialized CTE, so each date is parsed once per row."""
    return stmt.cte("days").prefix_with("MATERIALIZED")


def _from_days(days: Any, columns: dict[str, ColumnElement[Any]]) -> Select[Any]:
    dims = [days.c[n] for n in (*_job_dims(), "month")]
    return select(*dims, *(c.label(n) for n, c in columns.items()))


def _dispatched(session: Session, p: Period, scope: Scope, dims: Sequence[str]) -> Grouped:
    hit = case(
        (Job.promised_on.is_(None), None),
        (Job.dispatched_on <= Job.promised_on, 1),
        else_=0,
    )
    days = _days(_scoped(
        _base({"r": day_number(Job.received_on), "d": day_number(Job.dispatched_on), "hit": hit},
              Job.dispatched_on).where(Job.dispatched_on.between(p.start, p.end)),
        scope,
    ))
    turnaround = work_day_index_of_day(days.c.d) - work_day_index_of_day(days.c.r)
    base = _from_days(days, {"wd": turnaround, "hit": days.c.hit})
    long = _long(base, dims, ["wd", "hit"])
    h = _histogram(long, "wd", {"pj": func.count(long.c.hit),
                                "ph": func.coalesce(func.sum(long.c.hit), 0)})
    return _grouped(
        session,
        h,
        {
            "jobs_dispatched": func.sum(h.c.c),
            "promised_jobs": func.sum(h.c.pj),
            "promised_hit": func.sum(h.c.ph),
            "turnaround_median_wd": _pct_hist(h, 1, 2),
            "turnaround_p90_wd": _pct_hist(h, 9, 10),
        },
    )


def _wip(
    session: Session, p: Period, scope: Scope, dims: Sequence[str], as_of: dt.date
) -> Grouped:
    day_after = _utc_start(as_of + dt.timedelta(days=1))
    # An uncorrelated NOT IN: one pass over the rejections, not one lookup per open job.
    rejected_by_then = Job.id.in_(
        select(JobTransition.job_id).where(
            JobTransition.to_state == "rejected", JobTransition.at < day_after
        )
    )
    days = _days(_scoped(
        _base({"r": day_number(Job.received_on)}, Job.received_on).where(
            Job.received_on <= as_of,
            or_(Job.dispatched_on.is_(None), Job.dispatched_on > as_of),
            ~rejected_by_then,
        ),
        scope,
    ))
    base = _from_days(days, {"age": work_day_index_py(as_of) - work_day_index_of_day(days.c.r)})
    h = _histogram(_long(base, dims, ["age"]), "age", {})
    return _grouped(
        session,
        h,
        {
            "wip_jobs": func.sum(h.c.c),
            "wip_age_median_wd": _pct_hist(h, 1, 2),
            "wip_age_max_wd": func.max(h.c.v),
        },
    )


def _tolerance_cohort(session: Session, p: Period, scope: Scope, dims: Sequence[str]) -> Grouped:
    """Jobs that first reached in_tolerance in ``p``: count, cycles, first pass."""
    reached = Job.first_in_tolerance_at
    before_tol = Correction.applied_at <= reached
    # Correction steps: distinct runs answered; a correction without a run stands alone.
    cycles = (
        select(func.count(func.distinct(func.coalesce(Correction.run_id, -Correction.id))))
        .where(Correction.job_id == Job.id, before_tol)
        .correlate(Job)
        .scalar_subquery()
    )
    answered = aliased(Run)
    first_step_seq = (
        select(func.min(answered.seq))
        .select_from(Correction)
        .join(answered, answered.id == Correction.run_id)
        .where(Correction.job_id == Job.id, before_tol)
        .correlate(Job)
        .scalar_subquery()
    )
    check = aliased(Run)
    first_check_verdict = (
        select(case((check.within_tolerance == true(), 1),
                    (check.within_tolerance == false(), 0), else_=None))
        .where(
            check.job_id == Job.id,
            check.seq > first_step_seq,
            check.purpose.in_(CHECK_PURPOSES),
        )
        .order_by(check.seq)
        .limit(1)
        .correlate(Job)
        .scalar_subquery()
    )
    base = _scoped(
        _base({"job_id": Job.id, "cycles": cycles, "fp": first_check_verdict}, reached).where(
            reached >= _utc_start(p.start), reached < _utc_start(p.end + dt.timedelta(days=1))
        ),
        scope,
    )
    long = _long(base, dims, ["job_id", "cycles", "fp"])
    return _grouped(
        session,
        long,
        {
            "reached_in_tolerance": func.count(long.c.job_id),
            "correction_cycles_mean": cast(func.avg(cast(long.c.cycles, Float)), Float),
            "first_pass_judged": func.count(long.c.fp),
            "first_pass_jobs": func.coalesce(func.sum(long.c.fp), 0),
        },
    )


def _reopenings(p: Period) -> Select[Any]:
    return select(JobTransition.job_id, JobTransition.at, JobTransition.reason).where(
        JobTransition.to_state == "on_machine",
        JobTransition.from_state.in_(REWORK_FROM_STATES),
        JobTransition.at >= _utc_start(p.start),
        JobTransition.at < _utc_start(p.end + dt.timedelta(days=1)),
    )


def _rework(session: Session, p: Period, scope: Scope, dims: Sequence[str]) -> Grouped:
    reopen = _reopenings(p).subquery("reopen")
    reopened = _scoped(
        _base({"job_id": Job.id}, reopen.c.at).join(reopen, reopen.c.job_id == Job.id), scope
    )
    returned = _scoped(
        _base({"job_id": Job.id}, Job.received_on).where(
            Job.kind == "return", Job.received_on.between(p.start, p.end)
        ),
        scope,
    )
    base = union_all(reopened, returned).subquery("events")
    flat = select(*base.c)
    long = _long(flat, dims, ["job_id"])
    return _grouped(
        session, long, {"reworked_jobs": func.count(func.distinct(long.c.job_id))}
    )


def _rejections(p: Period) -> Select[Any]:
    return select(JobTransition.job_id, JobTransition.at, JobTransition.reason).where(
        JobTransition.to_state == "rejected",
        JobTransition.at >= _utc_start(p.start),
        JobTransition.at < _utc_start(p.end + dt.timedelta(days=1)),
    )


def _rejected(session: Session, p: Period, scope: Scope, dims: Sequence[str]) -> Grouped:
    rej = _rejections(p).subquery("rej")
    base = _scoped(
        _base({"job_id": Job.id}, rej.c.at).join(rej, rej.c.job_id == Job.id), scope
    )
    long = _long(base, dims, ["job_id"])
    return _grouped(
        session, long, {"rejected_jobs": func.count(func.distinct(long.c.job_id))}
    )


_INT_FIELDS = frozenset(f.name for f in fields(Figures) if str(f.type).startswith("int"))


def _merge(parts: Iterable[Grouped]) -> dict[tuple[str, str | None], Figures]:
    """One :class:`Figures` per (dimension, key) from the families' grouped rows."""
    merged: dict[tuple[str, str | None], Figures] = {}
    for part in parts:
        for key, values in part.items():
            fig = merged.setdefault(key, Figures())
            for name, value in values.items():
                if value is not None:
                    # PostgreSQL returns SUM as numeric: make every backend's types alike.
                    value = int(value) if name in _INT_FIELDS else float(value)
                setattr(fig, name, value)
    return merged


def _figures_for(
    session: Session,
    p: Period,
    scope: Scope,
    dims: Sequence[str],
    as_of: dt.date,
    families: Sequence[str] = ("received", "dispatched", "wip", "tolerance", "rework", "rejected"),
) -> dict[tuple[str, str | None], Figures]:
    runners = {
        "received": lambda: _received(session, p, scope, dims),
        "dispatched": lambda: _dispatched(session, p, scope, dims),
        "wip": lambda: _wip(session, p, scope, dims, as_of),
        "tolerance": lambda: _tolerance_cohort(session, p, scope, dims),
        "rework": lambda: _rework(session, p, scope, dims),
        "rejected": lambda: _rejected(session, p, scope, dims),
    }
    return _merge(runners[f]() for f in families)


# --------------------------------------------------------------------------- labels
def _labels(session: Session, dim: str, keys: set[str]) -> dict[str, str]:
    ids = sorted(int(k) for k in keys if k is not None)
    if not ids:
        return {}
    if dim == "operator":
        rows = session.execute(select(User.id, User.full_name).where(User.id.in_(ids)))
    elif dim == "machine":
        rows = session.execute(select(Machine.id, Machine.name).where(Machine.id.in_(ids)))
    elif dim == "rotor_type":
        rows = session.execute(
            select(RotorType.id, RotorType.part_number + " " + RotorType.description).where(
                RotorType.id.in_(ids)
            )
        )
    else:
        rows = session.execute(select(Customer.id, Customer.name).where(Customer.id.in_(ids)))
    return {str(i): (label or "").strip() for i, label in rows}


def _slice_rows(
    session: Session, merged: dict[tuple[str, str | None], Figures], dim: str, p: Period
) -> list[SliceRow]:
    if dim == "month":
        return [
            SliceRow("month", m, m, merged.get(("month", m), Figures())) for m in p.months()
        ]
    keys = {k for (d, k) in merged if d == dim}
    labels = _labels(session, dim, {k for k in keys if k is not None})
    rows = [
        SliceRow(dim, k, labels.get(k, f"#{k}") if k is not None else UNASSIGNED,
                 merged[(dim, k)])
        for k in keys
    ]
    rows.sort(key=lambda r: (r.key is None, r.label.lower(), r.key or ""))
    return rows


# --------------------------------------------------------------------------- lists
def rework_reasons(
    session: Session, p: Period, scope: Scope = Scope(), *, limit: int = 20
) -> list[ReasonCount]:
    """Reopen reasons of the period (one per reopening) and returns, most frequent first."""
    reopen = _reopenings(p).subquery("reopen")
    trimmed = func.trim(reopen.c.reason)
    reason = case((trimmed == "", "(no reason given)"), else_=trimmed)
    reopen_stmt = _scoped(
        select(reason.label("reason"), func.count().label("n"))
        .select_from(Job)
        .join(Rotor, Rotor.id == Job.rotor_id)
        .join(reopen, reopen.c.job_id == Job.id),
        scope,
    ).group_by(reason)
    returns_stmt = _scoped(
        select(literal_column(f"'{RETURN_REASON}'", String).label("reason"),
               func.count().label("n"))
        .select_from(Job)
        .join(Rotor, Rotor.id == Job.rotor_id)
        .where(Job.kind == "return", Job.received_on.between(p.start, p.end)),
        scope,
    )
    both = union_all(reopen_stmt, returns_stmt).subquery("reasons")
    stmt = (
        select(both.c.reason, func.sum(both.c.n).label("n"))
        .group_by(both.c.reason)
        .having(func.sum(both.c.n) > 0)
        .order_by(func.sum(both.c.n).desc(), both.c.reason)
        .limit(limit)
    )
    return [ReasonCount(r, int(n)) for r, n in session.execute(stmt)]


def rejection_reasons(
    session: Session, p: Period, scope: Scope = Scope(), *, limit: int = 20
) -> list[ReasonCount]:
    """Reasons given when jobs were rejected in the period, most frequent first."""
    rej = _rejections(p).subquery("rej")
    text = func.trim(case((func.trim(rej.c.reason) != "", rej.c.reason), else_=Job.reject_reason))
    label = case((text == "", "(no reason given)"), else_=text)
    stmt = (
        _scoped(
            select(label.label("reason"), func.count(func.distinct(Job.id)).label("n"))
            .select_from(Job)
            .join(Rotor, Rotor.id == Job.rotor_id)
            .join(rej, rej.c.job_id == Job.id),
            scope,
        )
        .group_by(label)
        .order_by(func.count(func.distinct(Job.id)).desc(), label)
        .limit(limit)
    )
    return [ReasonCount(r, int(n)) for r, n in session.execute(stmt)]


def rotors_getting_worse(
    session: Session, p: Period, scope: Scope = Scope(), *, visits: int = 3, limit: int = 50
) -> list[WorseningRotor]:
    """Rotors whose initial unbalance rose over their last ``visits`` visits (see module doc).

    ROW_NUMBER over each rotor's jobs (newest first) keeps its last ``visits`` visits;
    only those visits' first initial runs are read, then one row per rotor holds the
    amplitudes side by side (conditional aggregation) to compare them.
    """
    if visits < 2:
        raise ValidationFailed("visits", f"{visits} visits cannot show a rise; use 2 or more")
    # Only rotors with enough visits, the latest in the period, can qualify.
    candidates = _scoped(
        select(Job.rotor_id)
        .select_from(Job)
        .join(Rotor, Rotor.id == Job.rotor_id)
        .where(Job.received_on <= p.end)
        .group_by(Job.rotor_id)
        .having(func.count() >= visits, func.max(Job.received_on) >= p.start),
        scope,
    )
    ranked = (
        select(
            Job.id.label("job_id"),
            Job.rotor_id.label("rotor_id"),
            Job.number.label("number"),
            Job.received_on.label("received_on"),
            func.row_number()
            .over(partition_by=Job.rotor_id, order_by=(Job.received_on.desc(), Job.id.desc()))
            .label("rn"),
        )
        .where(Job.received_on <= p.end, Job.rotor_id.in_(candidates))
        .subquery("ranked_visits")
    )
    last = select(ranked).where(ranked.c.rn <= visits).cte("last_visits").prefix_with(
        "MATERIALIZED"
    )
    # Each visit's first initial run: one index lookup per visit (run has (job_id, seq)).
    first_initial = (
        select(Run.id)
        .where(Run.job_id == last.c.job_id, Run.purpose == "initial")
        .order_by(Run.seq)
        .limit(1)
        .correlate(last)
        .scalar_subquery()
    )
    visit_runs = (
        select(last, first_initial.label("run_id"))
        .cte("visit_runs")
        .prefix_with("MATERIALIZED")
    )
    per_visit = (
        select(
            visit_runs.c.rotor_id, visit_runs.c.rn, visit_runs.c.number,
            visit_runs.c.received_on,
            func.max(RunReading.amplitude).label("amp"),
            func.min(RunReading.unit).label("unit"),
            func.count(func.distinct(RunReading.unit)).label("units"),
        )
        .select_from(visit_runs)
        .join(RunReading, RunReading.run_id == visit_runs.c.run_id)
        .group_by(visit_runs.c.rotor_id, visit_runs.c.rn, visit_runs.c.number,
                  visit_runs.c.received_on)
        .subquery("per_visit")
    )
    v = per_visit.c

    def at(k: int, col: Any) -> ColumnElement[Any]:
        return func.max(case((v.rn == k, col)))

    amps = [at(k, v.amp) for k in range(1, visits + 1)]  # newest first
    units = [at(k, v.unit) for k in range(1, visits + 1)]
    cond = [func.count() == visits, func.max(v.units) == 1,
            func.min(v.unit) == func.max(v.unit), at(1, v.received_on) >= p.start]
    cond += [amps[k] > amps[k + 1] for k in range(visits - 1)]
    pivot = (
        select(
            v.rotor_id.label("rotor_id"),
            at(1, v.number).label("number"),
            at(1, v.received_on).label("received_on"),
            units[0].label("unit"),
            *(a.label(f"amp{k}") for k, a in enumerate(amps)),
        )
        .group_by(v.rotor_id)
        .having(and_(*cond))
        .subquery("pivot")
    )
    w = pivot.c
    stmt = (
        select(
            w.rotor_id, Rotor.serial_number, Customer.name, RotorType.part_number, w.number,
            w.received_on, w.unit, *(w[f"amp{k}"] for k in reversed(range(visits))),
        )
        .join(Rotor, Rotor.id == w.rotor_id)
        .join(Customer, Customer.id == Rotor.customer_id)
        .join(RotorType, RotorType.id == Rotor.rotor_type_id)
        .order_by(w.received_on.desc(), Rotor.serial_number)
        .limit(limit)
    )
    out = []
    for row in session.execute(stmt):
        rotor_id, serial, customer, part, number, received, unit, *amps_row = row
        if isinstance(received, str):  # SQLite returns MAX() over a DATE as text
            received = dt.date.fromisoformat(received)
        out.append(WorseningRotor(rotor_id, serial, customer, part, number, received, unit,
                                  tuple(float(a) for a in amps_row)))
    return out


def machine_status(
    session: Session, p: Period, *, today: dt.date, due_soon_days: int
) -> list[MachineStatus]:
    """Utilisation in the period and verification status today, one row per machine."""
    start, stop = _utc_start(p.start), _utc_start(p.end + dt.timedelta(days=1))
    use = (
        select(
            Job.machine_id.label("machine_id"),
            func.count(Run.id).label("runs"),
            func.count(func.distinct(Run.job_id)).label("jobs"),
        )
        .select_from(Run)
        .join(Job, Job.id == Run.job_id)
        .where(Run.taken_at >= start, Run.taken_at < stop, Job.machine_id.is_not(None))
        .group_by(Job.machine_id)
        .subquery("use")
    )
    ranked = select(
        MachineVerification.machine_id,
        MachineVerification.performed_on,
        MachineVerification.passed,
        func.row_number()
        .over(partition_by=MachineVerification.machine_id,
              order_by=(MachineVerification.performed_on.desc(), MachineVerification.id.desc()))
        .label("rn"),
    ).subquery("ranked")
    last = select(ranked).where(ranked.c.rn == 1).subquery("last")
    due_day = day_number(last.c.performed_on) + Machine.verification_interval_days
    today_n = (today - dt.date(1970, 1, 1)).days
    status = case(
        (last.c.performed_on.is_(None), "never verified"),
        (last.c.passed == false(), "failed"),
        (due_day < today_n, "overdue"),
        (due_day - today_n <= due_soon_days, "due soon"),
        else_="current",
    )
    stmt = (
        select(
            Machine.id, Machine.name, func.coalesce(use.c.jobs, 0), func.coalesce(use.c.runs, 0),
            last.c.performed_on, Machine.verification_interval_days, status,
        )
        .outerjoin(use, use.c.machine_id == Machine.id)
        .outerjoin(last, last.c.machine_id == Machine.id)
        .where(or_(Machine.archived == false(), use.c.runs.is_not(None)))
        .order_by(Machine.name)
    )
    out = []
    for mid, name, jobs, runs, last_on, interval, st in session.execute(stmt):
        due = last_on + dt.timedelta(days=int(interval)) if last_on else None
        out.append(MachineStatus(mid, name, int(jobs), int(runs), last_on, due, st))
    return out


# --------------------------------------------------------------------------- entry points
def _allowed(by: User | None) -> None:
    # None is the command line (``shopapp report shop``): whoever runs it already holds
    # the database; every person in the web app must have ``view_dashboard``.
    if by is not None:
        require(by, "view_dashboard")


def period_figures(
    session: Session,
    period: Period,
    *,
    by: User | None,
    scope: Scope = Scope(),
    dimension: str | None = None,
    today: dt.date | None = None,
) -> Figures | list[SliceRow]:
    """The figures of ``period`` as a whole, or one row per slice of ``dimension``."""
    _allowed(by)
    as_of = min(period.end, today or dt.date.today())
    if dimension is None:
        return _figures_for(session, period, scope, ["all"], as_of).get(("all", None), Figures())
    if dimension not in DIMENSIONS:
        raise ValidationFailed("by", f"'{dimension}' is not one of {', '.join(DIMENSIONS)}")
    merged = _figures_for(session, period, scope, [dimension], as_of)
    return _slice_rows(session, merged, dimension, period)


def shop_report(
    session: Session,
    period: Period,
    *,
    by: User | None,
    scope: Scope = Scope(),
    today: dt.date | None = None,
    dimensions: Sequence[str] = DIMENSIONS,
    trend_months: int = 12,
    visits: int = 3,
) -> ShopReport:
    """All the measures of ``period`` (see the module docstring), in a fixed number of queries.

    Queries: six for the period with every slice at once, six for the previous
    period, two for the monthly trend, two reason lists, one for rotors getting
    worse, one for the machines, the settings row and one per labelled dimension —
    the same count whatever the number of jobs.
    """
    _allowed(by)
    for dim in dimensions:
        if dim not in DIMENSIONS:
            raise ValidationFailed("by", f"'{dim}' is not one of {', '.join(DIMENSIONS)}")
    today = today or dt.date.today()
    as_of = min(period.end, today)
    prev = period.previous()
    merged = _figures_for(session, period, scope, ["all", *dimensions], as_of)
    prev_merged = _figures_for(session, prev, scope, ["all"], min(prev.end, today))
    trend_period = period if period.kind == "year" else period.trailing_months(trend_months)
    if trend_period == period and "month" in dimensions:
        trend_merged = merged
    else:
        trend_merged = _figures_for(session, trend_period, scope, ["month"], as_of,
                                    families=("tolerance", "rework"))
    settings = get_settings(session)
    report = ShopReport(
        period=period,
        previous_period=prev,
        scope=scope,
        as_of=as_of,
        figures=merged.get(("all", None), Figures()),
        previous=prev_merged.get(("all", None), Figures()),
        slices={dim: _slice_rows(session, merged, dim, period) for dim in dimensions},
        trend_period=trend_period,
        trend=[
            SliceRow("month", m, m, trend_merged.get(("month", m), Figures()))
            for m in trend_period.months()
        ],
        rework_reasons=rework_reasons(session, period, scope),
        rejection_reasons=rejection_reasons(session, period, scope),
        rotors_getting_worse=rotors_getting_worse(session, period, scope, visits=visits),
        machines=machine_status(session, period, today=today,
                                due_soon_days=int(settings.due_soon_days)),
        shop_name=settings.shop_name,
    )
    return report


@dataclass(frozen=True)
class Headline:
    """The start-page panel: this month so far against last month, and WIP today."""

    month: Period
    now: Figures
    before: Figures
    wip_jobs: int
    wip_age_max_wd: int | None


def headline(session: Session, *, by: User | None, today: dt.date | None = None) -> Headline:
    """This month so far against last month, in four queries (both months in one each)."""
    _allowed(by)
    today = today or dt.date.today()
    month = Period.containing("month", today)
    prev = month.previous()
    both = Period(prev.start, month.end)
    merged = _figures_for(session, both, Scope(), ["month"], today,
                          families=("received", "tolerance", "rework"))
    wip = _figures_for(session, month, Scope(), ["all"], today, families=("wip",))
    now_fig = merged.get(("month", f"{month.start:%Y-%m}"), Figures())
    wip_fig = wip.get(("all", None), Figures())
    return Headline(
        month=month,
        now=now_fig,
        before=merged.get(("month", f"{prev.start:%Y-%m}"), Figures()),
        wip_jobs=wip_fig.wip_jobs,
        wip_age_max_wd=wip_fig.wip_age_max_wd,
    )


__all__ = [
    "DIMENSIONS",
    "FIGURE_NAMES",
    "Figures",
    "Headline",
    "MachineStatus",
    "Period",
    "ReasonCount",
    "Scope",
    "ShopReport",
    "SliceRow",
    "WorseningRotor",
    "headline",
    "machine_status",
    "parse_month",
    "period_figures",
    "rejection_reasons",
    "rework_reasons",
    "rotors_getting_worse",
    "shop_report",
    "work_day_index",
    "working_days",
]

"""The period figures: one :class:`Figures` per slice, from five families of queries.

Each family (received, dispatched with turnaround and promised dates, work in
progress, the tolerance cohort with cycles, first pass and rework, the jobs closed
with the rejections)
is one query that returns its aggregates for every slice at once; :func:`figures_for`
runs the families asked for and merges them. The definitions are in the docstring of
:mod:`shopapp.measures.services`.
"""

from __future__ import annotations

import datetime as dt
from collections.abc import Iterable, Sequence
from dataclasses import dataclass, fields
from typing import Any

from sqlalchemy import (
    Float,
    Integer,
    and_,
    case,
    cast,
    func,
    literal_column,
    or_,
    select,
    union_all,
)
from sqlalchemy.orm import Session
from sqlalchemy.sql import ColumnElement

from shopapp.jobs.facts import REWORK_WINDOW_DAYS as REWORK_WINDOW_DAYS
from shopapp.jobs.facts import reworked_within_window
from shopapp.measures.periods import Period, Scope
from shopapp.measures.sql import (
    Column,
    Grouped,
    fact_dims,
    fact_select,
    fact_summary,
    grouped,
    histogram,
    long_form,
    pct_hist,
    rejections,
    scoped_facts,
    utc_start,
    work_day_index_py,
    year_month,
)
from shopapp.measures.stats import Rate
from shopapp.models import Customer, JobFact, Machine, RotorType, User

DIMENSIONS: tuple[str, ...] = ("operator", "machine", "rotor_type", "customer", "month")
DIMENSION_LABELS: dict[str, str] = {
    "operator": "operator",
    "machine": "machine",
    "rotor_type": "rotor type",
    "customer": "customer",
    "month": "month",
}
CHECK_PURPOSES: tuple[str, ...] = ("check", "final")
UNASSIGNED = "(none)"


@dataclass
class Figures:
    """The measures of one period, or of one slice of it (see :mod:`shopapp.measures.services`)."""

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
    jobs_closed: int = 0
    rejected_jobs: int = 0

    def rate(self, name: str) -> Rate:
        """The rate ``name`` (one of :data:`RATES`) with its counts and 95 % Wilson interval."""
        numerator, denominator = RATES[name]
        return Rate(getattr(self, numerator), getattr(self, denominator))

    @property
    def promised_hit_rate(self) -> float | None:
        return self.rate("promised_hit_rate").value

    @property
    def first_pass_rate(self) -> float | None:
        return self.rate("first_pass_rate").value

    @property
    def rework_rate(self) -> float | None:
        return self.rate("rework_rate").value

    @property
    def rejection_rate(self) -> float | None:
        return self.rate("rejection_rate").value

    def as_dict(self) -> dict[str, Any]:
        """Counts and figures by name; rates as plain fractions (None without jobs)."""
        out: dict[str, Any] = {f.name: getattr(self, f.name) for f in fields(self)}
        for name in RATES:
            out[name] = self.rate(name).value
        return out

    def as_json(self) -> dict[str, Any]:
        """As :meth:`as_dict`, but every rate is ``{"value", "numerator", "denominator",
        "interval_95": [low, high] | None}`` (:meth:`Rate.as_json`)."""
        out = self.as_dict()
        for name in RATES:
            out[name] = self.rate(name).as_json()
        return out


# Each rate: (numerator, denominator) field names. The numerator's jobs are always a
# subset of the denominator's (see the definitions in shopapp.measures.services).
RATES: dict[str, tuple[str, str]] = {
    "promised_hit_rate": ("promised_hit", "promised_jobs"),
    "first_pass_rate": ("first_pass_jobs", "first_pass_judged"),
    "rework_rate": ("reworked_jobs", "reached_in_tolerance"),
    "rejection_rate": ("rejected_jobs", "jobs_closed"),
}
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


# Every family reads the per-job facts (shopapp.jobs.facts: one row per job, kept in step
# with the job), so a period's figures cost what the period holds, not all history.
F = JobFact


def _received(session: Session, p: Period, scope: Scope, dims: Sequence[str]) -> Grouped:
    base = scoped_facts(
        fact_summary({"n": func.count()}, F.received_month)
        .where(F.received_on.between(p.start, p.end)),
        scope,
    )
    long = long_form(base, dims, ["n"])
    return grouped(session, long, {"jobs_received": func.sum(long.c.n)})


def _dispatched(session: Session, p: Period, scope: Scope, dims: Sequence[str]) -> Grouped:
    base = scoped_facts(
        fact_summary({"wd": F.turnaround_wd, "n": func.count(), "pj": func.count(F.promised_hit),
                      "ph": func.coalesce(func.sum(F.promised_hit), 0)},
                     F.dispatched_month, F.turnaround_wd)
        .where(F.dispatched_on.between(p.start, p.end)),
        scope,
    )
    long = long_form(base, dims, ["wd", "n", "pj", "ph"])
    h = histogram(long, "wd", {"pj": func.sum(long.c.pj), "ph": func.sum(long.c.ph)},
                  weight="n")
    return grouped(
        session,
        h,
        {
            "jobs_dispatched": func.sum(h.c.c),
            "promised_jobs": func.sum(h.c.pj),
            "promised_hit": func.sum(h.c.ph),
            "turnaround_median_wd": pct_hist(h, 1, 2),
            "turnaround_p90_wd": pct_hist(h, 9, 10),
        },
    )


def _wip(
    session: Session, p: Period, scope: Scope, dims: Sequence[str], as_of: dt.date
) -> Grouped:
    day_after = utc_start(as_of + dt.timedelta(days=1))
    # Three disjoint parts, each served by an index: jobs still open today (the partial
    # index ix_job_fact_open), jobs dispatched after ``as_of``, jobs rejected after it and
    # never dispatched. Together: received by then, not dispatched and not rejected by then.
    parts = [
        and_(F.dispatched_on.is_(None), F.rejected_at.is_(None)),
        and_(F.dispatched_on > as_of, or_(F.rejected_at.is_(None), F.rejected_at >= day_after)),
        and_(F.dispatched_on.is_(None), F.rejected_at >= day_after),
    ]
    age: dict[str, Column] = {"age": work_day_index_py(as_of) - F.received_wd_index}
    union = union_all(*(
        scoped_facts(fact_select(age, F.received_month).where(F.received_on <= as_of, part),
                     scope)
        for part in parts
    )).subquery("wip")
    base = select(*union.c)
    h = histogram(long_form(base, dims, ["age"]), "age", {})
    return grouped(
        session,
        h,
        {
            "wip_jobs": func.sum(h.c.c),
            "wip_age_median_wd": pct_hist(h, 1, 2),
            "wip_age_max_wd": func.max(h.c.v),
        },
    )


def _reworked_later(today: dt.date) -> ColumnElement[int]:
    """1 when the job was reworked within the window by ``today``
    (:func:`shopapp.jobs.facts.reworked_within_window`), else 0."""
    return case((reworked_within_window(today), 1), else_=0)


def _tolerance_cohort(
    session: Session, p: Period, scope: Scope, dims: Sequence[str], today: dt.date
) -> Grouped:
    """Jobs that first reached in_tolerance in ``p``: count, cycles, first pass, rework."""
    reached = F.first_in_tolerance_at
    base = scoped_facts(
        fact_summary({"n": func.count(), "cycles": func.sum(F.correction_cycles),
                      "cycles_n": func.count(F.correction_cycles),
                      "fp_n": func.count(F.first_pass), "fp": func.sum(F.first_pass),
                      "rw": func.sum(_reworked_later(today))}, F.tolerance_month)
        .where(reached >= utc_start(p.start), reached < utc_start(p.end + dt.timedelta(days=1))),
        scope,
    )
    long = long_form(base, dims, ["n", "cycles", "cycles_n", "fp_n", "fp", "rw"])
    return grouped(
        session,
        long,
        {
            "reached_in_tolerance": func.sum(long.c.n),
            "correction_cycles_mean": cast(func.sum(long.c.cycles), Float)
            / func.nullif(func.sum(long.c.cycles_n), 0),
            "first_pass_judged": func.sum(long.c.fp_n),
            "first_pass_jobs": func.coalesce(func.sum(long.c.fp), 0),
            "reworked_jobs": func.coalesce(func.sum(long.c.rw), 0),
        },
    )


def _closed(session: Session, p: Period, scope: Scope, dims: Sequence[str]) -> Grouped:
    """Jobs that left the shop in ``p``: dispatched or rejected; and those rejected."""
    rej = rejections(p).subquery("rej")
    rejected = scoped_facts(
        fact_select({"job_id": F.job_id, "rej": literal_column("1", Integer)},
                    year_month(rej.c.at))
        .join(rej, rej.c.job_id == F.job_id), scope
    )
    dispatched = scoped_facts(
        fact_select({"job_id": F.job_id, "rej": literal_column("0", Integer)},
                    F.dispatched_month)
        .where(F.dispatched_on.between(p.start, p.end)), scope
    )
    events = union_all(rejected, dispatched).cte("closed").prefix_with("MATERIALIZED")
    # Distinct jobs, counted once per slice (a job lies in one slice, so the counts add up
    # across slices) — per slice and month for the month dimension, where a job closed in
    # two months counts in each, and per slice for the others, where it counts once.
    slice_cols = [events.c[n] for n in fact_dims()]
    counts = [func.count(func.distinct(events.c.job_id)).label("closed"),
              func.count(func.distinct(case((events.c.rej == 1, events.c.job_id))))
              .label("rejected")]
    per_slice = select(*slice_cols, literal_column("NULL").label("month"), *counts) \
        .group_by(*slice_cols)
    per_month = select(*slice_cols, events.c.month, *counts) \
        .group_by(*slice_cols, events.c.month)
    parts = []
    if any(d != "month" for d in dims):
        parts.append(long_form(per_slice, [d for d in dims if d != "month"],
                               ["closed", "rejected"], name="closed_slices"))
    if "month" in dims:
        parts.append(long_form(per_month, ["month"], ["closed", "rejected"],
                               name="closed_months"))
    long = (union_all(*(select(*p.c) for p in parts)) if len(parts) > 1
            else select(*parts[0].c)).subquery("closed_long")
    return grouped(
        session,
        long,
        {
            "jobs_closed": func.sum(long.c.closed),
            "rejected_jobs": func.sum(long.c.rejected),
        },
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


def figures_for(
    session: Session,
    p: Period,
    scope: Scope,
    dims: Sequence[str],
    as_of: dt.date,
    families: Sequence[str] = ("received", "dispatched", "wip", "tolerance", "closed"),
    today: dt.date | None = None,
) -> dict[tuple[str, str | None], Figures]:
    """The families' figures of ``p`` for every slice of ``dims``.

    ``as_of`` is the day work in progress is counted on; ``today`` (default ``as_of``)
    the last day a rework of the period's jobs is counted on.
    """
    follow_up = today or as_of
    runners = {
        "received": lambda: _received(session, p, scope, dims),
        "dispatched": lambda: _dispatched(session, p, scope, dims),
        "wip": lambda: _wip(session, p, scope, dims, as_of),
        "tolerance": lambda: _tolerance_cohort(session, p, scope, dims, follow_up),
        "closed": lambda: _closed(session, p, scope, dims),
    }
    return _merge(runners[f]() for f in families)


def slice_labels(session: Session, dim: str, keys: set[str]) -> dict[str, str]:
    """The names of the ``keys`` (ids as text) of a slice dimension that exist."""
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


def slice_rows(
    session: Session, merged: dict[tuple[str, str | None], Figures], dim: str, p: Period
) -> list[SliceRow]:
    if dim == "month":
        return [
            SliceRow("month", m, m, merged.get(("month", m), Figures())) for m in p.months()
        ]
    keys = {k for (d, k) in merged if d == dim}
    labels = slice_labels(session, dim, {k for k in keys if k is not None})
    rows = [
        SliceRow(dim, k, labels.get(k, f"#{k}") if k is not None else UNASSIGNED,
                 merged[(dim, k)])
        for k in keys
    ]
    rows.sort(key=lambda r: (r.key is None, r.label.lower(), r.key or ""))
    return rows

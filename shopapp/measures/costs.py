"""What rework costs: machine time from the run log, first-time work against rework.

Definitions (our own, stated on the page, in the PDF and the README):

machine time of a visit
    the runs of one job in time order; the time between two consecutive runs counts
    in full up to the shop's idle time (``MACHINE_IDLE_MINUTES``, default 30) and as
    the idle time when longer (lunch, another job in between): ``Σ min(gap, idle)``,
    :func:`shopapp.measures.stats.machine_time`. The time after the last run is not
    known and not counted, so a job with one run has none. Timestamps are taken in
    whole seconds.
first-time work and rework
    a job's runs are cut into segments at each reopening (a move back to
    ``on_machine`` from ``in_tolerance``, ``certified`` or ``dispatched``); the gap
    between the last run before a reopening and the first after it is not counted.
    Runs before the first reopening of a new job are first-time work; runs after a
    reopening, and every run of a customer-return job, are rework.
the period's machine time
    a gap belongs to the period of its later run's UTC date, so a year's hours are the
    sum of its months'.
the reason behind rework time
    a segment after a reopening carries that reopening's reason; a return job's runs
    carry "customer return" with the note it was booked in with.
money
    rework hours × the shop's ``MACHINE_HOURLY_RATE`` (shown only when it is set).

Each run's gap, segment phase and reason are kept with the run as it is stored
(``run_fact``, :func:`shopapp.jobs.facts.run_facts_select`: a running count of
reopenings over each job's runs and reopenings gives the segment, LAG over the runs of
a segment the gaps); a period's sums are one SQL query over the runs taken in it, and
no run is loaded into Python.
"""

from __future__ import annotations

import datetime as dt
import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any

from sqlalchemy import Integer, String, case, cast, func, literal_column, select, union_all
from sqlalchemy.orm import Session

from shopapp.balancing.numtext import short
from shopapp.core.errors import ValidationFailed
from shopapp.measures.periods import EVERYTHING, Period, Scope
from shopapp.measures.sql import AnySelect, fact_dims, scoped_facts, utc_start
from shopapp.measures.stats import DEFAULT_IDLE_SECONDS, ParetoItem, pareto
from shopapp.models import JobFact, RunFact
from shopapp.reports.shop_month import ReasonCount

PHASES: tuple[str, ...] = ("first", "rework")
COST_DIMENSIONS: tuple[str, ...] = ("rotor_type", "operator")


@dataclass(frozen=True)
class CostSettings:
    """The shop's idle time, hourly machine rate and money unit (from the configuration)."""

    idle_minutes: float = DEFAULT_IDLE_SECONDS / 60.0
    hourly_rate: float | None = None
    money_unit: str = ""

    @property
    def idle_seconds(self) -> int:
        """The idle time in whole seconds (so both databases add whole numbers)."""
        return round(self.idle_minutes * 60.0)


def cost_settings(config: Mapping[str, Any]) -> CostSettings:
    """:class:`CostSettings` from ``MACHINE_IDLE_MINUTES``, ``MACHINE_HOURLY_RATE`` and
    ``MONEY_UNIT``; a value that cannot be right is refused, naming the key."""
    idle = config.get("MACHINE_IDLE_MINUTES")
    rate = config.get("MACHINE_HOURLY_RATE")
    out: dict[str, Any] = {"money_unit": str(config.get("MONEY_UNIT") or "").strip()[:12]}
    if idle not in (None, ""):
        minutes = _number("MACHINE_IDLE_MINUTES", idle)
        if not 1.0 <= minutes <= 24 * 60:
            raise ValidationFailed("MACHINE_IDLE_MINUTES",
                                   f"{short(minutes)} minutes; give 1 to 1440 minutes")
        out["idle_minutes"] = minutes
    if rate not in (None, ""):
        money = _number("MACHINE_HOURLY_RATE", rate)
        if money < 0:
            raise ValidationFailed("MACHINE_HOURLY_RATE", f"{short(money)} is below zero")
        out["hourly_rate"] = money
    return CostSettings(**out)


def _number(key: str, value: Any) -> float:
    try:
        out = float(value)
    except (TypeError, ValueError):
        raise ValidationFailed(key, f"{str(value)[:20]!r} is not a number") from None
    if isinstance(value, bool) or not math.isfinite(out):
        raise ValidationFailed(key, f"{str(value)[:20]!r} is not a number")
    return out


@dataclass(frozen=True)
class TimeSplit:
    """Machine seconds and the jobs that ran, for first-time work and for rework."""

    first_seconds: int = 0
    first_jobs: int = 0
    rework_seconds: int = 0
    rework_jobs: int = 0

    @property
    def first_hours(self) -> float:
        return self.first_seconds / 3600.0

    @property
    def rework_hours(self) -> float:
        return self.rework_seconds / 3600.0

    @property
    def rework_share(self) -> float | None:
        """Rework's share of all machine time (None without any)."""
        total = self.first_seconds + self.rework_seconds
        return self.rework_seconds / total if total else None

    @property
    def first_hours_per_job(self) -> float | None:
        return self.first_hours / self.first_jobs if self.first_jobs else None

    def as_json(self) -> dict[str, Any]:
        return {
            "first_time_hours": self.first_hours,
            "first_time_jobs": self.first_jobs,
            "rework_hours": self.rework_hours,
            "rework_jobs": self.rework_jobs,
            "rework_share": self.rework_share,
        }


@dataclass(frozen=True)
class ReasonCost:
    """One reason behind rework: reworks counted in the period and their machine time."""

    reason: str
    reworks: int
    seconds: int
    percent: float | None  # of the period's rework machine time
    cumulative_percent: float | None

    @property
    def hours(self) -> float:
        return self.seconds / 3600.0


@dataclass(frozen=True)
class SliceCost:
    key: str | None
    label: str
    time: TimeSplit


@dataclass
class ReworkCost:
    """The period's machine time split into first-time work and rework, and its reasons."""

    settings: CostSettings
    total: TimeSplit
    by: dict[str, list[SliceCost]] = field(default_factory=dict)
    reasons: list[ReasonCost] = field(default_factory=list)

    @property
    def rework_money(self) -> float | None:
        rate = self.settings.hourly_rate
        return None if rate is None else self.total.rework_hours * rate

    def as_json(self) -> dict[str, Any]:
        return {
            "idle_minutes": self.settings.idle_minutes,
            "hourly_rate": self.settings.hourly_rate,
            "money_unit": self.settings.money_unit,
            **self.total.as_json(),
            "rework_money": self.rework_money,
            "by": {dim: [{"key": r.key, "label": r.label, **r.time.as_json()} for r in rows]
                   for dim, rows in self.by.items()},
            "reasons": [{"reason": r.reason, "reworks": r.reworks, "hours": r.hours,
                         "percent": r.percent, "cumulative_percent": r.cumulative_percent}
                        for r in self.reasons],
        }


Key = tuple[str, str | None, str]  # (dimension, key, phase)


def machine_seconds(
    session: Session,
    p: Period,
    scope: Scope = EVERYTHING,
    *,
    idle_seconds: int,
    dims: Sequence[str] = ("all", *COST_DIMENSIONS, "reason"),
) -> dict[Key, tuple[int, int]]:
    """``(seconds, jobs)`` of machine time in ``p`` per dimension, key and phase; one query.

    ``dims`` may hold ``"all"``, the job's slice dimensions and ``"reason"`` (rework
    only, keyed by the reason text).
    """
    if idle_seconds <= 0:
        raise ValidationFailed("idle_seconds", "must be longer than zero")
    start, stop = utc_start(p.start), utc_start(p.end + dt.timedelta(days=1))
    # Each run's gap, rework flag and reason are kept with the run (shopapp.jobs.facts,
    # run_fact): the period's machine time reads the runs taken in it (from one covering
    # index), capped at the idle time here so a change of the setting needs no rebuild.
    # Summed per job first: each dimension repeats one row per job and phase, and the
    # job's slice columns are looked up once, not once per run.
    idle = literal_column(str(int(idle_seconds)), Integer)
    gap = RunFact.gap_s
    counted = case((gap.is_(None), 0), (gap > idle, idle), else_=gap)
    per_job = (
        select(RunFact.job_id, RunFact.rework, RunFact.reason, func.sum(counted).label("secs"))
        .where(RunFact.taken_at >= start, RunFact.taken_at < stop)
        .group_by(RunFact.job_id, RunFact.rework, RunFact.reason)
        .subquery("per_job")
    )
    base = scoped_facts(
        select(*(c.label(n) for n, c in fact_dims().items()),
               case((per_job.c.rework == 1, "rework"), else_="first").label("phase"),
               per_job.c.reason, per_job.c.job_id, per_job.c.secs)
        .select_from(per_job)
        .join(JobFact, JobFact.job_id == per_job.c.job_id),
        scope,
    ).cte("machine_time").prefix_with("MATERIALIZED")
    # Summed once per slice (the four slice columns) and phase before the dimensions
    # repeat it: a job lies in one slice, so distinct jobs per slice add up across slices.
    # A job may carry two reasons, so the reasons are counted from the job rows.
    slice_cols = [base.c[n] for n in fact_dims()]
    per_slice = (
        select(*slice_cols, base.c.phase, func.sum(base.c.secs).label("secs"),
               func.count(func.distinct(base.c.job_id)).label("jobs"))
        .group_by(*slice_cols, base.c.phase)
        .cte("machine_time_slices")
    )

    def key(dim: str) -> Any:
        if dim == "all":
            return cast(literal_column("NULL"), String)
        return cast(per_slice.c[f"{dim}_id"], String)

    parts: list[AnySelect] = []
    for dim in dims:
        if dim == "reason":
            parts.append(
                select(literal_column("'reason'", String).label("dim"),
                       base.c.reason.label("key"), base.c.phase,
                       func.sum(base.c.secs).label("secs"),
                       func.count(func.distinct(base.c.job_id)).label("jobs"))
                .where(base.c.phase == "rework")
                .group_by(base.c.reason, base.c.phase))
        else:
            parts.append(select(literal_column(f"'{dim}'", String).label("dim"),
                                key(dim).label("key"), per_slice.c.phase, per_slice.c.secs,
                                per_slice.c.jobs))
    long = (union_all(*parts) if len(parts) > 1 else parts[0]).subquery("long")
    stmt = select(
        long.c.dim, long.c.key, long.c.phase,
        func.coalesce(func.sum(long.c.secs), 0).label("secs"),
        func.sum(long.c.jobs).label("jobs"),
    ).group_by(long.c.dim, long.c.key, long.c.phase)
    return {(row.dim, row.key, row.phase): (int(row.secs), int(row.jobs))
            for row in session.execute(stmt)}


def split(rows: Mapping[Key, tuple[int, int]], dim: str, key: str | None) -> TimeSplit:
    """The :class:`TimeSplit` of one (dimension, key) from :func:`machine_seconds`."""
    first = rows.get((dim, key, "first"), (0, 0))
    rework = rows.get((dim, key, "rework"), (0, 0))
    return TimeSplit(first[0], first[1], rework[0], rework[1])


def reason_costs(rows: Mapping[Key, tuple[int, int]],
                 reworks: Sequence[ReasonCount]) -> list[ReasonCost]:
    """The reasons behind rework as a Pareto list, largest machine time first.

    Every reason that either was given in the period (``reworks``: reopenings and
    returns counted in the period) or carries rework machine time in it is listed;
    the Pareto order and percentages are by machine time in whole minutes
    (:func:`shopapp.measures.stats.pareto`).
    """
    seconds = {k: v[0] for (dim, k, phase), v in rows.items()
               if dim == "reason" and phase == "rework" and k is not None}
    counts = {r.reason: r.count for r in reworks}
    minutes = {reason: round(seconds.get(reason, 0) / 60)
               for reason in {*seconds, *counts}}
    items: tuple[ParetoItem, ...] = pareto(minutes)
    return [ReasonCost(i.label, counts.get(i.label, 0), seconds.get(i.label, 0), i.percent,
                       i.cumulative_percent) for i in items]


def rework_cost(
    session: Session,
    p: Period,
    scope: Scope,
    settings: CostSettings,
    reworks: Sequence[ReasonCount],
    labels: Mapping[str, Mapping[str | None, str]],
) -> ReworkCost:
    """The period's :class:`ReworkCost` (one query); ``labels`` names the slice keys."""
    rows = machine_seconds(session, p, scope, idle_seconds=settings.idle_seconds)
    by: dict[str, list[SliceCost]] = {}
    for dim in COST_DIMENSIONS:
        keys = {k for (d, k, _phase) in rows if d == dim}
        names = labels.get(dim, {})
        slices = [SliceCost(k, names.get(k, f"#{k}" if k is not None else "(none)"),
                            split(rows, dim, k)) for k in keys]
        slices.sort(key=lambda s: (-s.time.rework_seconds, s.label.lower()))
        by[dim] = slices
    return ReworkCost(settings, split(rows, "all", None), by, reason_costs(rows, reworks))

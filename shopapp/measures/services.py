"""Shop measures for the owner: throughput, turnaround, first-pass, rework, rejections.

The entry points (:func:`shop_report`, :func:`period_figures`, :func:`headline`)
check the role and gather the figures (:mod:`shopapp.measures.figures`) and the
lists (:mod:`shopapp.measures.lists`); the SQL they share is
:mod:`shopapp.measures.sql`, periods and scopes :mod:`shopapp.measures.periods`.

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
rates
    every rate is a :class:`~shopapp.measures.stats.Rate`: numerator, denominator,
    value and 95 % Wilson interval (``Figures.rate(name)``); its numerator's jobs are
    always among its denominator's.
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
    of the jobs that first reached ``in_tolerance`` in the period
    (``reached_in_tolerance``), those reworked within ``REWORK_WINDOW_DAYS`` (90)
    days of it and by ``today``: reopened (a transition to ``on_machine`` from
    ``in_tolerance``, ``certified`` or ``dispatched``) or come back as a customer
    return (a return job naming it). A return counts against the job it returns (that
    job's operator, machine, rotor type, customer and month), so the numerator is a
    subset of the denominator. The window keeps old and recent periods comparable; a
    period's rate is final once 90 days have passed since its end. (Until issue 17 the
    rate was reopenings plus returns of the period over the jobs that reached
    tolerance in it, which could exceed 100 %.)
rework_reasons
    the reasons of the period's reopenings, one count per reopening, and the return
    jobs received in the period under "customer return" (with the note they were
    booked in with).
rejected_jobs, jobs_closed, rejection_rate, rejection_reasons
    distinct jobs moved to ``rejected`` in the period, out of the distinct jobs that
    left the shop in it (dispatched or rejected), and the reasons given.
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
``in_tolerance`` for first-pass, cycles and rework, the event for rejection).

Comparison: a period in progress is compared like with like (the same number of days
from the start of the previous period, :meth:`Period.compared_with`); rates are
compared by :mod:`shopapp.measures.signals`. Funnels, control charts, machine time and
drift: :mod:`shopapp.measures.signals`, :mod:`shopapp.measures.costs`,
:mod:`shopapp.measures.drift`; the words people read: :mod:`shopapp.measures.definitions`.
"""

from __future__ import annotations

import datetime as dt
from collections.abc import Sequence
from dataclasses import asdict, dataclass, field
from typing import Any

from sqlalchemy.orm import Session

from shopapp.core.clock import shop_today
from shopapp.core.errors import ValidationFailed
from shopapp.core.permissions import require
from shopapp.core.settings import get_settings
from shopapp.measures.costs import CostSettings, ReworkCost, rework_cost
from shopapp.measures.definitions import DEFINITIONS
from shopapp.measures.drift import Drift, drift
from shopapp.measures.figures import (
    DIMENSION_LABELS,
    DIMENSIONS,
    REWORK_WINDOW_DAYS,
    Figures,
    SliceRow,
    figures_for,
    slice_labels,
    slice_rows,
)
from shopapp.measures.lists import (
    machine_status,
    rejection_reasons,
    rework_reasons,
    rotors_getting_worse,
)
from shopapp.measures.periods import EVERYTHING, Period, Scope
from shopapp.measures.signals import (
    MIN_DAYS_TO_COMPARE,
    Change,
    UnitFunnel,
    comparisons,
    control_charts,
    funnels,
)
from shopapp.measures.stats import CAUTION, PChart
from shopapp.models import User
from shopapp.reports.shop_month import MachineStatus, ReasonCount, WorseningRotor

REASON_ROWS = 50  # reasons listed (most frequent first)


@dataclass
class ShopReport:
    """Everything the dashboard, the CSV files, the JSON and the monthly PDF show."""

    period: Period
    previous_period: Period  # the period compared with (like for like while in progress)
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
    today: dt.date | None = None
    changes: dict[str, Change] = field(default_factory=dict)
    funnels: dict[str, dict[str, UnitFunnel]] = field(default_factory=dict)
    control_charts: dict[str, PChart] = field(default_factory=dict)
    cost: ReworkCost | None = None
    drift: Drift = field(default_factory=Drift)

    @property
    def in_progress(self) -> bool:
        return self.period.in_progress(self.today or self.as_of)

    @property
    def elapsed_days(self) -> int:
        return self.period.elapsed_days(self.today or self.as_of)

    @property
    def period_label(self) -> str:
        """``'November 2026'``, or ``'November 2026 to date'`` while it is in progress."""
        return f"{self.period.label} to date" if self.in_progress else self.period.label

    @property
    def previous_label(self) -> str:
        """The compared period: ``'October 2026'`` or ``'October 2026, days 1–15'``."""
        if not self.in_progress:
            return self.previous_period.label
        whole = self.period.previous()
        if whole.kind == "custom":
            return self.previous_period.label
        return f"{whole.label}, days 1–{self.previous_period.days}"

    @property
    def comparison_note(self) -> str:
        """How the two periods are compared, in words ('' for two whole periods)."""
        if not self.in_progress:
            return ""
        days = self.elapsed_days
        note = (f"{self.period.label} is in progress: its first {days} "
                f"day{'s' if days != 1 else ''} are compared with the same days of "
                f"{self.period.previous().label}")
        if days < MIN_DAYS_TO_COMPARE:
            return note + f"; changes are not judged before {MIN_DAYS_TO_COMPARE} days."
        return note + "."

    @property
    def rework_final_before(self) -> dt.date:
        """Rework of jobs that reached tolerance before this day is final (window closed)."""
        return (self.today or self.as_of) - dt.timedelta(days=REWORK_WINDOW_DAYS)

    def funnel_flags(self) -> list[dict[str, Any]]:
        """Every unit outside its 99.8 % funnel limits: rate, dimension, unit, counts, limits."""
        out = []
        for name, per_dim in self.funnels.items():
            for dim, uf in per_dim.items():
                for u in uf.flagged():
                    row = uf.rows[str(u.key)]
                    out.append({"rate": name, "dimension": dim, "key": row.key,
                                "label": row.label, **u.rate.as_json(),
                                "limits_95": u.as_json()["limits_95"],
                                "limits_99_8": u.as_json()["limits_99_8"],
                                "flag": u.flag, "sentence": u.sentence})
        return out

    def to_json(self) -> dict[str, Any]:
        """Plain JSON data keyed by the measure names; every rate is
        ``{"value", "numerator", "denominator", "interval_95": [low, high]}``."""

        def slice_rows(rows: list[SliceRow]) -> list[dict[str, Any]]:
            return [{"key": r.key, "label": r.label, **r.figures.as_json()} for r in rows]

        return {
            "period": {"start": self.period.start.isoformat(), "end": self.period.end.isoformat(),
                       "label": self.period.label, "in_progress": self.in_progress,
                       "elapsed_days": self.elapsed_days},
            "previous_period": {"start": self.previous_period.start.isoformat(),
                                "end": self.previous_period.end.isoformat(),
                                "like_for_like": self.in_progress},
            "as_of": self.as_of.isoformat(),
            "today": (self.today or self.as_of).isoformat(),
            "scope": self.scope.as_args(),
            **self.figures.as_json(),
            "previous": self.previous.as_json(),
            "changes": {name: c.as_json() for name, c in self.changes.items()},
            "by": {dim: slice_rows(rows) for dim, rows in self.slices.items()},
            "trend": slice_rows(self.trend),
            "funnels": {name: {dim: {"dimension": dim, **uf.funnel.as_json()}
                               for dim, uf in per_dim.items()}
                        for name, per_dim in self.funnels.items()},
            "funnel_flags": self.funnel_flags(),
            "control_charts": {name: c.as_json() for name, c in self.control_charts.items()},
            "rework_cost": self.cost.as_json() if self.cost is not None else None,
            "rework_final_before": self.rework_final_before.isoformat(),
            "drift": self.drift.as_json(),
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
            "definitions": dict(DEFINITIONS),
            "caution": CAUTION,
        }


def _allowed(by: User | None) -> None:
    # None is the command line (``shopapp report shop``): whoever runs it already holds
    # the database; every person in the web app must have ``view_dashboard``.
    if by is not None:
        require(by, "view_dashboard")


#: The scope's fields by the dimension they focus on.
SCOPE_DIMENSIONS: dict[str, str] = {"operator_id": "operator", "machine_id": "machine",
                                    "rotor_type_id": "rotor_type", "customer_id": "customer"}


def known_scope(session: Session, scope: Scope, *, by: User | None
                ) -> tuple[Scope, dict[str, str], list[tuple[str, str]]]:
    """``scope`` without ids that name nothing, each kept id's name (by scope field), and
    (field, why) for each id dropped (one query per field in use)."""
    _allowed(by)
    kept: dict[str, int] = {}
    names: dict[str, str] = {}
    notes: list[tuple[str, str]] = []
    for name, value in scope.as_args().items():
        dim = SCOPE_DIMENSIONS[name]
        label = slice_labels(session, dim, {str(value)}).get(str(value))
        if label is None:
            notes.append((name, f"no {dim.replace('_', ' ')} has the id {value}"))
            continue
        kept[name] = value
        names[name] = label
    return Scope(**kept), names, notes


def period_figures(
    session: Session,
    period: Period,
    *,
    by: User | None,
    scope: Scope = EVERYTHING,
    dimension: str | None = None,
    today: dt.date | None = None,
) -> Figures | list[SliceRow]:
    """The figures of ``period`` as a whole, or one row per slice of ``dimension``."""
    _allowed(by)
    today = today or shop_today()
    as_of = min(period.end, today)
    if dimension is None:
        return figures_for(session, period, scope, ["all"], as_of, today=today).get(
            ("all", None), Figures())
    if dimension not in DIMENSIONS:
        raise ValidationFailed("by", f"'{dimension}' is not one of {', '.join(DIMENSIONS)}")
    merged = figures_for(session, period, scope, [dimension], as_of, today=today)
    return slice_rows(session, merged, dimension, period)


def shop_report(
    session: Session,
    period: Period,
    *,
    by: User | None,
    scope: Scope = EVERYTHING,
    today: dt.date | None = None,
    dimensions: Sequence[str] = DIMENSIONS,
    trend_months: int = 12,
    visits: int = 3,
    costs: CostSettings | None = None,
) -> ShopReport:
    """All the measures of ``period`` (see the module docstring), in a fixed number of queries.

    Queries: five for the period with every slice at once, five for the period it is
    compared with, one for the monthly trend, two reason lists, one for rotors getting
    worse, one for the machines, the settings row, one per labelled dimension, one for
    the machine time and three for the drift — the same count whatever the number of jobs.
    """
    _allowed(by)
    for dim in dimensions:
        if dim not in DIMENSIONS:
            raise ValidationFailed("by", f"'{dim}' is not one of {', '.join(DIMENSIONS)}")
    today = today or shop_today()
    as_of = min(period.end, today)
    prev = period.compared_with(today)
    merged = figures_for(session, period, scope, ["all", *dimensions], as_of, today=today)
    prev_merged = figures_for(session, prev, scope, ["all"], min(prev.end, today), today=today)
    trend_period = period if period.kind == "year" else period.trailing_months(trend_months)
    if trend_period == period and "month" in dimensions:
        trend_merged = merged
    else:
        trend_merged = figures_for(session, trend_period, scope, ["month"], as_of,
                                    families=("tolerance",), today=today)
    settings = get_settings(session)
    slices = {dim: slice_rows(session, merged, dim, period) for dim in dimensions}
    trend = [SliceRow("month", m, m, trend_merged.get(("month", m), Figures()))
             for m in trend_period.months()]
    figures = merged.get(("all", None), Figures())
    previous = prev_merged.get(("all", None), Figures())
    machines = machine_status(session, period, today=today,
                              due_soon_days=int(settings.due_soon_days))
    reasons = rework_reasons(session, period, scope, limit=REASON_ROWS)
    labels = {dim: {r.key: r.label for r in rows} for dim, rows in slices.items()}
    return ShopReport(
        period=period,
        previous_period=prev,
        scope=scope,
        as_of=as_of,
        figures=figures,
        previous=previous,
        slices=slices,
        trend_period=trend_period,
        trend=trend,
        rework_reasons=reasons,
        rejection_reasons=rejection_reasons(session, period, scope),
        rotors_getting_worse=rotors_getting_worse(session, period, scope, visits=visits),
        machines=machines,
        shop_name=settings.shop_name,
        today=today,
        changes=comparisons(figures, previous, elapsed_days=period.elapsed_days(today),
                            in_progress=period.in_progress(today)),
        funnels=funnels(slices, DIMENSION_LABELS),
        control_charts=control_charts(trend),
        cost=rework_cost(session, period, scope, costs or CostSettings(), reasons, labels),
        drift=drift(session, period, scope, machines, today),
    )


@dataclass(frozen=True)
class Headline:
    """The start-page panel: this month so far against the same days of last month, WIP today.

    ``before_period`` is :meth:`Period.compared_with` — like with like: on the 2nd of a
    month the first two days of the month before, never the whole of it.
    """

    month: Period
    before_period: Period
    now: Figures
    before: Figures
    wip_jobs: int
    wip_age_max_wd: int | None

    @property
    def before_label(self) -> str:
        """``'October 2026'`` or ``'1–15 October 2026'`` for a month still in progress."""
        b = self.before_period
        if b.kind == "month":
            return b.label
        return f"{b.start.day}–{b.end.day} {b.start:%B %Y}"


def headline(session: Session, *, by: User | None, today: dt.date | None = None) -> Headline:
    """This month so far against the same days of last month, in five queries."""
    _allowed(by)
    today = today or shop_today()
    month = Period.containing("month", today)
    before = month.compared_with(today)
    families = ("received", "tolerance")
    now = figures_for(session, month, EVERYTHING, ["all"], today, families=families)
    then = figures_for(session, before, EVERYTHING, ["all"], min(before.end, today),
                       families=families)
    wip = figures_for(session, month, EVERYTHING, ["all"], today, families=("wip",))
    wip_fig = wip.get(("all", None), Figures())
    return Headline(
        month=month,
        before_period=before,
        now=now.get(("all", None), Figures()),
        before=then.get(("all", None), Figures()),
        wip_jobs=wip_fig.wip_jobs,
        wip_age_max_wd=wip_fig.wip_age_max_wd,
    )

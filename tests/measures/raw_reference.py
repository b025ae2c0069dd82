"""The shop measures' SQL as it was before the per-job facts (issue 13), kept as the
reference the facts are checked against: each function reads the raw rows (job, rotor,
run, run_reading, correction, job_transition) on every call. Copied unchanged from
shopapp/measures/figures.py, lists.py and drift.py of the commit before the facts; only
the imports are gathered here. Not used by shopapp.
"""

from __future__ import annotations

import datetime as dt
from collections.abc import Sequence
from typing import Any

from sqlalchemy import (
    Float,
    Integer,
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
from sqlalchemy.orm import Session, aliased
from sqlalchemy.sql import ColumnElement

from shopapp.core.errors import ValidationFailed
from shopapp.measures.drift import _JOB_TOLERANCE_COLUMNS, DRIFT_VISITS
from shopapp.measures.figures import REWORK_WINDOW_DAYS
from shopapp.measures.periods import EVERYTHING, Period, Scope
from shopapp.measures.sql import (
    REWORK_FROM_STATES,
    Grouped,
    base_select,
    day_number,
    days_cte,
    epoch_seconds,
    from_days,
    grouped,
    histogram,
    int_div,
    long_form,
    pct_hist,
    rejections,
    scoped,
    utc_start,
    work_day_index_of_day,
    work_day_index_py,
)
from shopapp.models import (
    Correction,
    Customer,
    Job,
    JobTransition,
    Rotor,
    RotorType,
    Run,
    RunReading,
)
from shopapp.reports.shop_month import WorseningRotor

CHECK_PURPOSES: tuple[str, ...] = ("check", "final")


def _received(session: Session, p: Period, scope: Scope, dims: Sequence[str]) -> Grouped:
    base = scoped(
        base_select({"job_id": Job.id}, Job.received_on)
        .where(Job.received_on.between(p.start, p.end)),
        scope,
    )
    long = long_form(base, dims, ["job_id"])
    return grouped(session, long, {"jobs_received": func.count(long.c.job_id)})


def _dispatched(session: Session, p: Period, scope: Scope, dims: Sequence[str]) -> Grouped:
    hit = case(
        (Job.promised_on.is_(None), None),
        (Job.dispatched_on <= Job.promised_on, 1),
        else_=0,
    )
    days = days_cte(scoped(
        base_select({"r": day_number(Job.received_on), "d": day_number(Job.dispatched_on),
                     "hit": hit}, Job.dispatched_on)
        .where(Job.dispatched_on.between(p.start, p.end)),
        scope,
    ))
    turnaround = work_day_index_of_day(days.c.d) - work_day_index_of_day(days.c.r)
    base = from_days(days, {"wd": turnaround, "hit": days.c.hit})
    long = long_form(base, dims, ["wd", "hit"])
    h = histogram(long, "wd", {"pj": func.count(long.c.hit),
                                "ph": func.coalesce(func.sum(long.c.hit), 0)})
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
    # An uncorrelated NOT IN: one pass over the rejections, not one lookup per open job.
    rejected_by_then = Job.id.in_(
        select(JobTransition.job_id).where(
            JobTransition.to_state == "rejected", JobTransition.at < day_after
        )
    )
    days = days_cte(scoped(
        base_select({"r": day_number(Job.received_on)}, Job.received_on).where(
            Job.received_on <= as_of,
            or_(Job.dispatched_on.is_(None), Job.dispatched_on > as_of),
            ~rejected_by_then,
        ),
        scope,
    ))
    base = from_days(days, {"age": work_day_index_py(as_of) - work_day_index_of_day(days.c.r)})
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


def _first_rework(today: dt.date) -> tuple[Any, Any]:
    """Per job, by ``today``: its first reopening from a finished state (``at``) and the
    day its first customer return came in (``received_on``), as two grouped subqueries.

    Every reopening comes after the job first reached ``in_tolerance`` (only a finished
    job can be reopened), so the first one decides whether the job came back within the
    window; one pass over the few reopenings and returns, not one lookup per job.
    """
    reopened = (
        select(JobTransition.job_id.label("job_id"), func.min(JobTransition.at).label("at"))
        .where(JobTransition.to_state == "on_machine",
               JobTransition.from_state.in_(REWORK_FROM_STATES),
               JobTransition.at < utc_start(today + dt.timedelta(days=1)))
        .group_by(JobTransition.job_id)
        .subquery("first_reopen")
    )
    later = aliased(Job)
    returned = (
        select(later.return_of_job_id.label("job_id"),
               func.min(later.received_on).label("received_on"))
        .where(later.kind == "return", later.return_of_job_id.is_not(None),
               later.received_on <= today)
        .group_by(later.return_of_job_id)
        .subquery("first_return")
    )
    return reopened, returned


def _reworked_later(reached: Any, reopened: Any, returned: Any) -> ColumnElement[int]:
    """1 when the job (which first reached in_tolerance at ``reached``) was reworked within
    :data:`REWORK_WINDOW_DAYS` days of it: reopened, or come back as a customer return."""
    in_window = or_(
        epoch_seconds(reopened.c.at) - epoch_seconds(reached) <= REWORK_WINDOW_DAYS * 86400,
        day_number(returned.c.received_on) - int_div(epoch_seconds(reached), 86400)
        <= REWORK_WINDOW_DAYS,
    )
    return case((in_window, 1), else_=0)


def _tolerance_cohort(
    session: Session, p: Period, scope: Scope, dims: Sequence[str], today: dt.date
) -> Grouped:
    """Jobs that first reached in_tolerance in ``p``: count, cycles, first pass, rework."""
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
            check.struck_at.is_(None),
        )
        .order_by(check.seq)
        .limit(1)
        .correlate(Job)
        .scalar_subquery()
    )
    reopened, returned = _first_rework(today)
    base = scoped(
        base_select({"job_id": Job.id, "cycles": cycles, "fp": first_check_verdict,
                     "rw": _reworked_later(reached, reopened, returned)}, reached)
        .outerjoin(reopened, reopened.c.job_id == Job.id)
        .outerjoin(returned, returned.c.job_id == Job.id)
        .where(reached >= utc_start(p.start), reached < utc_start(p.end + dt.timedelta(days=1))),
        scope,
    )
    long = long_form(base, dims, ["job_id", "cycles", "fp", "rw"])
    return grouped(
        session,
        long,
        {
            "reached_in_tolerance": func.count(long.c.job_id),
            "correction_cycles_mean": cast(func.avg(cast(long.c.cycles, Float)), Float),
            "first_pass_judged": func.count(long.c.fp),
            "first_pass_jobs": func.coalesce(func.sum(long.c.fp), 0),
            "reworked_jobs": func.coalesce(func.sum(long.c.rw), 0),
        },
    )


def _closed(session: Session, p: Period, scope: Scope, dims: Sequence[str]) -> Grouped:
    """Jobs that left the shop in ``p``: dispatched or rejected; and those rejected."""
    rej = rejections(p).subquery("rej")
    rejected = scoped(
        base_select({"job_id": Job.id, "rej": literal_column("1", Integer)}, rej.c.at)
        .join(rej, rej.c.job_id == Job.id), scope
    )
    dispatched = scoped(
        base_select({"job_id": Job.id, "rej": literal_column("0", Integer)}, Job.dispatched_on)
        .where(Job.dispatched_on.between(p.start, p.end)), scope
    )
    events = union_all(rejected, dispatched).subquery("closed")
    long = long_form(select(*events.c), dims, ["job_id", "rej"])
    return grouped(
        session,
        long,
        {
            "jobs_closed": func.count(func.distinct(long.c.job_id)),
            "rejected_jobs": func.count(func.distinct(case((long.c.rej == 1, long.c.job_id)))),
        },
    )


def rotors_getting_worse(
    session: Session, p: Period, scope: Scope = EVERYTHING, *, visits: int = 3, limit: int = 50
) -> list[WorseningRotor]:
    """Rotors whose initial unbalance rose over their last ``visits`` visits (see module doc).

    ROW_NUMBER over each rotor's jobs (newest first) keeps its last ``visits`` visits;
    only those visits' first initial runs are read, then one row per rotor holds the
    amplitudes side by side (conditional aggregation) to compare them.
    """
    if visits < 2:
        raise ValidationFailed("visits", f"{visits} visits cannot show a rise; use 2 or more")
    # Only rotors with enough visits, the latest in the period, can qualify.
    candidates = scoped(
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
        .where(Run.job_id == last.c.job_id, Run.purpose == "initial", Run.struck_at.is_(None))
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
            w.rotor_id, Rotor.serial_number, Customer.name.label("customer"),
            RotorType.part_number.label("rotor_type"), w.number, w.received_on, w.unit,
            *(w[f"amp{k}"] for k in range(visits)),
        )
        .join(Rotor, Rotor.id == w.rotor_id)
        .join(Customer, Customer.id == Rotor.customer_id)
        .join(RotorType, RotorType.id == Rotor.rotor_type_id)
        .order_by(w.received_on.desc(), Rotor.serial_number)
        .limit(limit)
    )
    out = []
    for row in session.execute(stmt).mappings():
        received = row["received_on"]
        if isinstance(received, str):  # SQLite returns MAX() over a DATE as text
            received = dt.date.fromisoformat(received)
        oldest_first = tuple(float(row[f"amp{k}"]) for k in reversed(range(visits)))
        out.append(WorseningRotor(row["rotor_id"], row["serial_number"], row["customer"],
                                  row["rotor_type"], row["number"], received, row["unit"],
                                  oldest_first))
    return out


def _visit_rows(session: Session, p: Period, scope: Scope) -> list[Any]:
    """The last :data:`DRIFT_VISITS` visits of every rotor with three or more visits whose
    latest was received in ``p``: per visit its first initial run's plane readings."""
    candidates = scoped(
        select(Job.rotor_id).select_from(Job).join(Rotor, Rotor.id == Job.rotor_id)
        .where(Job.received_on <= p.end).group_by(Job.rotor_id)
        .having(func.count() >= 3, func.max(Job.received_on) >= p.start),
        scope,
    )
    ranked = (
        select(Job.id.label("job_id"), Job.rotor_id, Job.number, Job.received_on,
               *(getattr(Job, c).label(c) for c in _JOB_TOLERANCE_COLUMNS),
               func.row_number().over(partition_by=Job.rotor_id,
                                      order_by=(Job.received_on.desc(), Job.id.desc()))
               .label("rn"))
        .where(Job.received_on <= p.end, Job.rotor_id.in_(candidates))
        .subquery("ranked")
    )
    first_initial = (
        select(Run.id).where(Run.job_id == ranked.c.job_id, Run.purpose == "initial",
                             Run.struck_at.is_(None))
        .order_by(Run.seq).limit(1).correlate(ranked).scalar_subquery()
    )
    visits = (select(ranked, first_initial.label("run_id")).where(ranked.c.rn <= DRIFT_VISITS)
              .cte("drift_visits").prefix_with("MATERIALIZED"))
    v = visits.c
    stmt = (
        select(
            v.rotor_id, v.job_id, v.number, v.received_on,
            *(v[c] for c in _JOB_TOLERANCE_COLUMNS),
            Rotor.serial_number, Rotor.rotor_type_id, Customer.name.label("customer"),
            RotorType.part_number.label("part_number"),
            func.max(case((RunReading.plane == 1, RunReading.amplitude))).label("amp1"),
            func.max(case((RunReading.plane == 2, RunReading.amplitude))).label("amp2"),
            func.min(RunReading.unit).label("unit"),
            func.max(RunReading.unit).label("unit_max"),
        )
        .select_from(visits)
        .join(RunReading, RunReading.run_id == v.run_id)
        .join(Rotor, Rotor.id == v.rotor_id)
        .join(Customer, Customer.id == Rotor.customer_id)
        .join(RotorType, RotorType.id == Rotor.rotor_type_id)
        .group_by(v.rotor_id, v.job_id, v.number, v.received_on,
                  *(v[c] for c in _JOB_TOLERANCE_COLUMNS), Rotor.serial_number,
                  Rotor.rotor_type_id, Customer.name, RotorType.part_number)
        .order_by(v.rotor_id, v.received_on, v.job_id)
    )
    return list(session.execute(stmt))

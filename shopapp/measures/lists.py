"""The shop measures' lists: rework and rejection reasons, rotors getting worse, machines.

Each list is one query (definitions in :mod:`shopapp.measures.services`); its rows
are the plain data of :mod:`shopapp.reports.shop_month`, which prints them.
"""

from __future__ import annotations

import datetime as dt
from typing import Any

from sqlalchemy import (
    and_,
    case,
    false,
    func,
    or_,
    select,
    union_all,
)
from sqlalchemy.orm import Session
from sqlalchemy.sql import ColumnElement

from shopapp.core.errors import ValidationFailed
from shopapp.measures.periods import EVERYTHING, Period, Scope
from shopapp.measures.sql import (
    day_number,
    rejections,
    reopen_reason,
    reopenings,
    return_reason,
    scoped,
    scoped_facts,
    utc_start,
)
from shopapp.models import (
    Customer,
    Job,
    JobFact,
    Machine,
    MachineVerification,
    Rotor,
    RotorType,
    RunFact,
)
from shopapp.reports.shop_month import MachineStatus, ReasonCount, WorseningRotor


def rework_reasons(
    session: Session, p: Period, scope: Scope = EVERYTHING, *, limit: int = 20
) -> list[ReasonCount]:
    """Reopen reasons of the period (one per reopening) and returns received in it (under
    "customer return", with the note they were booked in with), most frequent first."""
    reopen = reopenings(p).subquery("reopen")
    reason = reopen_reason(reopen.c.reason)
    reopen_stmt = scoped(
        select(reason.label("reason"), func.count().label("n"))
        .select_from(Job)
        .join(Rotor, Rotor.id == Job.rotor_id)
        .join(reopen, reopen.c.job_id == Job.id),
        scope,
    ).group_by(reason)
    returned = return_reason(Job.notes)
    returns_stmt = scoped(
        select(returned.label("reason"), func.count().label("n"))
        .select_from(Job)
        .join(Rotor, Rotor.id == Job.rotor_id)
        .where(Job.kind == "return", Job.received_on.between(p.start, p.end)),
        scope,
    ).group_by(returned)
    both = union_all(reopen_stmt, returns_stmt).subquery("reasons")
    stmt = (
        select(both.c.reason, func.sum(both.c.n).label("n"))
        .group_by(both.c.reason)
        .having(func.sum(both.c.n) > 0)
        .order_by(func.sum(both.c.n).desc(), both.c.reason)
        .limit(limit)
    )
    return [ReasonCount(row["reason"], int(row["n"])) for row in session.execute(stmt).mappings()]


def rejection_reasons(
    session: Session, p: Period, scope: Scope = EVERYTHING, *, limit: int = 20
) -> list[ReasonCount]:
    """Reasons given when jobs were rejected in the period, most frequent first."""
    rej = rejections(p).subquery("rej")
    text = func.trim(case((func.trim(rej.c.reason) != "", rej.c.reason), else_=Job.reject_reason))
    label = case((text == "", "(no reason given)"), else_=text)
    stmt = (
        scoped(
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
    return [ReasonCount(row["reason"], int(row["n"])) for row in session.execute(stmt).mappings()]


def rotors_getting_worse(
    session: Session, p: Period, scope: Scope = EVERYTHING, *, visits: int = 3, limit: int = 50
) -> list[WorseningRotor]:
    """Rotors whose initial unbalance rose over their last ``visits`` visits (see module doc).

    ROW_NUMBER over each candidate rotor's job facts (newest first) keeps its last
    ``visits`` visits with their first initial run's reading (kept in the facts), then one
    row per rotor holds the amplitudes side by side (conditional aggregation).
    """
    if visits < 2:
        raise ValidationFailed("visits", f"{visits} visits cannot show a rise; use 2 or more")
    F = JobFact
    # Only rotors with enough visits, the latest in the period, can qualify: those with a
    # visit in the period (index on received_on), their visits counted through
    # (rotor_id, received_on) — never the whole history.
    # Each step is a materialised CTE joined, not a nested IN: PostgreSQL without fresh
    # statistics once planned the IN as a subplan re-run per fact row (minutes on a test
    # shop); a CTE is evaluated once on either database.
    in_period = (scoped_facts(
        select(F.rotor_id).where(F.received_on.between(p.start, p.end)), scope)
        .distinct().cte("worse_in_period").prefix_with("MATERIALIZED"))
    candidates = (scoped_facts(
        select(F.rotor_id)
        .join(in_period, in_period.c.rotor_id == F.rotor_id)
        .where(F.received_on <= p.end)
        .group_by(F.rotor_id)
        .having(func.count() >= visits, func.max(F.received_on) >= p.start),
        scope,
    ).cte("worse_candidates").prefix_with("MATERIALIZED"))
    ranked = (
        select(
            F.job_id, F.rotor_id, F.received_on,
            F.initial_amplitude.label("amp"), F.initial_unit.label("unit"),
            F.initial_units.label("units"),
            func.row_number()
            .over(partition_by=F.rotor_id, order_by=(F.received_on.desc(), F.job_id.desc()))
            .label("rn"),
        )
        .join(candidates, candidates.c.rotor_id == F.rotor_id)
        .where(F.received_on <= p.end)
        .subquery("ranked_visits")
    )
    # A visit whose first initial run has no readings cannot be compared (count < visits).
    per_visit = (select(ranked, Job.number)
                 .join(Job, Job.id == ranked.c.job_id)
                 .where(ranked.c.rn <= visits, ranked.c.units > 0)
                 .subquery("per_visit"))
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


def machine_status(
    session: Session, p: Period, *, today: dt.date, due_soon_days: int
) -> list[MachineStatus]:
    """Utilisation in the period and verification status today, one row per machine."""
    start, stop = utc_start(p.start), utc_start(p.end + dt.timedelta(days=1))
    # Runs not struck out, from the run facts' covering index; counted per job first so
    # each job's machine is looked up once.
    per_job = (
        select(RunFact.job_id, func.count().label("runs"))
        .where(RunFact.taken_at >= start, RunFact.taken_at < stop)
        .group_by(RunFact.job_id)
        .subquery("per_job")
    )
    use = (
        select(
            JobFact.machine_id.label("machine_id"),
            func.sum(per_job.c.runs).label("runs"),
            func.count().label("jobs"),
        )
        .select_from(per_job)
        .join(JobFact, JobFact.job_id == per_job.c.job_id)
        .where(JobFact.machine_id.is_not(None))
        .group_by(JobFact.machine_id)
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
            Machine.id, Machine.name, func.coalesce(use.c.jobs, 0).label("jobs"),
            func.coalesce(use.c.runs, 0).label("runs"), last.c.performed_on,
            Machine.verification_interval_days, status.label("status"),
        )
        .outerjoin(use, use.c.machine_id == Machine.id)
        .outerjoin(last, last.c.machine_id == Machine.id)
        .where(or_(Machine.archived == false(), use.c.runs.is_not(None)))
        .order_by(Machine.name)
    )
    out = []
    for row in session.execute(stmt).mappings():
        last_on = row["performed_on"]
        due = (last_on + dt.timedelta(days=int(row["verification_interval_days"]))
               if last_on else None)
        out.append(MachineStatus(row["id"], row["name"], int(row["jobs"]), int(row["runs"]),
                                 last_on, due, row["status"]))
    return out
